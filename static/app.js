// trapwise page: the upload form, the result of one calibration with its plots, the history of
// a trap and the overview of every instrument's traps, as four views of one page chosen by the
// address fragment (#/, #/calibrations/ID, #/history/INSTRUMENT/TRAP, #/overview).
//
// Why this shape: the page is plain HTML, CSS and this one ES module, with no build step and
// nothing fetched from elsewhere. It talks to the service only through the documented /api/v1
// routes (see /api/v1/openapi.json). Plots are inline SVG drawn here by hand, so every point and
// curve is an element the browser tests can count (data-series="data", "model", ...). The run
// settings on the upload form are made from the service's settings table (/api/v1/settings), so
// every setting the service takes has a control here, with the table's label, unit and help.
//
// Conventions: numbers arrive in the units their JSON names state (stiffness_pn_per_nm,
// corner_frequency_hz, relaxation_time_s, lag_s); the page shows them in the same units except
// the relaxation time and the lag, shown in milliseconds. Every number element carries the API's
// exact value in data-value. DOM text is set with textContent only, never parsed as HTML.

const API = "/api/v1";
const FIELDS_KEY = "trapwise.page.fields/1";
const TOKEN_KEY = "trapwise.page.token/1";
const SVG_NS = "http://www.w3.org/2000/svg";

/** Label fields remembered between visits (the run settings are remembered too). */
const REMEMBERED_LABELS = ["instrument", "trap", "axes"];
/** Label fields sent with an upload, before the run settings and the file. */
const SENT_LABELS = [...REMEMBERED_LABELS, "note"];
/**
 * The run settings as the service's settings table states them (GET /api/v1/settings):
 * [{key, label, kind, unit, help, required, default, choices?, ...}], empty until loaded.
 */
let SETTINGS = [];
/** Runs before a point that define the "recent spread" band of the history plot. */
const SPREAD_RUNS = 5;

// ---------------------------------------------------------------------------------------------
// Small DOM helpers

/** An HTML element with attributes and children (strings become text nodes). */
function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  setAttrs(node, attrs);
  append(node, children);
  return node;
}

/** An SVG element with attributes and children. */
function svg(tag, attrs = {}, ...children) {
  const node = document.createElementNS(SVG_NS, tag);
  setAttrs(node, attrs);
  append(node, children);
  return node;
}

function setAttrs(node, attrs) {
  for (const [k, v] of Object.entries(attrs)) {
    if (v === undefined || v === null || v === false) continue;
    if (k === "text") node.textContent = v;
    else if (k.startsWith("on") && typeof v === "function") node.addEventListener(k.slice(2), v);
    else node.setAttribute(k, v === true ? "" : String(v));
  }
}

function append(node, children) {
  for (const c of children.flat()) {
    if (c === undefined || c === null || c === false) continue;
    node.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
}

const $ = (id) => document.getElementById(id);

/** Replaces the children of `node` (arrays of children are flattened, as in `el`). */
function fill(node, ...children) {
  node.replaceChildren();
  append(node, children);
}

// ---------------------------------------------------------------------------------------------
// Number and date formatting

/** `v` with `digits` significant digits; an em dash for a missing or non-finite value. */
function fmt(v, digits = 4) {
  if (typeof v !== "number" || !Number.isFinite(v)) return "—";
  if (v === 0) return "0";
  const a = Math.abs(v);
  if (a >= 1e6 || a < 1e-4) return v.toExponential(digits - 1).replace("e+", "e");
  // toPrecision writes 20000 as 2.000e+4: whole numbers below a million are written out.
  if (a >= 10 ** digits) return v.toFixed(0);
  return v.toPrecision(digits);
}

function fmtDate(ms) {
  const d = new Date(ms);
  return d.toLocaleString(undefined, { dateStyle: "medium", timeStyle: "medium" });
}

/** A time-axis tick label as precise as a span of `spanMs` needs. */
function fmtTick(ms, spanMs) {
  const d = new Date(ms);
  if (spanMs < 60e3) return d.toLocaleTimeString(undefined, { hour: "2-digit", minute: "2-digit", second: "2-digit", fractionalSecondDigits: 1 });
  if (spanMs < 10 * 60e3) return d.toLocaleTimeString(undefined, { hour: "2-digit", minute: "2-digit", second: "2-digit" });
  if (spanMs < 2 * 86400e3) return d.toLocaleTimeString(undefined, { hour: "2-digit", minute: "2-digit" });
  return d.toLocaleDateString(undefined, { month: "short", day: "numeric" });
}

const SUPERSCRIPT = { "-": "⁻", 0: "⁰", 1: "¹", 2: "²", 3: "³", 4: "⁴", 5: "⁵", 6: "⁶", 7: "⁷", 8: "⁸", 9: "⁹" };
/** 10^k written with superscript digits. */
function powerOfTen(k) {
  return "10" + String(k).split("").map((c) => SUPERSCRIPT[c] ?? c).join("");
}

/** "nm^2/Hz"-style unit text with a superscript two. */
function unitText(unit) {
  return unit.replace("^2", "²");
}

// ---------------------------------------------------------------------------------------------
// The API

/** A problem document (RFC 9457) or a transport failure, as an exception. */
class ProblemError extends Error {
  constructor(status, problem) {
    super(problem.detail || problem.title || `status ${status}`);
    this.status = status;
    this.problem = problem;
  }
}

function token() {
  return localStorage.getItem(TOKEN_KEY) || "";
}

function authHeaders() {
  const t = token();
  return t ? { Authorization: `Bearer ${t}` } : {};
}

/** Parses an answer's body as a problem document, or makes one from the status. */
function problemFrom(status, contentType, text) {
  if (contentType.includes("json")) {
    try {
      const p = JSON.parse(text);
      if (p && typeof p === "object") return p;
    } catch (_) {
      // fall through to a made-up problem
    }
  }
  return {
    title: `the service answered ${status}`,
    detail: text && text.length < 300 ? text : "no problem document came with the answer",
    status,
  };
}

async function getJson(path) {
  let response;
  try {
    response = await fetch(path, { headers: { Accept: "application/json", ...authHeaders() } });
  } catch (e) {
    throw new ProblemError(0, { title: "the service cannot be reached", detail: String(e.message || e) });
  }
  const text = await response.text();
  if (!response.ok) {
    throw new ProblemError(response.status, problemFrom(response.status, response.headers.get("content-type") || "", text));
  }
  return JSON.parse(text);
}

/**
 * Click handler of the links to API documents (raw recording, JSON). A plain link cannot carry
 * the access token, so on a server that wants one the answer would be 401: with a token set,
 * the document is fetched with the token instead and handed to the browser as a download under
 * `fileName`; the outcome is written to the status line `[data-link-status]`. Without a token
 * the link works as a link.
 */
function tokenLink(fileName) {
  return async (event) => {
    if (!token()) return;
    event.preventDefault();
    const a = event.currentTarget;
    const status = document.querySelector("[data-link-status]");
    const say = (text, state) => {
      if (!status) return;
      status.textContent = text;
      status.dataset.state = state;
    };
    say(`Fetching ${fileName} …`, "busy");
    let response;
    try {
      response = await fetch(a.href, { headers: authHeaders() });
    } catch (e) {
      say(`${fileName}: the service cannot be reached (${e.message || e})`, "error");
      return;
    }
    if (!response.ok) {
      const p = problemFrom(response.status, response.headers.get("content-type") || "", await response.text());
      say(`${fileName}: ${p.detail || p.title || `status ${response.status}`} (${response.status})`, "error");
      return;
    }
    const blob = await response.blob();
    const url = URL.createObjectURL(blob);
    const save = el("a", { href: url, download: fileName, hidden: true });
    document.body.append(save);
    save.click();
    save.remove();
    setTimeout(() => URL.revokeObjectURL(url), 60_000);
    if (status) status.dataset.bytes = String(blob.size);
    say(`Saved ${fileName} (${blob.size.toLocaleString()} bytes, fetched with the access token).`, "done");
  };
}

const enc = encodeURIComponent;
const historyApi = (instrument, trap) => `${API}/instruments/${enc(instrument)}/traps/${enc(trap)}/history`;
const historyHash = (instrument, trap) => `#/history/${enc(instrument)}/${enc(trap)}`;
const resultHash = (id) => `#/calibrations/${enc(id)}`;

// ---------------------------------------------------------------------------------------------
// Views and routing

const VIEWS = ["upload", "result", "history", "overview"];

function showView(name) {
  for (const v of VIEWS) $(`view-${v}`).hidden = v !== name;
  for (const a of document.querySelectorAll("[data-nav]")) {
    if (a.dataset.nav === name) a.setAttribute("aria-current", "page");
    else a.removeAttribute("aria-current");
  }
}

/** A view section emptied and marked loading. */
function startView(name, message) {
  showView(name);
  const section = $(`view-${name}`);
  section.dataset.state = "loading";
  fill(section, el("p", { class: "loading", text: message }));
  return section;
}

function failView(section, error) {
  const p = error.problem || { title: "the page failed", detail: String(error) };
  fill(section, 
    el("h1", { text: "Not available" }),
    el("p", { class: "form-error", role: "alert" }, el("strong", { text: p.title }), p.detail ? `: ${p.detail}` : ""),
    el("p", {}, el("a", { href: "#/", text: "Back to the upload" })),
  );
  section.dataset.state = "error";
}

function finishView(section, title) {
  section.dataset.state = "ready";
  document.title = `${title} · trapwise`;
  const h1 = section.querySelector("h1");
  if (h1) {
    h1.setAttribute("tabindex", "-1");
    h1.focus({ preventScroll: true });
  }
}

async function route() {
  const hash = location.hash || "#/";
  const parts = hash.replace(/^#\/?/, "").split("/").map((s) => {
    try {
      return decodeURIComponent(s);
    } catch (_) {
      return s;
    }
  });
  window.scrollTo(0, 0);
  if (parts[0] === "calibrations" && parts[1]) return showResult(parts[1]);
  if (parts[0] === "history" && parts.length >= 3) return showHistory(parts[1], parts[2]);
  if (parts[0] === "overview") return showOverview();
  showView("upload");
  document.title = "Calibrate a run · trapwise";
}

// ---------------------------------------------------------------------------------------------
// Upload

/** The text a control holds: a checkbox gives "true" or "", others their value. */
function controlText(control) {
  return control.type === "checkbox" ? (control.checked ? "true" : "") : control.value;
}

function setControlText(control, text) {
  if (control.type === "checkbox") control.checked = text === "true";
  else control.value = text;
}

function storedFields() {
  try {
    const values = JSON.parse(localStorage.getItem(FIELDS_KEY) || "{}");
    return values && typeof values === "object" ? values : {};
  } catch (_) {
    return {};
  }
}

function saveToken() {
  try {
    localStorage.setItem(TOKEN_KEY, $("f-token").value.trim());
  } catch (_) {
    // Storage may be full or disabled; remembering is a convenience only.
  }
}

/** Remembers the labels and every run setting on the form (others stored before are kept). */
function rememberFields() {
  const values = storedFields();
  for (const name of [...REMEMBERED_LABELS, ...SETTINGS.map((s) => s.key)]) {
    const control = $(`f-${name}`);
    if (control) values[name] = controlText(control);
  }
  try {
    localStorage.setItem(FIELDS_KEY, JSON.stringify(values));
  } catch (_) {
    // As above.
  }
  saveToken();
}

/** Puts the remembered values of `names` back into their controls. */
function restoreFields(names) {
  const values = storedFields();
  for (const name of names) {
    const control = $(`f-${name}`);
    if (control && typeof values[name] === "string") setControlText(control, values[name]);
  }
}

// ---------------------------------------------------------------------------------------------
// Run-setting controls, made from the settings table

/** "Bead diameter (µm)". */
function settingLabel(spec) {
  return spec.unit ? `${spec.label} (${spec.unit})` : spec.label;
}

/** The hint under a setting's control: what it does, and its default or that it is required. */
function settingHint(spec) {
  return spec.required ? `${spec.help} Required.` : `${spec.help} Default: ${spec.default}.`;
}

/**
 * One setting's control with its label, hint and error slot: a checkbox for a boolean, a
 * select for a choice (the empty option leaves the default), a text input otherwise. Ids are
 * f-KEY, hint-KEY and err-KEY, as for the fixed fields, so problems find their control.
 */
function settingField(spec) {
  const id = `f-${spec.key}`;
  const describedBy = `hint-${spec.key} err-${spec.key}`;
  const hint = el("p", { class: "hint", id: `hint-${spec.key}`, text: settingHint(spec) });
  const error = el("p", { class: "field-error", id: `err-${spec.key}`, hidden: true });
  if (spec.kind === "boolean") {
    return el("div", { class: "field field-check", "data-setting": spec.key },
      el("div", { class: "check-row" },
        el("input", { type: "checkbox", id, name: spec.key, value: "true", "aria-describedby": describedBy }),
        el("label", { for: id, text: settingLabel(spec) })),
      hint, error);
  }
  let control;
  if (spec.kind === "choice") {
    control = el("select", { id, name: spec.key, "aria-describedby": describedBy },
      el("option", { value: "", text: spec.required ? "Choose …" : `Default: ${spec.default}` }),
      (spec.choices || []).map((c) => el("option", { value: c, text: c })));
  } else {
    const inputmode = { number: "decimal", count: "numeric" }[spec.kind];
    control = el("input", {
      id, name: spec.key, autocomplete: "off", inputmode, required: spec.required,
      "aria-describedby": describedBy,
    });
  }
  return el("div", { class: "field", "data-setting": spec.key },
    el("label", { for: id, text: settingLabel(spec) }), control, hint, error);
}

/** Builds the controls of every setting: those named by #settings-main there, the rest below. */
function buildSettings() {
  const main = $("settings-main");
  const mainKeys = (main.dataset.keys || "").split(/\s+/).filter(Boolean);
  const more = $("settings-more");
  fill(main, SETTINGS.filter((s) => mainKeys.includes(s.key)).map(settingField));
  fill(more, SETTINGS.filter((s) => !mainKeys.includes(s.key)).map(settingField));
  restoreFields(SETTINGS.map((s) => s.key));
}

/**
 * Loads the settings table and builds the controls. On a server that wants a token this fails
 * until one is given; the status line says so, and giving the token loads them (see start).
 */
async function loadSettings() {
  const form = $("upload-form");
  const status = $("settings-status");
  form.dataset.settings = "loading";
  status.hidden = false;
  status.textContent = "Loading the run settings …";
  try {
    const doc = await getJson(`${API}/settings`);
    SETTINGS = Array.isArray(doc.settings) ? doc.settings : [];
  } catch (e) {
    const p = e.problem || { title: String(e) };
    const fix = e.status === 401 ? " Give the access token under “More settings and access”." : "";
    status.textContent = `The run settings could not be loaded: ${p.title}${p.detail ? `: ${p.detail}` : ""}.${fix}`;
    status.dataset.code = p.code || "";
    form.dataset.settings = "error";
    if (e.status === 401) $("more-settings").open = true;
    return;
  }
  buildSettings();
  status.hidden = true;
  form.dataset.settings = "ready";
}

function showFileName() {
  const file = $("f-file").files[0];
  const label = $("file-name");
  label.textContent = file ? `${file.name} (${fmtBytes(file.size)})` : "No file chosen";
  label.classList.toggle("has-file", Boolean(file));
}

function fmtBytes(n) {
  if (n < 1024) return `${n} B`;
  if (n < 1024 * 1024) return `${(n / 1024).toFixed(1)} kB`;
  return `${(n / 1024 / 1024).toFixed(1)} MB`;
}

function clearErrors() {
  for (const p of document.querySelectorAll("#upload-form .field-error")) {
    p.hidden = true;
    p.replaceChildren();
  }
  for (const i of document.querySelectorAll("#upload-form [aria-invalid]")) i.removeAttribute("aria-invalid");
  $("dropzone").classList.remove("is-invalid");
  $("form-error").hidden = true;
  $("form-error").replaceChildren();
}

/** The form field a problem is about: its own field, the token, the file, or none. */
function problemTarget(status, problem) {
  const field = typeof problem.field === "string" ? problem.field : "";
  if (field && $(`f-${field}`) && $(`err-${field}`)) return field;
  if (status === 401) return "token";
  if (field) return null;
  // Problems without a field about the body are about the recording: its sending (408
  // stalled), its size (413), its format (415), its contents (400 from the readers, 422 from
  // the calibration).
  if ([400, 408, 413, 415, 422].includes(status)) return "file";
  return null;
}

const FIELD_NAMES = {
  file: "the recording", token: "Access token", instrument: "Instrument", trap: "Trap", note: "Note",
  axes: "Axis names",
};

/** The name of a field for people: a fixed field's, or the setting's label. */
function fieldName(name) {
  const spec = SETTINGS.find((s) => s.key === name);
  return FIELD_NAMES[name] || (spec ? spec.label : name);
}

function showProblem(status, problem) {
  const target = problemTarget(status, problem);
  const message = [el("strong", { text: problem.title || `status ${status}` }), problem.detail ? `: ${problem.detail}` : ""];
  const summary = $("form-error");
  if (target) {
    const slot = $(`err-${target}`);
    slot.replaceChildren(...message);
    slot.hidden = false;
    slot.dataset.code = problem.code || "";
    const input = $(`f-${target}`);
    input.setAttribute("aria-invalid", "true");
    if (target === "file") $("dropzone").classList.add("is-invalid");
    if (input.closest("details")) input.closest("details").open = true;
    summary.replaceChildren(`The upload was refused (${status}); see the message at ${fieldName(target)}.`);
    summary.hidden = false;
    input.focus({ preventScroll: true });
    (target === "file" ? $("dropzone") : input).scrollIntoView({ block: "center" });
  } else {
    summary.replaceChildren(...message);
    summary.dataset.code = problem.code || "";
    summary.hidden = false;
  }
}

function setBusy(busy) {
  $("submit").disabled = busy;
  $("progress-box").hidden = !busy;
}

function setProgress(fraction, text) {
  const bar = $("progress");
  if (fraction === null) bar.removeAttribute("value");
  else bar.value = Math.round(fraction * 100);
  $("progress-label").textContent = text;
}

function submitUpload(event) {
  event.preventDefault();
  clearErrors();
  rememberFields();
  const form = new FormData();
  for (const name of SENT_LABELS) {
    const value = $(`f-${name}`).value.trim();
    if (value) form.append(name, value);
  }
  // Every setting with a control, in the table's order. An unticked box is sent as false only
  // when its default is true; otherwise it is left out, as the service takes a default of false
  // anyway, and a box without a stated default (decimal_comma, told from the file) must stay
  // unset rather than be forced to false.
  for (const spec of SETTINGS) {
    const control = $(`f-${spec.key}`);
    if (!control) continue;
    let value = controlText(control).trim();
    if (control.type === "checkbox" && !value && spec.default === "true") value = "false";
    if (value) form.append(spec.key, value);
  }
  const file = $("f-file").files[0];
  if (file) form.append("file", file, file.name);
  // XMLHttpRequest, because fetch reports no upload progress.
  const xhr = new XMLHttpRequest();
  xhr.open("POST", `${API}/calibrations`);
  xhr.setRequestHeader("Accept", "application/json");
  for (const [k, v] of Object.entries(authHeaders())) xhr.setRequestHeader(k, v);
  xhr.upload.addEventListener("progress", (e) => {
    if (e.lengthComputable) setProgress(e.loaded / e.total, `Uploading ${Math.round((100 * e.loaded) / e.total)} %`);
  });
  xhr.upload.addEventListener("load", () => setProgress(null, "Calibrating…"));
  xhr.addEventListener("load", () => {
    setBusy(false);
    if (xhr.status === 200 || xhr.status === 201) {
      try {
        const doc = JSON.parse(xhr.responseText);
        location.hash = resultHash(doc.id);
      } catch (_) {
        showProblem(0, { title: "unreadable answer", detail: "the service's answer is not JSON" });
      }
      return;
    }
    showProblem(xhr.status, problemFrom(xhr.status, xhr.getResponseHeader("content-type") || "", xhr.responseText));
  });
  xhr.addEventListener("error", () => {
    setBusy(false);
    showProblem(0, { title: "the service cannot be reached", detail: "the connection failed before an answer came; check the network and retry" });
  });
  setBusy(true);
  setProgress(0, "Uploading 0 %");
  xhr.send(form);
}

function setUpDropzone() {
  const zone = $("dropzone");
  const input = $("f-file");
  input.addEventListener("change", showFileName);
  for (const type of ["dragenter", "dragover"]) {
    zone.addEventListener(type, (e) => {
      e.preventDefault();
      zone.classList.add("is-dragging");
    });
  }
  for (const type of ["dragleave", "dragend"]) zone.addEventListener(type, () => zone.classList.remove("is-dragging"));
  zone.addEventListener("drop", (e) => {
    e.preventDefault();
    zone.classList.remove("is-dragging");
    if (e.dataTransfer && e.dataTransfer.files.length > 0) {
      input.files = e.dataTransfer.files;
      showFileName();
    }
  });
  // A file dropped beside the zone would otherwise replace the page.
  window.addEventListener("dragover", (e) => e.preventDefault());
  window.addEventListener("drop", (e) => e.preventDefault());
}

// ---------------------------------------------------------------------------------------------
// Charts: inline SVG on linear or logarithmic axes

/** Ticks at 1, 2 or 5 times a power of ten covering [lo, hi] (common practice). */
function linearTicks(lo, hi, target = 5) {
  const span = hi - lo;
  if (!(span > 0)) return [lo];
  const raw = span / target;
  const mag = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 5, 10].map((m) => m * mag).find((s) => s >= raw) || 10 * mag;
  const ticks = [];
  for (let t = Math.ceil(lo / step) * step; t <= hi + step * 1e-9; t += step) ticks.push(Math.abs(t) < step * 1e-9 ? 0 : t);
  return ticks;
}

/** Decade ticks 10^k labelled as powers; over three decades or less also 2 and 5 times them. */
function logTicks(lo, hi) {
  const ticks = [];
  const a = Math.floor(Math.log10(lo));
  const b = Math.ceil(Math.log10(hi));
  const every = Math.max(1, Math.ceil((b - a + 1) / 7));
  const minor = b - a <= 3;
  for (let k = a; k <= b; k += every) {
    for (const m of minor ? [1, 2, 5] : [1]) {
      const v = m * 10 ** k;
      if (v >= lo * (1 - 1e-9) && v <= hi * (1 + 1e-9)) ticks.push({ v, text: m === 1 ? powerOfTen(k) : `${m}·${powerOfTen(k)}` });
    }
  }
  return ticks;
}

/** Labels for linear ticks with the decimals their spacing needs. */
function linearLabel(step) {
  if (!(step > 0)) return (v) => fmt(v, 3);
  const exp = Math.floor(Math.log10(step));
  if (exp >= 6 || exp < -4) return (v) => fmt(v, 3);
  const decimals = Math.max(0, -exp);
  return (v) => v.toFixed(decimals);
}

/** [min, max] of the finite (and, for log axes, positive) values. */
function extent(values, log) {
  let lo = Infinity;
  let hi = -Infinity;
  for (const v of values) {
    if (!Number.isFinite(v) || (log && v <= 0)) continue;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  if (lo === Infinity) return log ? [1, 10] : [0, 1];
  if (lo === hi) return log ? [lo / 2, hi * 2] : [lo - Math.abs(lo || 1) * 0.1, hi + Math.abs(hi || 1) * 0.1];
  return [lo, hi];
}

function padLinear([lo, hi], frac = 0.06) {
  const pad = (hi - lo) * frac;
  return [lo - pad, hi + pad];
}

function padLog([lo, hi], frac = 0.06) {
  const f = (Math.log10(hi) - Math.log10(lo)) * frac;
  return [lo / 10 ** f, hi * 10 ** f];
}

/**
 * An SVG chart frame. Returns {node, sx, sy, plot} where sx and sy map data to pixels and plot
 * is the group to draw series into. x and y are {domain, log, label, ticks?, tickFormat?}.
 */
function chart({ width = 560, height = 300, x, y, label, margin = {} }) {
  const m = { l: 70, r: 14, t: 12, b: 44, ...margin };
  const w = width - m.l - m.r;
  const h = height - m.t - m.b;
  const scale = (axis, size, flip) => {
    const [d0, d1] = axis.domain;
    const f = axis.log ? Math.log10 : (v) => v;
    const a = f(d0);
    const b = f(d1);
    return (v) => {
      const t = (f(v) - a) / (b - a || 1);
      return flip ? m.t + size * (1 - t) : m.l + size * t;
    };
  };
  const sx = scale(x, w, false);
  const sy = scale(y, h, true);
  const node = svg("svg", { viewBox: `0 0 ${width} ${height}`, role: "img", "aria-label": label });
  node.append(svg("title", { text: label }));
  const grid = svg("g", { class: "grid" });
  const axes = svg("g", { class: "axes" });
  const tickSet = (axis) => {
    if (axis.ticks) {
      const step = axis.ticks.length > 1 ? axis.ticks[1] - axis.ticks[0] : 0;
      return axis.ticks.map((t) => ({ v: t, text: (axis.tickFormat || linearLabel(step))(t) }));
    }
    if (axis.log) return logTicks(...axis.domain);
    const ticks = linearTicks(...axis.domain);
    const label = axis.tickFormat || linearLabel(ticks.length > 1 ? ticks[1] - ticks[0] : 0);
    return ticks.map((t) => ({ v: t, text: label(t) }));
  };
  for (const t of tickSet(x)) {
    const px = sx(t.v);
    grid.append(svg("line", { class: "grid-line", x1: px, x2: px, y1: m.t, y2: m.t + h }));
    axes.append(svg("text", { class: "tick-label", x: px, y: m.t + h + 15, "text-anchor": "middle", text: t.text }));
  }
  for (const t of tickSet(y)) {
    const py = sy(t.v);
    grid.append(svg("line", { class: "grid-line", x1: m.l, x2: m.l + w, y1: py, y2: py }));
    axes.append(svg("text", { class: "tick-label", x: m.l - 6, y: py + 4, "text-anchor": "end", text: t.text }));
  }
  axes.append(svg("line", { class: "axis-line", x1: m.l, x2: m.l + w, y1: m.t + h, y2: m.t + h }));
  axes.append(svg("line", { class: "axis-line", x1: m.l, x2: m.l, y1: m.t, y2: m.t + h }));
  axes.append(svg("text", { class: "axis-label", x: m.l + w / 2, y: height - 6, "text-anchor": "middle", text: x.label }));
  axes.append(svg("text", {
    class: "axis-label", x: 14, y: m.t + h / 2, "text-anchor": "middle",
    transform: `rotate(-90 14 ${m.t + h / 2})`, text: y.label,
  }));
  const clipId = `clip-${Math.random().toString(36).slice(2)}`;
  node.append(svg("defs", {}, svg("clipPath", { id: clipId }, svg("rect", { x: m.l, y: m.t, width: w, height: h }))));
  const plot = svg("g", { "clip-path": `url(#${clipId})` });
  node.append(grid, plot, axes);
  return { node, sx, sy, plot, box: { x: m.l, y: m.t, w, h } };
}

/** Finite (and, on log axes, positive) pairs of two arrays. */
function pairs(xs, ys, xLog, yLog) {
  const out = [];
  const n = Math.min(xs.length, ys.length);
  for (let i = 0; i < n; i += 1) {
    const a = xs[i];
    const b = ys[i];
    if (!Number.isFinite(a) || !Number.isFinite(b)) continue;
    if ((xLog && a <= 0) || (yLog && b <= 0)) continue;
    out.push([a, b]);
  }
  return out;
}

function dots(c, points, series, r = 2.4, cls = "series-data") {
  const g = svg("g", { "data-series": series });
  for (const [a, b] of points) g.append(svg("circle", { class: cls, cx: c.sx(a).toFixed(2), cy: c.sy(b).toFixed(2), r, "data-series": series }));
  c.plot.append(g);
}

function curve(c, points, series) {
  const text = points.map(([a, b]) => `${c.sx(a).toFixed(2)},${c.sy(b).toFixed(2)}`).join(" ");
  c.plot.append(svg("polyline", { class: "series-model", points: text, "data-series": series, "data-points": points.length }));
}

/** A legend whose keys repeat each series' mark, so series differ by shape as well as colour. */
function legend(items) {
  const marks = {
    dot: () => svg("circle", { class: "series-data", cx: 12, cy: 6, r: 3.2 }),
    hollow: () => svg("circle", { class: "series-hollow", cx: 12, cy: 6, r: 3.2 }),
    line: () => svg("line", { class: "series-model", x1: 1, x2: 23, y1: 6, y2: 6 }),
    dashed: () => svg("line", { class: "consensus-line", x1: 1, x2: 23, y1: 6, y2: 6 }),
    bar: () => svg("rect", { class: "series-bar", x: 5, y: 1, width: 14, height: 10 }),
    band: () => svg("rect", { class: "series-band", x: 1, y: 1, width: 22, height: 10 }),
    range: () => svg("rect", { class: "series-fit-range", x: 1, y: 1, width: 22, height: 10, stroke: "#b9c4bf" }),
    diamond: () => svg("path", { class: "outlier", d: "M12 0 L18 6 L12 12 L6 6 Z" }),
    bars: () => svg("g", {}, svg("line", { class: "error-bar", x1: 12, x2: 12, y1: 0, y2: 12 }), svg("circle", { class: "series-data", cx: 12, cy: 6, r: 3 })),
  };
  return el("ul", { class: "legend" }, items.map(([mark, text]) =>
    el("li", {}, svg("svg", { viewBox: "0 0 24 12", "aria-hidden": "true" }, marks[mark]()), ` ${text}`)));
}

function figure(kind, axis, caption, ...content) {
  return el("figure", { class: "plot", "data-plot": kind, "data-axis": axis }, el("figcaption", { text: caption }), ...content);
}

/**
 * Power spectrum on log-log axes with the fitted model, and the residuals beneath in standard
 * errors: residual = (data - model) / (model / sqrt(n)) for blocks of n averaged periodogram
 * values (Berg-Sørensen and Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004), the blocking of their
 * section IV, from memory, unverified); the service computes it, the page only draws it.
 */
function spectrumFigure(axis, spectrum, fit, unit) {
  const data = pairs(spectrum.frequency_hz, spectrum.psd, true, true);
  const model = pairs(spectrum.frequency_hz, spectrum.model, true, true);
  const xDomain = padLog(extent(spectrum.frequency_hz, true), 0.02);
  const yDomain = padLog(extent([...data.map((p) => p[1]), ...model.map((p) => p[1])], true));
  const psdUnit = `${unitText(unit)}²/Hz`;
  const top = chart({
    height: 290, margin: { b: 30 },
    x: { domain: xDomain, log: true, label: "" },
    y: { domain: yDomain, log: true, label: `PSD (${psdUnit})` },
    label: `Power spectrum of axis ${axis}: ${data.length} blocked values and the fitted model, log-log`,
  });
  const lo = Math.max(fit.fit_min_hz, xDomain[0]);
  const hi = Math.min(fit.fit_max_hz, xDomain[1]);
  if (hi > lo) {
    top.plot.insertBefore(svg("rect", {
      class: "series-fit-range", "data-series": "fit-range",
      x: top.sx(lo), y: top.box.y, width: top.sx(hi) - top.sx(lo), height: top.box.h,
    }), top.plot.firstChild);
  }
  dots(top, data, "data", 2.2);
  curve(top, model, "model");
  const residual = pairs(spectrum.frequency_hz, spectrum.residual, true, false);
  const rMax = Math.max(3, ...residual.map((p) => Math.abs(p[1])));
  const bottom = chart({
    height: 150, margin: { t: 6 },
    x: { domain: xDomain, log: true, label: "Frequency (Hz)" },
    y: { domain: [-rMax * 1.05, rMax * 1.05], label: "Residual (SE)", ticks: linearTicks(-rMax, rMax, 4) },
    label: `Residuals of the spectral fit of axis ${axis}, in standard errors`,
  });
  bottom.plot.append(svg("line", { class: "zero-line", x1: bottom.box.x, x2: bottom.box.x + bottom.box.w, y1: bottom.sy(0), y2: bottom.sy(0) }));
  dots(bottom, residual, "residual", 2);
  return figure("spectrum", axis, `Power spectrum, axis ${axis}`, top.node, bottom.node,
    legend([["dot", "measured (blocked)"], ["line", "fitted model"], ["range", `fit range ${fmt(fit.fit_min_hz, 3)}–${fmt(fit.fit_max_hz, 3)} Hz`]]));
}

/** Autocovariance against lag with its fitted exponential (the service's fit, drawn here). */
function acfFigure(axis, acf, unit) {
  const lagMs = acf.lag_s.map((s) => s * 1e3);
  const data = pairs(lagMs, acf.autocovariance, false, false);
  const model = pairs(lagMs, acf.model, false, false);
  const c = chart({
    x: { domain: padLinear(extent(lagMs, false), 0.02), label: "Lag (ms)" },
    y: { domain: padLinear(extent([...acf.autocovariance, ...acf.model], false)), label: `Autocovariance (${unitText(unit)}²)` },
    label: `Autocovariance of axis ${axis}: ${data.length} lags and the fitted exponential`,
  });
  dots(c, data, "data", 2.4);
  curve(c, model, "model");
  return figure("autocorrelation", axis, `Autocorrelation, axis ${axis}`, c.node,
    legend([["dot", "measured autocovariance"], ["line", "fitted exponential"]]));
}

/**
 * Overlapping Allan deviation against averaging time on log-log axes (the service's numbers,
 * drawn here): measured points, the deviation the fitted spectral model predicts, the band of
 * the estimator around it, and the drift onset when there is one. The values are the API's
 * axes[i].allan, each mark carrying its exact value in data-value.
 */
function allanFigure(axis, allan) {
  const unit = unitText(allan.unit);
  const xs = allan.tau_s;
  const data = pairs(xs, allan.deviation, true, true);
  const expected = allan.expected ? pairs(xs, allan.expected, true, true) : [];
  const yValues = [...allan.deviation, ...(allan.expected || []), ...(allan.expected_low || []), ...(allan.expected_high || [])];
  const c = chart({
    x: { domain: padLog(extent(xs, true), 0.04), log: true, label: "Averaging time τ (s)" },
    y: { domain: padLog(extent(yValues, true)), log: true, label: `Allan deviation (${unit})` },
    label: `Allan deviation of axis ${axis}: ${data.length} averaging times${allan.expected ? ", the fitted model's curve and its band" : ""}, log-log`,
  });
  const items = [["dot", "measured (overlapping)"]];
  if (allan.expected_low && allan.expected_high) {
    const upper = pairs(xs, allan.expected_high, true, true).map(([a, b]) => `${c.sx(a).toFixed(2)},${c.sy(b).toFixed(2)}`);
    const lower = pairs(xs, allan.expected_low, true, true).map(([a, b]) => `${c.sx(a).toFixed(2)},${c.sy(b).toFixed(2)}`).reverse();
    if (upper.length >= 2) c.plot.append(svg("polygon", { class: "series-band", "data-series": "spread", "data-points": upper.length, points: [...upper, ...lower].join(" ") }));
    items.push(["band", "band of the estimator (central 99.8 %)"]);
  }
  if (expected.length) {
    curve(c, expected, "expected");
    items.push(["line", "expected from the fitted model"]);
  }
  const g = svg("g", { "data-series": "data" });
  for (const [a, b] of data) {
    g.append(svg("circle", { class: "series-data", cx: c.sx(a).toFixed(2), cy: c.sy(b).toFixed(2), r: 3, "data-series": "data", "data-tau": a, "data-value": b }));
  }
  c.plot.append(g);
  if (allan.drift_onset_s !== null && allan.drift_onset_s !== undefined) {
    const px = c.sx(allan.drift_onset_s);
    c.plot.append(svg("line", { class: "consensus-line", "data-series": "drift-onset", "data-value": allan.drift_onset_s, x1: px, x2: px, y1: c.box.y, y2: c.box.y + c.box.h }));
    items.push(["dashed", `drift dominates from τ = ${fmt(allan.drift_onset_s, 3)} s`]);
  }
  const onset = el("p", { class: "allan-onset", "data-quantity": "drift-onset", "data-value": allan.drift_onset_s ?? "",
    text: allan.drift_onset_s != null
      ? `Drift onset: from τ = ${fmt(allan.drift_onset_s, 3)} s the measured deviation lies above the band and stays above the expected curve.`
      : allan.expected ? "No drift onset: the measured deviation ends within or below the band." : "No expected curve: the spectral fit failed." });
  return figure("allan", axis, `Allan deviation, axis ${axis}`, c.node, legend(items), onset);
}

/** Position histogram with the Gaussian expected from equipartition. */
function histogramFigure(axis, hist, unit) {
  const half = hist.bin_width / 2;
  const edges = hist.centre.flatMap((c) => [c - half, c + half]);
  const c = chart({
    x: { domain: padLinear(extent(edges, false), 0.02), label: `Position from the mean (${unitText(unit)})` },
    y: { domain: [0, extent([...hist.count, ...hist.expected], false)[1] * 1.08], label: "Samples per bin" },
    label: `Position histogram of axis ${axis}: ${hist.count.length} bins and the Gaussian expected from equipartition`,
  });
  const bars = svg("g", { "data-series": "counts" });
  const n = Math.min(hist.centre.length, hist.count.length);
  for (let i = 0; i < n; i += 1) {
    const x0 = c.sx(hist.centre[i] - half);
    const x1 = c.sx(hist.centre[i] + half);
    const y0 = c.sy(hist.count[i]);
    bars.append(svg("rect", {
      class: "series-bar", "data-series": "counts",
      x: x0.toFixed(2), y: y0.toFixed(2), width: Math.max(0.5, x1 - x0).toFixed(2), height: Math.max(0, c.sy(0) - y0).toFixed(2),
    }));
  }
  c.plot.append(bars);
  curve(c, pairs(hist.centre, hist.expected, false, false), "expected");
  return figure("histogram", axis, `Position histogram, axis ${axis}`, c.node,
    legend([["bar", "counted samples"], ["line", "Gaussian from equipartition"]]));
}

/** The three stiffness estimates with ±1 standard-error bars beside the consensus and its band. */
function stiffnessFigure(axis, stiffness) {
  const excluded = stiffness.excluded || {};
  const methods = [
    ["psd", "Power spectrum"],
    ["acf", "Autocorrelation"],
    ["equipartition", stiffness.equipartition_independent ? "Equipartition" : "Equipartition (uses β)"],
  ];
  const cons = stiffness.consensus;
  const values = methods.filter(([k]) => stiffness[k]).flatMap(([k]) => [stiffness[k].value - stiffness[k].se, stiffness[k].value + stiffness[k].se]);
  values.push(cons.value - cons.se, cons.value + cons.se);
  const names = methods.map(([, name]) => name);
  const c = chart({
    x: { domain: [0, 3], label: "Method", ticks: [0.5, 1.5, 2.5], tickFormat: (t) => names[Math.floor(t)] },
    y: { domain: padLinear(extent(values, false), 0.15), label: "Stiffness κ (pN/nm)" },
    label: `Stiffness of axis ${axis} by the three methods, with the consensus`,
  });
  c.plot.append(svg("rect", {
    class: "series-band", "data-series": "consensus-band",
    x: c.box.x, width: c.box.w, y: c.sy(cons.value + cons.se), height: Math.max(0, c.sy(cons.value - cons.se) - c.sy(cons.value + cons.se)),
  }));
  c.plot.append(svg("line", { class: "consensus-line", "data-series": "consensus", x1: c.box.x, x2: c.box.x + c.box.w, y1: c.sy(cons.value), y2: c.sy(cons.value) }));
  const g = svg("g", { "data-series": "estimates" });
  methods.forEach(([key], i) => {
    const e = stiffness[key];
    if (!e) return;
    const px = c.sx(i + 0.5);
    g.append(svg("line", { class: "error-bar", "data-series": "error-bar", "data-method": key, x1: px, x2: px, y1: c.sy(e.value - e.se), y2: c.sy(e.value + e.se) }));
    for (const v of [e.value - e.se, e.value + e.se]) g.append(svg("line", { class: "error-bar", x1: px - 7, x2: px + 7, y1: c.sy(v), y2: c.sy(v) }));
    g.append(svg("circle", {
      class: !excluded[key] && (stiffness.equipartition_independent || key !== "equipartition") ? "series-data" : "series-hollow",
      "data-series": "estimate", "data-method": key, "data-value": e.value, cx: px, cy: c.sy(e.value), r: 5,
    }));
  });
  c.plot.append(g);
  const items = [["bars", "estimate ± 1 SE"], ["dashed", "consensus"], ["band", "consensus ± 1 SE"]];
  if (!stiffness.equipartition_independent || Object.keys(excluded).length) items.push(["hollow", "not in the consensus (see the reasons above)"]);
  return figure("stiffness", axis, `Stiffness estimates, axis ${axis}`, c.node, legend(items));
}

// ---------------------------------------------------------------------------------------------
// Result view

function verdictBadge(verdict) {
  const ok = verdict === "consistent";
  const icon = ok
    ? svg("svg", { viewBox: "0 0 16 16", "aria-hidden": "true" }, svg("circle", { cx: 8, cy: 8, r: 7, fill: "none", stroke: "currentColor", "stroke-width": 2 }), svg("path", { d: "M4.5 8.3 L7 10.8 L11.6 5.6", fill: "none", stroke: "currentColor", "stroke-width": 2 }))
    : svg("svg", { viewBox: "0 0 16 16", "aria-hidden": "true" }, svg("path", { d: "M8 1 L15 14.5 H1 Z", fill: "none", stroke: "currentColor", "stroke-width": 1.8, "stroke-linejoin": "round" }), svg("path", { d: "M8 6 V10", stroke: "currentColor", "stroke-width": 2 }), svg("circle", { cx: 8, cy: 12.3, r: 1.1, fill: "currentColor" }));
  const words = {
    consistent: "Consistent: the estimates agree",
    inconsistent: "Inconsistent: check before use",
    unchecked: "Unchecked: one method left, nothing to cross-check it",
    unreliable: "Unreliable: every method was left out, do not use",
  }[verdict] || verdict;
  return el("span", { class: `verdict verdict-${ok ? "consistent" : "inconsistent"}`, "data-verdict": verdict }, icon, words);
}

/** One labelled number: value ± standard error in `unit`, shown scaled by `scale`. */
function numberItem(quantity, label, ve, unit, scale = 1) {
  if (!ve) {
    // The method behind this number failed on the record; a finding says why.
    return el("div", { class: "number" },
      el("dt", { text: label }),
      el("dd", { "data-quantity": quantity, "data-missing": "true" }, el("span", { class: "value", text: "failed (see the findings)" })));
  }
  return el("div", { class: "number" },
    el("dt", { text: label }),
    el("dd", { "data-quantity": quantity, "data-value": ve.value, "data-se": ve.se },
      el("span", { class: "value", text: `${fmt(ve.value * scale)} ± ${fmt(ve.se * scale, 2)}` }), " ",
      el("span", { class: "unit", text: unit })));
}

const SEVERITY = {
  info: ["ⓘ", "Note"],
  warning: ["▲", "Warning"],
  error: ["✕", "Problem"],
};

function findingsList(findings) {
  if (findings.length === 0) return el("p", { class: "empty", text: "No data-quality findings." });
  return el("ul", { class: "findings" }, findings.map((f) => {
    const [icon, word] = SEVERITY[f.severity] || ["•", f.severity];
    return el("li", { "data-finding": f.code },
      el("span", { class: `sev sev-${f.severity}` }, el("span", { "aria-hidden": "true", text: icon }), word),
      el("span", { text: f.message }));
  }));
}

/** The numbers of an active calibration (a stage drive), when the axis has one. */
function activeItems(active) {
  if (!active) return [];
  return [
    numberItem("drive-drag", "Drag measured by the stage drive", active.drag_pn_s_per_nm, "pN·s/nm"),
    numberItem("drive-drag-ratio", "Measured / assumed drag", active.drag_ratio, "×"),
    active.scale_factor ? numberItem("drive-scale-factor", "Scale factor (true nm per recorded nm)", active.scale_factor, "×") : null,
    numberItem("drive-stiffness", "Stiffness κ (spectral, measured drag)", active.stiffness_pn_per_nm, "pN/nm"),
  ];
}

function axisCard(axis, report, plotsOfAxis) {
  const unit = report.input.unit;
  const s = axis.stiffness_pn_per_nm;
  const numbers = [
    numberItem("stiffness", "Stiffness κ (consensus)", s.consensus, "pN/nm"),
    axis.sensitivity_nm_per_v ? numberItem("sensitivity", "Sensitivity β", axis.sensitivity_nm_per_v, "nm/V") : null,
    numberItem("corner-frequency", "Corner frequency fc", axis.corner_frequency_hz, "Hz"),
    numberItem("relaxation-time", "Relaxation time τ", axis.relaxation_time_s, "ms", 1e3),
    ...activeItems(axis.active),
  ];
  const reasons = axis.verdict_reasons.length
    ? el("ul", { class: "reasons" }, axis.verdict_reasons.map((r) => el("li", { text: r })))
    : null;
  const plots = plotsOfAxis
    ? el("div", { class: "plots" },
      plotsOfAxis.spectrum ? spectrumFigure(axis.axis, plotsOfAxis.spectrum, axis.spectrum_fit, unit) : null,
      plotsOfAxis.autocorrelation ? acfFigure(axis.axis, plotsOfAxis.autocorrelation, unit) : null,
      plotsOfAxis.histogram ? histogramFigure(axis.axis, plotsOfAxis.histogram, unit) : null,
      axis.allan && axis.allan.tau_s.length ? allanFigure(axis.axis, axis.allan) : null,
      stiffnessFigure(axis.axis, s))
    : el("p", { class: "empty", text: "No plot data stored for this axis." });
  return el("section", { class: "axis-card", "data-axis": axis.axis, "aria-labelledby": `axis-${axis.axis}` },
    el("h2", { id: `axis-${axis.axis}` }, `Axis ${axis.axis}`, verdictBadge(axis.verdict)),
    reasons,
    el("dl", { class: "numbers" }, numbers),
    el("h3", { text: "Findings" }),
    findingsList(axis.findings),
    el("h3", { text: "Plots" }),
    plots);
}

async function showResult(id) {
  const section = startView("result", "Loading the calibration…");
  let doc;
  let plots;
  try {
    [doc, plots] = await Promise.all([getJson(`${API}/calibrations/${enc(id)}`), getJson(`${API}/calibrations/${enc(id)}/plots`)]);
  } catch (e) {
    failView(section, e);
    return;
  }
  const r = doc.result;
  const c = r.conditions;
  const conditions = [
    `bead ${fmt(c.bead_diameter_um)} µm`,
    `${fmt(c.temperature_c)} °C`,
    `viscosity ${fmt(c.viscosity_mpa_s)} mPa·s`,
    c.height_um === null || c.height_um === undefined ? "in bulk" : `height ${fmt(c.height_um)} µm`,
  ].join(" · ");
  fill(section, 
    el("div", { class: "result-head" },
      el("div", {},
        el("h1", {}, `${doc.instrument} · ${doc.trap}`),
        el("p", { class: "meta" }, `${fmtDate(doc.created_at_ms)} · ${r.input.file_name} · ${r.input.n_samples.toLocaleString()} samples at ${fmt(r.input.sample_rate_hz)} Hz (${fmt(r.input.duration_s, 3)} s) · unit ${r.input.unit}`),
        el("p", { class: "meta", text: conditions }),
        doc.note ? el("p", { class: "meta" }, "Note: ", doc.note) : null),
      el("ul", { class: "links" },
        el("li", {}, el("a", { href: doc.links.recording, "data-link": "recording", download: r.input.file_name, text: "Raw recording", onclick: tokenLink(r.input.file_name) })),
        el("li", {}, el("a", { href: doc.links.self, "data-link": "json", text: "Calibration JSON", onclick: tokenLink(`calibration-${doc.id}.json`) })),
        el("li", {}, el("a", { href: doc.links.plots, "data-link": "plots", text: "Plot data JSON", onclick: tokenLink(`plots-${doc.id}.json`) })),
        el("li", {}, el("a", { href: historyHash(doc.instrument, doc.trap), "data-link": "history", text: "History of this trap" })),
        el("li", { class: "meta", "data-link-status": "", "aria-live": "polite" }))),
    r.axes.map((axis) => axisCard(axis, r, plots.axes.find((p) => p.axis === axis.axis))),
  );
  finishView(section, `${doc.instrument} · ${doc.trap}`);
}

// ---------------------------------------------------------------------------------------------
// History view

/**
 * The spread of recent runs at each point: mean ± 2 sqrt(s² + se²), where s is the sample
 * standard deviation of the consensus stiffness over the SPREAD_RUNS runs before the point (at
 * least three) and se the point's own standard error, so a run is marked only when it differs
 * from the recent runs by more than their scatter and its own uncertainty explain. The idea is
 * that of a Shewhart individuals control chart (NIST/SEMATECH e-Handbook of Statistical
 * Methods, section 6.3, from memory, unverified); the window, the factor 2 and adding the
 * run's own error are common practice, chosen for a calm chart that still marks a realignment.
 */
function recentSpread(points) {
  return points.map((p, i) => {
    const window = points.slice(Math.max(0, i - SPREAD_RUNS), i).map((q) => q.stiffness_pn_per_nm.value);
    if (window.length < 3) return null;
    const mean = window.reduce((a, b) => a + b, 0) / window.length;
    const variance = window.reduce((a, b) => a + (b - mean) ** 2, 0) / (window.length - 1);
    const se = p.stiffness_pn_per_nm.se;
    const half = 2 * Math.sqrt(variance + (Number.isFinite(se) ? se * se : 0));
    return { mean, lo: mean - half, hi: mean + half };
  });
}

function historyFigure(instrument, trap, axisHistory) {
  const pts = axisHistory.points;
  const spread = recentSpread(pts);
  const times = pts.map((p) => p.created_at_ms);
  let [t0, t1] = extent(times, false);
  if (pts.length === 1) [t0, t1] = [t0 - 3600e3, t1 + 3600e3];
  const span = t1 - t0;
  const xs = [t0 - span * 0.04, t1 + span * 0.04];
  const yValues = pts.flatMap((p) => [p.stiffness_pn_per_nm.value - p.stiffness_pn_per_nm.se, p.stiffness_pn_per_nm.value + p.stiffness_pn_per_nm.se]);
  for (const s of spread) if (s) yValues.push(s.lo, s.hi);
  const c = chart({
    width: 760, height: 300,
    x: { domain: xs, label: "Time of the run", tickFormat: (t) => fmtTick(t, xs[1] - xs[0]), ticks: linearTicks(xs[0], xs[1], 4).filter((t) => t >= xs[0] && t <= xs[1]) },
    y: { domain: padLinear(extent(yValues, false), 0.1), label: "Stiffness κ (pN/nm)" },
    label: `Consensus stiffness of ${instrument} ${trap}, axis ${axisHistory.axis}, over ${pts.length} runs, with the spread of recent runs`,
  });
  const upper = [];
  const lower = [];
  spread.forEach((s, i) => {
    if (!s) return;
    upper.push(`${c.sx(times[i]).toFixed(2)},${c.sy(s.hi).toFixed(2)}`);
    lower.unshift(`${c.sx(times[i]).toFixed(2)},${c.sy(s.lo).toFixed(2)}`);
  });
  if (upper.length >= 2) c.plot.append(svg("polygon", { class: "series-band", "data-series": "spread", points: [...upper, ...lower].join(" ") }));
  else if (upper.length === 1) {
    const s = spread.find(Boolean);
    const i = spread.indexOf(s);
    c.plot.append(svg("rect", { class: "series-band", "data-series": "spread", x: c.sx(times[i]) - 8, width: 16, y: c.sy(s.hi), height: Math.max(1, c.sy(s.lo) - c.sy(s.hi)) }));
  }
  const g = svg("g", { "data-series": "runs" });
  pts.forEach((p, i) => {
    const k = p.stiffness_pn_per_nm;
    const px = c.sx(times[i]);
    const out = spread[i] && (k.value < spread[i].lo || k.value > spread[i].hi);
    g.append(svg("line", { class: "error-bar", x1: px, x2: px, y1: c.sy(k.value - k.se), y2: c.sy(k.value + k.se) }));
    const py = c.sy(k.value);
    const mark = out
      ? svg("path", { class: "outlier", d: `M${px} ${py - 7} L${px + 7} ${py} L${px} ${py + 7} L${px - 7} ${py} Z` })
      : svg("circle", { class: p.verdict === "consistent" ? "series-data" : "series-hollow", cx: px, cy: py, r: 4.5 });
    setAttrs(mark, { "data-series": "run", "data-id": p.calibration_id, "data-value": k.value, "data-outside": out ? "true" : "false" });
    mark.append(svg("title", { text: `${fmtDate(p.created_at_ms)}: ${fmt(k.value)} ± ${fmt(k.se, 2)} pN/nm, ${p.verdict}${out ? ", outside the recent spread" : ""}` }));
    const link = svg("a", { href: resultHash(p.calibration_id), "aria-label": `Open the run of ${fmtDate(p.created_at_ms)}` }, mark);
    g.append(link);
  });
  c.plot.append(g);
  return figure("history", axisHistory.axis, `Stiffness over time, axis ${axisHistory.axis}`, c.node,
    legend([["bars", "run ± 1 SE (consistent)"], ["hollow", "run with an inconsistent verdict"], ["band", `spread of the ${SPREAD_RUNS} runs before (mean ± 2 SD, with the run's SE)`], ["diamond", "outside that spread"]]));
}

function kappaCell(axisReport) {
  if (!axisReport) return el("td", { class: "num", text: "—" });
  const k = axisReport.stiffness_pn_per_nm.consensus;
  const ok = axisReport.verdict === "consistent";
  return el("td", { class: "num", "data-axis": axisReport.axis, "data-value": k.value },
    `${fmt(k.value)} ± ${fmt(k.se, 2)}`, el("br"),
    el("span", { class: ok ? "sev sev-info" : "sev sev-warning" }, el("span", { "aria-hidden": "true", text: ok ? "✓" : "▲" }), ok ? "consistent" : "inconsistent"));
}

async function showHistory(instrument, trap) {
  const section = startView("history", "Loading the history…");
  let history;
  let runs;
  try {
    const listPath = `${API}/calibrations?instrument=${enc(instrument)}&trap=${enc(trap)}&limit=200`;
    [history, runs] = await Promise.all([getJson(historyApi(instrument, trap)), getJson(listPath)]);
  } catch (e) {
    failView(section, e);
    return;
  }
  const axisNames = history.axes.map((a) => a.axis);
  const table = el("table", { id: "runs-table" },
    el("caption", { class: "visually-hidden", text: `Runs of ${instrument} ${trap}, newest first` }),
    el("thead", {}, el("tr", {},
      el("th", { scope: "col", text: "When" }),
      el("th", { scope: "col", text: "File" }),
      el("th", { scope: "col", text: "Note" }),
      axisNames.map((a) => el("th", { scope: "col", class: "num", text: `κ ${a} (pN/nm)` })),
      el("th", { scope: "col", text: "Result" }))),
    el("tbody", {}, runs.items.map((d) => el("tr", { "data-id": d.id },
      el("td", { text: fmtDate(d.created_at_ms) }),
      el("td", { text: d.result.input.file_name }),
      el("td", { text: d.note }),
      axisNames.map((a) => kappaCell(d.result.axes.find((x) => x.axis === a))),
      el("td", {}, el("a", { href: resultHash(d.id), "data-link": "open", text: "Open" }))))));
  fill(section, 
    el("h1", {}, `History of ${instrument} · ${trap}`),
    el("p", { class: "meta", text: `${runs.items.length} runs${runs.next ? " shown (the newest)" : ""}. Points link to their results.` }),
    history.axes.length ? history.axes.map((a) => historyFigure(instrument, trap, a)) : el("p", { class: "empty", text: "No runs stored for this trap yet." }),
    el("h2", { text: "Past runs" }),
    el("div", { class: "table-wrap" }, table),
  );
  finishView(section, `History of ${instrument} · ${trap}`);
}

// ---------------------------------------------------------------------------------------------
// Overview of instruments

/** Pages of the listing to read at most (500 runs each) for the overview. */
const OVERVIEW_PAGES = 4;

async function showOverview() {
  const section = startView("overview", "Loading the instruments…");
  const items = [];
  let more = false;
  try {
    let path = `${API}/calibrations?limit=500`;
    for (let page = 0; page < OVERVIEW_PAGES && path; page += 1) {
      const doc = await getJson(path);
      items.push(...doc.items);
      path = doc.next || null;
      more = Boolean(path);
    }
  } catch (e) {
    failView(section, e);
    return;
  }
  // The listing is newest first: the first run seen of a trap is its latest.
  const instruments = new Map();
  for (const d of items) {
    if (!instruments.has(d.instrument)) instruments.set(d.instrument, new Map());
    const traps = instruments.get(d.instrument);
    if (!traps.has(d.trap)) traps.set(d.trap, { latest: d, runs: 0 });
    traps.get(d.trap).runs += 1;
  }
  const names = [...instruments.keys()].sort((a, b) => a.localeCompare(b));
  const blocks = names.map((name) => {
    const traps = [...instruments.get(name).entries()].sort(([a], [b]) => a.localeCompare(b));
    const axisNames = [...new Set(traps.flatMap(([, t]) => t.latest.result.axes.map((a) => a.axis)))];
    return el("section", { class: "instrument", "data-instrument": name, "aria-labelledby": `inst-${enc(name)}` },
      el("h2", { id: `inst-${enc(name)}`, text: name }),
      el("div", { class: "table-wrap" }, el("table", {},
        el("caption", { class: "visually-hidden", text: `Traps of ${name} with their latest calibration` }),
        el("thead", {}, el("tr", {},
          el("th", { scope: "col", text: "Trap" }),
          el("th", { scope: "col", text: "Latest run" }),
          axisNames.map((a) => el("th", { scope: "col", class: "num", text: `κ ${a} (pN/nm)` })),
          el("th", { scope: "col", class: "num", text: "Runs" }),
          el("th", { scope: "col", text: "Open" }))),
        el("tbody", {}, traps.map(([trap, t]) => el("tr", { "data-trap": trap },
          el("th", { scope: "row", text: trap }),
          el("td", { text: fmtDate(t.latest.created_at_ms) }),
          axisNames.map((a) => kappaCell(t.latest.result.axes.find((x) => x.axis === a))),
          el("td", { class: "num", "data-runs": t.runs, text: String(t.runs) }),
          el("td", {},
            el("a", { href: historyHash(name, trap), "data-link": "history", text: "History" }), " · ",
            el("a", { href: resultHash(t.latest.id), "data-link": "latest", text: "Latest result" }))))))));
  });
  fill(section, 
    el("h1", { text: "Instruments and their traps" }),
    el("p", { class: "meta", text: more ? `From the newest ${items.length} runs.` : `${items.length} runs stored.` }),
    blocks.length ? blocks : el("p", { class: "empty" }, "No calibrations stored yet. ", el("a", { href: "#/", text: "Calibrate a run" }), " to start."),
  );
  finishView(section, "Instruments");
}

// ---------------------------------------------------------------------------------------------
// Start

function start() {
  restoreFields(REMEMBERED_LABELS);
  $("f-token").value = token();
  $("f-token").addEventListener("change", () => {
    saveToken();
    if ($("upload-form").dataset.settings !== "ready") loadSettings();
  });
  loadSettings();
  setUpDropzone();
  $("upload-form").addEventListener("submit", submitUpload);
  window.addEventListener("hashchange", route);
  route();
}

start();

//! The page in a real browser: headless Chromium driven over WebDriver (Debian's chromium and
//! chromium-driver) against the real service on port 0 over SQLite.
//!
//! These tests upload demo files through the page (by picking a file and by dropping one),
//! check that the numbers shown are the API's, that each plot drew its points and fitted curve,
//! that refused uploads show the service's problem beside the field or file concerned, that the
//! laser-safety caution is in view without scrolling on a laptop and a tablet, and that the
//! history and the overview list every run. Screenshots of each view go to
//! `test-output/screenshots/` (gitignored) for a person to look at.
//!
//! Chromium and chromedriver must be installed (`apt-get install -y chromium chromium-driver`,
//! which .ci/run does); without them these tests fail with that hint rather than skip, so a CI
//! image without a browser cannot pass unnoticed. `TRAPWISE_CHROMIUM` and
//! `TRAPWISE_CHROMEDRIVER` point at other binaries. The browser tests take turns (one Chromium
//! at a time) to spare the shared cores.

use crate::support::{Backend, DemoFile, TestDb, TestServer, binary, demo_files, options, upload};
use fantoccini::{Client, ClientBuilder, Locator};
use serde_json::{Value, json};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};
use trapwise::http::ServiceOptions;

/// One browser test at a time.
static ONE_BROWSER: tokio::sync::Mutex<()> = tokio::sync::Mutex::const_new(());

/// Longest wait for a view to finish (a calibration included).
const VIEW_TIMEOUT: Duration = Duration::from_secs(30);

/// Laptop and tablet viewports, CSS pixels.
const LAPTOP: (u32, u32) = (1280, 800);
const TABLET: (u32, u32) = (820, 1180);

fn tool(env: &str, default: &str, package: &str) -> PathBuf {
    let path = std::env::var_os(env)
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(default));
    assert!(
        path.is_file(),
        "{} is missing: the browser tests need Debian's {package}; install it with \
         `apt-get install -y chromium chromium-driver` (.ci/run does), or set {env}",
        path.display()
    );
    path
}

fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .map(|a| a.port())
        .expect("a free loopback port")
}

/// A headless Chromium session through a chromedriver of its own.
struct Browser {
    client: Client,
    driver: Child,
    _profile: tempfile::TempDir,
}

impl Browser {
    async fn start() -> Self {
        let chromium = tool("TRAPWISE_CHROMIUM", "/usr/bin/chromium", "chromium");
        let chromedriver = tool(
            "TRAPWISE_CHROMEDRIVER",
            "/usr/bin/chromedriver",
            "chromium-driver",
        );
        let port = free_port();
        let driver = Command::new(&chromedriver)
            .arg(format!("--port={port}"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap_or_else(|e| panic!("start {}: {e}", chromedriver.display()));
        let started = Instant::now();
        while std::net::TcpStream::connect(("127.0.0.1", port)).is_err() {
            assert!(
                started.elapsed() < Duration::from_secs(15),
                "chromedriver did not listen on port {port} within 15 s"
            );
            tokio::time::sleep(Duration::from_millis(50)).await;
        }
        let profile = tempfile::tempdir().expect("browser profile folder");
        let caps = json!({
            "browserName": "chrome",
            "goog:chromeOptions": {
                "binary": chromium.display().to_string(),
                "args": [
                    "--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                    "--no-first-run", "--disable-background-networking",
                    "--disable-component-update", "--disable-sync", "--lang=en-GB",
                    format!("--window-size={},{}", LAPTOP.0, LAPTOP.1),
                    format!("--user-data-dir={}", profile.path().display()),
                ],
            },
        });
        let Value::Object(caps) = caps else {
            unreachable!("a JSON object literal")
        };
        let client = ClientBuilder::new(hyper_util::client::legacy::connect::HttpConnector::new())
            .capabilities(caps)
            .connect(&format!("http://127.0.0.1:{port}"))
            .await
            .expect("a WebDriver session in headless Chromium");
        let mut browser = Browser {
            client,
            driver,
            _profile: profile,
        };
        browser.viewport(LAPTOP).await;
        browser
    }

    /// Runs `script` (a function body; `arguments` holds `args`) and returns its value.
    async fn js(&self, script: &str, args: Vec<Value>) -> Value {
        self.client
            .execute(script, args)
            .await
            .unwrap_or_else(|e| panic!("script failed: {e}\n{script}"))
    }

    /// Sizes the window so that the viewport (not the window) is `width` x `height`.
    async fn viewport(&mut self, (width, height): (u32, u32)) {
        for _ in 0..3 {
            let inner = self
                .js("return [window.innerWidth, window.innerHeight];", vec![])
                .await;
            let (w, h) = (
                inner[0].as_u64().unwrap_or(0),
                inner[1].as_u64().unwrap_or(0),
            );
            if (w, h) == (u64::from(width), u64::from(height)) {
                return;
            }
            let (ow, oh) = self.client.get_window_size().await.expect("window size");
            let target_w = (ow + u64::from(width)).saturating_sub(w);
            let target_h = (oh + u64::from(height)).saturating_sub(h);
            self.client
                .set_window_size(
                    u32::try_from(target_w).unwrap_or(width),
                    u32::try_from(target_h).unwrap_or(height),
                )
                .await
                .expect("set window size");
        }
    }

    async fn goto(&self, url: &str) {
        self.client.goto(url).await.expect("navigate");
    }

    /// Waits until `#view-<name>` is ready; fails with its text when it shows an error.
    async fn wait_view(&self, name: &str) {
        let started = Instant::now();
        loop {
            let state = self
                .js(
                    "const s = document.getElementById(arguments[0]);
                     return s && !s.hidden ? [s.dataset.state || '', s.innerText] : ['', ''];",
                    vec![json!(format!("view-{name}"))],
                )
                .await;
            match state[0].as_str() {
                Some("ready") => return,
                Some("error") => panic!("view {name} shows an error: {}", state[1]),
                _ => {}
            }
            assert!(
                started.elapsed() < VIEW_TIMEOUT,
                "view {name} not ready after {VIEW_TIMEOUT:?}"
            );
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
    }

    /// Waits for `script` to return something other than null or false, and returns it.
    async fn wait_for(&self, what: &str, script: &str) -> Value {
        let started = Instant::now();
        loop {
            let value = self.js(script, vec![]).await;
            if !(value.is_null() || value == Value::Bool(false)) {
                return value;
            }
            assert!(
                started.elapsed() < VIEW_TIMEOUT,
                "waited {VIEW_TIMEOUT:?} for {what}"
            );
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
    }

    /// A viewport screenshot, or with `full_page` one of the whole page at the current width.
    async fn screenshot(&mut self, name: &str, full_page: bool) {
        let size = self
            .js("return [window.innerWidth, window.innerHeight];", vec![])
            .await;
        let width = u32::try_from(size[0].as_u64().unwrap_or(1280)).unwrap_or(1280);
        let height = u32::try_from(size[1].as_u64().unwrap_or(800)).unwrap_or(800);
        if full_page {
            let page = self
                .js("return document.documentElement.scrollHeight;", vec![])
                .await;
            let page = u32::try_from(page.as_u64().unwrap_or(800)).unwrap_or(800);
            self.viewport((width, page.clamp(height, 8000))).await;
        }
        let png = self.client.screenshot().await.expect("screenshot");
        let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("test-output/screenshots");
        std::fs::create_dir_all(&dir).expect("screenshot folder");
        std::fs::write(dir.join(format!("{name}.png")), png).expect("write screenshot");
        if full_page {
            self.viewport((width, height)).await;
        }
    }

    /// Waits until the page has made its run-setting controls from the settings table.
    async fn wait_settings(&self) {
        self.wait_for(
            "the run-setting controls",
            "return document.getElementById('upload-form').dataset.settings === 'ready';",
        )
        .await;
    }

    /// Types `value` into the control named `name` (a select takes the option's value, a
    /// checkbox is ticked for `true` and cleared otherwise), once the page has made it.
    async fn set_field(&self, name: &str, value: &str) {
        if !matches!(name, "instrument" | "trap" | "note" | "axes" | "token") {
            self.wait_settings().await;
        }
        let control = self
            .client
            .find(Locator::Id(&format!("f-{name}")))
            .await
            .unwrap_or_else(|e| panic!("no control f-{name}: {e}"));
        if control.tag_name().await.expect("tag name") == "select" {
            control.select_by_value(value).await.expect("select");
        } else if control.attr("type").await.expect("type").as_deref() == Some("checkbox") {
            let checked =
                control.prop("checked").await.expect("checked").as_deref() == Some("true");
            if checked != (value == "true") {
                control.click().await.expect("tick");
            }
        } else {
            control.clear().await.expect("clear");
            if !value.is_empty() {
                control.send_keys(value).await.expect("type");
            }
        }
    }

    /// Opens the "more settings and access" panel, whose fields are hidden until then.
    async fn open_more_settings(&self) {
        let open = self
            .js(
                "return document.getElementById('more-settings').open;",
                vec![],
            )
            .await;
        if open != Value::Bool(true) {
            self.client
                .find(Locator::Css("#more-settings > summary"))
                .await
                .expect("the more-settings summary")
                .click()
                .await
                .expect("open the panel");
        }
    }

    /// Picks `path` in the file input (as the file chooser would).
    async fn pick_file(&self, path: &Path) {
        let input = self
            .client
            .find(Locator::Id("f-file"))
            .await
            .expect("the file input");
        input
            .send_keys(&path.display().to_string())
            .await
            .expect("pick the file");
    }

    /// Drops a file named `name` holding `text` onto the drop zone, as a drag from the desktop.
    async fn drop_text_file(&self, name: &str, text: &str) {
        self.js(
            "const dt = new DataTransfer();
             dt.items.add(new File([arguments[1]], arguments[0], {type: 'text/csv'}));
             const zone = document.getElementById('dropzone');
             for (const type of ['dragenter', 'dragover', 'drop']) {
               zone.dispatchEvent(new DragEvent(type, {dataTransfer: dt, bubbles: true, cancelable: true}));
             }",
            vec![json!(name), json!(text)],
        )
        .await;
    }

    /// Submits the upload form with the keyboard (Enter on the Calibrate button).
    async fn submit(&self) {
        let button = self
            .client
            .find(Locator::Id("submit"))
            .await
            .expect("the submit button");
        button.send_keys("\u{E007}").await.expect("press Enter");
    }

    async fn close(mut self) {
        let client = self.client.clone();
        let _ = client.close().await;
        let _ = self.driver.kill();
        let _ = self.driver.wait();
    }
}

impl Drop for Browser {
    fn drop(&mut self) {
        // A failed test still stops its own chromedriver (and with it its Chromium).
        let _ = self.driver.kill();
    }
}

async fn sqlite_server() -> (TestDb, TestServer) {
    let db = TestDb::new(Backend::Sqlite).await;
    let server = TestServer::start(&db, options()).await;
    (db, server)
}

async fn api_json(server: &TestServer, path: &str) -> Value {
    let response = server
        .client
        .get(server.url(path))
        .send()
        .await
        .expect("GET");
    assert!(
        response.status().is_success(),
        "GET {path}: {}",
        response.status()
    );
    response.json().await.expect("JSON")
}

/// The same multipart upload the page sends, through reqwest: status and answer.
async fn api_upload(
    server: &TestServer,
    fields: &[(String, String)],
    file: Option<(&str, Vec<u8>)>,
) -> (u16, Value) {
    let mut form = reqwest::multipart::Form::new();
    for (k, v) in fields {
        if !v.is_empty() {
            form = form.text(k.clone(), v.clone());
        }
    }
    if let Some((name, bytes)) = file {
        form = form.part(
            "file",
            reqwest::multipart::Part::bytes(bytes).file_name(name.to_string()),
        );
    }
    let response = server
        .client
        .post(server.url("/api/v1/calibrations"))
        .multipart(form)
        .send()
        .await
        .expect("upload");
    let status = response.status().as_u16();
    (status, response.json().await.expect("JSON answer"))
}

fn demo(dir: &Path, name: &str) -> DemoFile {
    demo_files(dir)
        .into_iter()
        .find(|f| f.name() == name)
        .unwrap_or_else(|| panic!("no demo file {name}"))
}

/// A recording of our own invented two-axis trap with the stiffnesses given (pN/nm).
fn simulated(dir: &Path, name: &str, stiffness: &str, seed: u64) -> PathBuf {
    let path = dir.join(name);
    let output = binary()
        .arg("simulate")
        .arg("-o")
        .arg(&path)
        .args(["--sample-rate", "20000", "--duration", "0.5"])
        .args(["--stiffness", stiffness, "--seed", &seed.to_string()])
        .output()
        .expect("run trapwise simulate");
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    path
}

fn f64_of(v: &Value, what: &str) -> f64 {
    match v {
        Value::Number(n) => n.as_f64(),
        Value::String(s) => s.parse().ok(),
        _ => None,
    }
    .unwrap_or_else(|| panic!("{what}: `{v}` is not a number"))
}

/// A number shown on the page (`data-value`, `data-se`, and the visible "value ± se").
#[track_caller]
fn check_number(what: &str, shown: &Value, api: &Value, scale: f64) {
    assert!(shown.is_object(), "{what}: not shown");
    let value = f64_of(&api["value"], what);
    let se = f64_of(&api["se"], what);
    // The page keeps the API's exact value in data-value (float text round trip).
    assert_eq!(f64_of(&shown["value"], what), value, "{what}: data-value");
    assert_eq!(f64_of(&shown["se"], what), se, "{what}: data-se");
    let text = shown["text"].as_str().unwrap_or("");
    let (v, s) = text
        .split_once('±')
        .unwrap_or_else(|| panic!("{what}: `{text}` is not `value ± se`"));
    let v: f64 = v.trim().parse().expect("shown value");
    let s: f64 = s.trim().parse().expect("shown standard error");
    // Four significant digits for the value (half a unit of the fourth digit is at most 5e-4
    // of the value), two for its standard error (at most 5e-2); the tolerances leave room for
    // the rounding of the decimal text.
    let (value_shown_unit, se_shown_unit) = (value * scale, se * scale);
    assert!(
        (v - value_shown_unit).abs() <= 5.1e-4 * value_shown_unit.abs(),
        "{what}: shows {v}, API {value} x {scale}"
    );
    assert!(
        (s - se_shown_unit).abs() <= 5.1e-2 * se_shown_unit.abs(),
        "{what}: shows ± {s}, API {se} x {scale}"
    );
}

#[track_caller]
fn check_count(what: &str, shown: &Value, expected: usize) {
    assert_eq!(
        shown.as_u64(),
        Some(expected as u64),
        "{what}: drawn {shown}, expected {expected}"
    );
}

/// Finite pairs (positive on the log axes) of two API arrays: what a plot can draw.
fn drawable(xs: &Value, ys: &Value, x_log: bool, y_log: bool) -> usize {
    let (Some(xs), Some(ys)) = (xs.as_array(), ys.as_array()) else {
        return 0;
    };
    xs.iter()
        .zip(ys)
        .filter_map(|(x, y)| Some((x.as_f64()?, y.as_f64()?)))
        .filter(|(x, y)| x.is_finite() && y.is_finite())
        .filter(|(x, y)| (!x_log || *x > 0.0) && (!y_log || *y > 0.0))
        .count()
}

fn len(v: &Value) -> usize {
    v.as_array().map_or(0, Vec::len)
}

/// Everything the result view shows of each axis, read in one script.
const READ_RESULT: &str = r#"
const out = {};
const count = (root, sel) => root.querySelectorAll(sel).length;
const curve = (root, series) => {
  const p = root.querySelector(`polyline[data-series="${series}"]`);
  return p ? p.points.numberOfItems : 0;
};
const broken = (root) => [...root.querySelectorAll('circle')].filter((c) =>
  !Number.isFinite(c.cx.baseVal.value) || !Number.isFinite(c.cy.baseVal.value)).length;
for (const card of document.querySelectorAll('#view-result .axis-card')) {
  const q = {};
  for (const dd of card.querySelectorAll('dd[data-quantity]')) {
    q[dd.dataset.quantity] = {
      value: dd.dataset.value, se: dd.dataset.se,
      text: dd.querySelector('.value').textContent, unit: dd.querySelector('.unit').textContent,
    };
  }
  const fig = (k) => card.querySelector(`figure[data-plot="${k}"]`);
  const labels = (k) => [...fig(k).querySelectorAll('.axis-label')].map((t) => t.textContent);
  const badge = card.querySelector('[data-verdict]');
  out[card.dataset.axis] = {
    q,
    verdict: badge.dataset.verdict,
    verdict_text: badge.textContent,
    findings: [...card.querySelectorAll('li[data-finding]')].map((li) => li.dataset.finding),
    spectrum: {
      data: count(fig('spectrum'), 'circle[data-series="data"]'),
      model: curve(fig('spectrum'), 'model'),
      residual: count(fig('spectrum'), 'circle[data-series="residual"]'),
      broken: broken(fig('spectrum')),
      labels: labels('spectrum'),
    },
    acf: {
      data: count(fig('autocorrelation'), 'circle[data-series="data"]'),
      model: curve(fig('autocorrelation'), 'model'),
      broken: broken(fig('autocorrelation')),
      labels: labels('autocorrelation'),
    },
    histogram: {
      bars: count(fig('histogram'), 'rect[data-series="counts"]'),
      expected: curve(fig('histogram'), 'expected'),
      labels: labels('histogram'),
    },
    allan: fig('allan') ? {
      data: [...fig('allan').querySelectorAll('circle[data-series="data"]')]
        .map((c) => [c.dataset.tau, c.dataset.value]),
      expected: curve(fig('allan'), 'expected'),
      band: count(fig('allan'), 'polygon[data-series="spread"]'),
      onset_line: [...fig('allan').querySelectorAll('[data-series="drift-onset"]')].map((l) => l.dataset.value),
      onset: fig('allan').querySelector('[data-quantity="drift-onset"]').dataset.value,
      labels: labels('allan'),
    } : null,
    stiffness: {
      estimates: [...fig('stiffness').querySelectorAll('circle[data-series="estimate"]')]
        .map((c) => [c.dataset.method, c.dataset.value]),
      error_bars: count(fig('stiffness'), 'line[data-series="error-bar"]'),
      consensus: count(fig('stiffness'), '[data-series="consensus"]'),
      labels: labels('stiffness'),
    },
  };
}
const links = {};
for (const a of document.querySelectorAll('#view-result [data-link]')) links[a.dataset.link] = a.getAttribute('href');
return {axes: out, links, hash: location.hash};
"#;

/// Checks the result view against the API's calibration and plot documents.
fn check_result_view(shown: &Value, doc: &Value, plots: &Value) {
    let unit = doc["result"]["input"]["unit"].as_str().unwrap_or("");
    let axes = doc["result"]["axes"].as_array().expect("axes");
    assert_eq!(
        shown["axes"].as_object().map_or(0, serde_json::Map::len),
        axes.len(),
        "one card per axis"
    );
    for axis in axes {
        let name = axis["axis"].as_str().unwrap_or("");
        let s = &shown["axes"][name];
        let q = &s["q"];
        let what = |w: &str| format!("axis {name} {w}");
        check_number(
            &what("stiffness"),
            &q["stiffness"],
            &axis["stiffness_pn_per_nm"]["consensus"],
            1.0,
        );
        assert_eq!(q["stiffness"]["unit"], "pN/nm");
        check_number(
            &what("corner frequency"),
            &q["corner-frequency"],
            &axis["corner_frequency_hz"],
            1.0,
        );
        // The relaxation time is shown in ms, the API gives seconds.
        check_number(
            &what("relaxation time"),
            &q["relaxation-time"],
            &axis["relaxation_time_s"],
            1e3,
        );
        assert_eq!(q["relaxation-time"]["unit"], "ms");
        if unit == "V" {
            check_number(
                &what("sensitivity"),
                &q["sensitivity"],
                &axis["sensitivity_nm_per_v"],
                1.0,
            );
        } else {
            assert!(
                q["sensitivity"].is_null(),
                "{}: beta shown for nm data",
                what("beta")
            );
        }
        // An active calibration shows its measured drag, the drag ratio and its stiffness.
        if axis["active"].is_object() {
            let a = &axis["active"];
            check_number(
                &what("drive drag"),
                &q["drive-drag"],
                &a["drag_pn_s_per_nm"],
                1.0,
            );
            check_number(
                &what("drag ratio"),
                &q["drive-drag-ratio"],
                &a["drag_ratio"],
                1.0,
            );
            check_number(
                &what("drive stiffness"),
                &q["drive-stiffness"],
                &a["stiffness_pn_per_nm"],
                1.0,
            );
        } else {
            assert!(q["drive-drag"].is_null(), "{}", what("drive shown"));
        }
        assert_eq!(s["verdict"], axis["verdict"], "{}", what("verdict"));
        let words = s["verdict_text"].as_str().unwrap_or("");
        let expected_word = if axis["verdict"] == "consistent" {
            "Consistent"
        } else {
            "Inconsistent"
        };
        assert!(
            words.starts_with(expected_word),
            "verdict in words: {words}"
        );
        let codes: Vec<Value> = axis["findings"]
            .as_array()
            .map(|f| f.iter().map(|x| x["code"].clone()).collect())
            .unwrap_or_default();
        assert_eq!(s["findings"], Value::Array(codes), "{}", what("findings"));

        let p = plots["axes"]
            .as_array()
            .and_then(|a| a.iter().find(|p| p["axis"] == axis["axis"]))
            .expect("plot arrays of the axis");
        let sp = &p["spectrum"];
        let n_data = drawable(&sp["frequency_hz"], &sp["psd"], true, true);
        assert!(n_data > 10, "spectrum has {n_data} points");
        check_count(&what("spectrum points"), &s["spectrum"]["data"], n_data);
        check_count(
            &what("spectrum model"),
            &s["spectrum"]["model"],
            drawable(&sp["frequency_hz"], &sp["model"], true, true),
        );
        check_count(
            &what("residuals"),
            &s["spectrum"]["residual"],
            drawable(&sp["frequency_hz"], &sp["residual"], true, false),
        );
        check_count(&what("spectrum NaN marks"), &s["spectrum"]["broken"], 0);
        let ac = &p["autocorrelation"];
        check_count(
            &what("acf points"),
            &s["acf"]["data"],
            drawable(&ac["lag_s"], &ac["autocovariance"], false, false),
        );
        check_count(
            &what("acf model"),
            &s["acf"]["model"],
            drawable(&ac["lag_s"], &ac["model"], false, false),
        );
        check_count(&what("acf NaN marks"), &s["acf"]["broken"], 0);
        let h = &p["histogram"];
        check_count(
            &what("histogram bars"),
            &s["histogram"]["bars"],
            len(&h["count"]),
        );
        check_count(
            &what("histogram Gaussian"),
            &s["histogram"]["expected"],
            drawable(&h["centre"], &h["expected"], false, false),
        );
        check_allan(&what("allan"), &s["allan"], &axis["allan"], unit);
        let estimates = &s["stiffness"]["estimates"];
        for (i, method) in ["psd", "acf", "equipartition"].iter().enumerate() {
            assert_eq!(estimates[i][0], *method);
            assert_eq!(
                f64_of(&estimates[i][1], method),
                f64_of(&axis["stiffness_pn_per_nm"][*method]["value"], method),
                "{}",
                what(method)
            );
        }
        check_count(&what("error bars"), &s["stiffness"]["error_bars"], 3);
        check_count(&what("consensus line"), &s["stiffness"]["consensus"], 1);
        // Axes are labelled with their units.
        let u2 = format!("{unit}²");
        let label_has = |plot: &str, i: usize, text: &str| {
            let label = s[plot]["labels"][i].as_str().unwrap_or("");
            assert!(
                label.contains(text),
                "{plot} axis label `{label}` lacks `{text}`"
            );
        };
        label_has("spectrum", 1, &format!("{u2}/Hz"));
        label_has("spectrum", 2, "Frequency (Hz)");
        label_has("spectrum", 3, "Residual");
        label_has("acf", 0, "Lag (ms)");
        label_has("acf", 1, &u2);
        label_has("histogram", 0, &format!("({unit})"));
        label_has("stiffness", 1, "pN/nm");
    }
    assert_eq!(shown["links"]["recording"], doc["links"]["recording"]);
    assert_eq!(shown["links"]["json"], doc["links"]["self"]);
    assert_eq!(shown["links"]["plots"], doc["links"]["plots"]);
}

/// The Allan deviation figure against the axis's `allan` member: every measured point with the
/// API's exact averaging time and deviation, the expected curve's points, the band, and the
/// drift onset (a line at its exact value, or none).
#[track_caller]
fn check_allan(what: &str, shown: &Value, api: &Value, unit: &str) {
    assert!(shown.is_object(), "{what}: no figure");
    assert_eq!(api["unit"], unit, "{what}: unit");
    let taus = api["tau_s"].as_array().expect("tau_s");
    let deviation = api["deviation"].as_array().expect("deviation");
    assert!(taus.len() >= 10, "{what}: {} averaging times", taus.len());
    let points = shown["data"].as_array().expect("points");
    assert_eq!(
        points.len(),
        drawable(&api["tau_s"], &api["deviation"], true, true)
    );
    for ((p, t), d) in points.iter().zip(taus).zip(deviation) {
        assert_eq!(f64_of(&p[0], what), f64_of(t, what), "{what}: tau");
        assert_eq!(f64_of(&p[1], what), f64_of(d, what), "{what}: deviation");
    }
    check_count(
        &format!("{what} expected"),
        &shown["expected"],
        drawable(&api["tau_s"], &api["expected"], true, true),
    );
    check_count(
        &format!("{what} band"),
        &shown["band"],
        usize::from(api["expected_high"].is_array()),
    );
    match api["drift_onset_s"].as_f64() {
        Some(onset) => {
            assert_eq!(f64_of(&shown["onset"], what), onset, "{what}: onset");
            assert_eq!(shown["onset_line"].as_array().map(Vec::len), Some(1));
            assert_eq!(f64_of(&shown["onset_line"][0], what), onset);
        }
        None => {
            assert_eq!(shown["onset"], "", "{what}: onset shown without one");
            assert_eq!(shown["onset_line"].as_array().map(Vec::len), Some(0));
        }
    }
    let label = shown["labels"][1].as_str().unwrap_or("");
    assert!(
        label.contains(&format!("({unit})")),
        "{what}: y label `{label}`"
    );
}

/// Watches the progress box during an upload and records what it showed.
const WATCH_PROGRESS: &str = "
window.__progressSeen = [];
const box = document.getElementById('progress-box');
const label = document.getElementById('progress-label');
new MutationObserver(() => {
  window.__progressSeen.push([box.hidden, label.textContent]);
}).observe(box, {attributes: true, childList: true, subtree: true, characterData: true});
";

/// The result view's calibration id, once the upload has led there.
const RESULT_ID: &str = "
const m = location.hash.match(/^#\\/calibrations\\/(.+)$/);
const s = document.getElementById('view-result');
return m && s.dataset.state === 'ready' ? decodeURIComponent(m[1]) : null;
";

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn page_script_and_style_are_served_with_their_content_types() {
    let (_db, server) = sqlite_server().await;
    for (path, content_type, marker) in [
        ("/", "text/html", "Laser safety"),
        ("/index.html", "text/html", "/app.js"),
        ("/app.js", "text/javascript", "XMLHttpRequest"),
        ("/style.css", "text/css", ".caution"),
    ] {
        let response = server
            .client
            .get(server.url(path))
            .send()
            .await
            .expect("GET");
        assert_eq!(response.status(), 200, "{path}");
        let ct = response
            .headers()
            .get("content-type")
            .and_then(|v| v.to_str().ok())
            .unwrap_or("")
            .to_string();
        assert!(ct.starts_with(content_type), "{path}: {ct}");
        let body = response.text().await.expect("body");
        assert!(body.contains(marker), "{path} lacks {marker}");
    }
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn upload_view_shows_the_laser_caution_without_scrolling_and_labels_every_control() {
    let _turn = ONE_BROWSER.lock().await;
    let (_db, server) = sqlite_server().await;
    let mut browser = Browser::start().await;
    for (name, size) in [("upload-laptop", LAPTOP), ("upload-tablet", TABLET)] {
        browser.viewport(size).await;
        browser.goto(&server.url("/")).await;
        let rect = browser
            .js(
                "const r = document.getElementById('laser-caution').getBoundingClientRect();
                 return {top: r.top, bottom: r.bottom, left: r.left, right: r.right,
                         w: window.innerWidth, h: window.innerHeight, scroll: window.scrollY,
                         text: document.getElementById('laser-caution').innerText};",
                vec![],
            )
            .await;
        let f = |k: &str| f64_of(&rect[k], k);
        assert_eq!(f("w"), f64::from(size.0), "{name}: viewport width");
        assert_eq!(f("h"), f64::from(size.1), "{name}: viewport height");
        assert_eq!(f("scroll"), 0.0, "{name}: page scrolled");
        assert!(
            f("top") >= 0.0 && f("left") >= 0.0 && f("bottom") <= f("h") && f("right") <= f("w"),
            "{name}: the caution is not inside the viewport: {rect}"
        );
        let text = rect["text"].as_str().unwrap_or("");
        for phrase in [
            "Laser safety",
            "class 3B or 4",
            "invisible",
            "laser-safety rules",
            "laser-safety officer",
            "no safety advice",
        ] {
            assert!(
                text.contains(phrase),
                "{name}: caution lacks `{phrase}`: {text}"
            );
        }
        browser.screenshot(name, false).await;
    }
    // Every control, the ones made from the settings table included, has a real label, and
    // the file input is reached from the keyboard.
    browser.wait_settings().await;
    let unlabelled = browser
        .js(
            "return [...document.querySelectorAll('#upload-form input, #upload-form select')]
               .filter((c) => c.labels.length === 0).map((c) => c.id);",
            vec![],
        )
        .await;
    assert_eq!(unlabelled, json!([]), "controls without a label");
    let reached = browser
        .js(
            "document.activeElement.blur();
             return document.getElementById('f-file').tabIndex >= 0
                 && !document.getElementById('f-file').disabled;",
            vec![],
        )
        .await;
    assert_eq!(
        reached,
        Value::Bool(true),
        "the file input is not in the tab order"
    );
    browser.close().await;
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn refused_uploads_show_the_service_problem_beside_the_field_or_file_concerned() {
    let _turn = ONE_BROWSER.lock().await;
    let (_db, server) = sqlite_server().await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let good_csv = std::fs::read(simulated(dir.path(), "good.csv", "0.05,0.04", 3)).expect("csv");
    let bad_csv_path = dir.path().join("bad_cell.csv");
    std::fs::write(
        &bad_csv_path,
        b"time_s,x_nm\n0,1.5\n0.00005,abc\n0.0001,2\n",
    )
    .expect("write");
    let docx_path = dir.path().join("notes.docx");
    std::fs::write(&docx_path, b"PK\x03\x04 not a recording").expect("write");
    let good_path = dir.path().join("good.csv");

    let mut browser = Browser::start().await;
    browser.goto(&server.url("/")).await;
    let base = [
        ("instrument", "bench-a"),
        ("trap", "t1"),
        ("bead_diameter_um", "1"),
        ("temperature_c", "25"),
    ];
    let with = |changes: &[(&'static str, &'static str)]| -> Vec<(String, String)> {
        base.iter()
            .map(|(k, v)| {
                let v = changes.iter().find(|(c, _)| c == k).map_or(*v, |(_, v)| *v);
                (k.to_string(), v.to_string())
            })
            .collect()
    };
    // (case, file, fields, the field whose message slot must show the problem)
    type Case<'a> = (&'a str, Option<&'a Path>, Vec<(String, String)>, &'a str);
    let cases: Vec<Case<'_>> = vec![
        ("no-file", None, with(&[]), "file"),
        ("bad-cell", Some(&bad_csv_path), with(&[]), "file"),
        ("unknown-format", Some(&docx_path), with(&[]), "file"),
        (
            "bad-diameter",
            Some(&good_path),
            with(&[("bead_diameter_um", "one")]),
            "bead_diameter_um",
        ),
        (
            "no-temperature",
            Some(&good_path),
            with(&[("temperature_c", "")]),
            "temperature_c",
        ),
        ("no-trap", Some(&good_path), with(&[("trap", "")]), "trap"),
    ];
    for (case, file, fields, slot) in cases {
        // The problem the API gives for this very upload.
        let bytes = file.map(|p| {
            (
                p.file_name().and_then(|n| n.to_str()).unwrap_or("upload"),
                std::fs::read(p).expect("read"),
            )
        });
        let (status, problem) = api_upload(&server, &fields, bytes).await;
        assert!(status >= 400, "{case}: the API accepted it ({status})");
        // The same through the page. A fresh page clears the file input.
        browser.goto(&server.url("/#/")).await;
        browser.client.refresh().await.expect("reload");
        for (k, v) in &fields {
            browser.set_field(k, v).await;
        }
        if let Some(p) = file {
            browser.pick_file(p).await;
        }
        browser.submit().await;
        let shown = browser
            .wait_for(
                &format!("{case}: a message at {slot}"),
                &format!(
                    "const e = document.getElementById('err-{slot}');
                     return e && !e.hidden ? [e.textContent, e.dataset.code,
                       document.getElementById('f-{slot}').getAttribute('aria-invalid'),
                       document.getElementById('form-error').textContent] : null;"
                ),
            )
            .await;
        let expected = format!(
            "{}: {}",
            problem["title"].as_str().unwrap_or(""),
            problem["detail"].as_str().unwrap_or("")
        );
        assert_eq!(shown[0], json!(expected), "{case}: message at {slot}");
        assert_eq!(shown[1], problem["code"], "{case}: problem code");
        assert_eq!(shown[2], "true", "{case}: the control is marked invalid");
        assert!(
            shown[3]
                .as_str()
                .unwrap_or("")
                .contains(&status.to_string()),
            "{case}: the summary names the status: {}",
            shown[3]
        );
        if case == "bad-cell" || case == "bad-diameter" {
            browser.screenshot(&format!("refused-{case}"), false).await;
        }
    }
    // Past the server's size limit: 413, shown at the file, after the progress bar ran.
    let small_db = TestDb::new(Backend::Sqlite).await;
    let small = TestServer::start(
        &small_db,
        ServiceOptions {
            max_upload_bytes: 64 << 10,
            ..options()
        },
    )
    .await;
    std::fs::write(&good_path, &good_csv).expect("write");
    let (status, problem) =
        api_upload(&small, &with(&[]), Some(("good.csv", good_csv.clone()))).await;
    assert_eq!(status, 413, "{problem}");
    browser.goto(&small.url("/")).await;
    for (k, v) in with(&[]) {
        browser.set_field(&k, &v).await;
    }
    browser.pick_file(&good_path).await;
    browser.submit().await;
    let shown = browser
        .wait_for(
            "the 413 message at the file",
            "const e = document.getElementById('err-file');
             return e && !e.hidden ? [e.textContent, e.dataset.code] : null;",
        )
        .await;
    let expected = format!(
        "{}: {}",
        problem["title"].as_str().unwrap_or(""),
        problem["detail"].as_str().unwrap_or("")
    );
    assert_eq!(shown, json!([expected, problem["code"]]), "413 at the file");
    browser.screenshot("refused-too-large", false).await;
    small.stop().await;

    // A good upload afterwards clears the messages and leads to the result.
    browser.goto(&server.url("/#/")).await;
    browser.client.refresh().await.expect("reload");
    for (k, v) in with(&[]) {
        browser.set_field(&k, &v).await;
    }
    std::fs::write(&good_path, &good_csv).expect("write");
    browser.pick_file(&good_path).await;
    browser.submit().await;
    browser
        .wait_for("the result after a good upload", RESULT_ID)
        .await;
    browser.close().await;
    server.stop().await;
}

/// Uploads `file` through the page's form with `fields` set (in order, the panel of more
/// settings opened), and waits for a result other than `previous_id`; returns its id.
async fn upload_with_the_form(
    browser: &Browser,
    server: &TestServer,
    fields: &[(String, String)],
    file: &Path,
    previous_id: &str,
    what: &str,
) -> String {
    browser.goto(&server.url("/#/")).await;
    browser
        .wait_for(
            "the upload view",
            "return !document.getElementById('view-upload').hidden;",
        )
        .await;
    browser.open_more_settings().await;
    for (k, v) in fields {
        browser.set_field(k, v).await;
    }
    browser.pick_file(file).await;
    browser.submit().await;
    browser
        .wait_for(
            what,
            &RESULT_ID.replace(
                "return m &&",
                &format!("return m && m[1] !== '{previous_id}' &&"),
            ),
        )
        .await;
    let id = browser.wait_for(what, RESULT_ID).await;
    id.as_str().unwrap_or("").to_string()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn uploaded_demo_files_show_the_api_numbers_and_every_plot_draws_its_data() {
    let _turn = ONE_BROWSER.lock().await;
    let (_db, server) = sqlite_server().await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let csv = demo(dir.path(), "two_axes.csv");
    let volts = demo(dir.path(), "volts.i16");

    let mut browser = Browser::start().await;
    browser.goto(&server.url("/")).await;

    // 1. A CSV dropped onto the drop zone.
    for (k, v) in [
        ("instrument", "bench-a"),
        ("trap", "t1"),
        ("note", "after alignment"),
    ] {
        browser.set_field(k, v).await;
    }
    for (k, v) in csv.fields() {
        browser.set_field(&k, &v).await;
    }
    let text = String::from_utf8(csv.bytes()).expect("CSV is text");
    browser.drop_text_file(&csv.name(), &text).await;
    let chosen = browser
        .js(
            "return document.getElementById('file-name').textContent;",
            vec![],
        )
        .await;
    assert!(
        chosen.as_str().unwrap_or("").starts_with("two_axes.csv"),
        "the dropped file is not shown: {chosen}"
    );
    browser.js(WATCH_PROGRESS, vec![]).await;
    browser.submit().await;
    let id = browser.wait_for("the CSV result", RESULT_ID).await;
    let id = id.as_str().unwrap_or("").to_string();
    let seen = browser.js("return window.__progressSeen;", vec![]).await;
    let seen = seen.as_array().cloned().unwrap_or_default();
    assert!(
        seen.iter()
            .any(|s| s[0] == false && s[1].as_str().unwrap_or("").starts_with("Uploading")),
        "the progress bar never showed the upload: {seen:?}"
    );
    let doc = api_json(&server, &format!("/api/v1/calibrations/{id}")).await;
    let plots = api_json(&server, &format!("/api/v1/calibrations/{id}/plots")).await;
    let shown = browser.js(READ_RESULT, vec![]).await;
    check_result_view(&shown, &doc, &plots);
    assert_eq!(doc["note"], "after alignment");
    // The raw-file link gives the bytes uploaded.
    let raw = server
        .client
        .get(server.url(doc["links"]["recording"].as_str().unwrap_or("")))
        .send()
        .await
        .expect("GET recording")
        .bytes()
        .await
        .expect("bytes");
    assert_eq!(raw.as_ref(), csv.bytes().as_slice(), "raw recording link");
    browser.screenshot("result-csv", false).await;
    browser.screenshot("result-csv-full", true).await;

    // 2. A driven recording (the stage drive's fields under "more settings"): the active
    // calibration's numbers are shown as the API gives them.
    let driven = demo(dir.path(), "driven.csv");
    let mut fields = driven.fields();
    fields.push(("trap".into(), "t3".into()));
    let id_driven = upload_with_the_form(
        &browser,
        &server,
        &fields,
        &driven.path,
        &id,
        "the driven result",
    )
    .await;
    let doc = api_json(&server, &format!("/api/v1/calibrations/{id_driven}")).await;
    let plots = api_json(&server, &format!("/api/v1/calibrations/{id_driven}/plots")).await;
    assert!(doc["result"]["axes"][0]["active"].is_object(), "{doc}");
    let shown = browser.js(READ_RESULT, vec![]).await;
    check_result_view(&shown, &doc, &plots);
    browser.screenshot("result-driven", true).await;
    let id = id_driven;

    // 3. Volt data with three channels, picked with the file chooser: beta is shown.
    // The drive's fields are cleared so this upload is passive.
    let mut fields: Vec<(String, String)> = ["drive_frequency_hz", "drive_amplitude_nm"]
        .iter()
        .map(|k| (k.to_string(), String::new()))
        .collect();
    fields.extend(volts.fields());
    fields.push(("note".into(), String::new()));
    fields.push(("trap".into(), "t2".into()));
    let id2 = upload_with_the_form(
        &browser,
        &server,
        &fields,
        &volts.path,
        &id,
        "the volts result",
    )
    .await;
    let doc = api_json(&server, &format!("/api/v1/calibrations/{id2}")).await;
    let plots = api_json(&server, &format!("/api/v1/calibrations/{id2}/plots")).await;
    assert_eq!(doc["result"]["input"]["unit"], "V");
    let shown = browser.js(READ_RESULT, vec![]).await;
    check_result_view(&shown, &doc, &plots);
    browser.screenshot("result-volts-full", true).await;
    browser
        .js(
            "document.querySelector('#view-result figure[data-plot=spectrum]').scrollIntoView();",
            vec![],
        )
        .await;
    browser.screenshot("result-volts-plots", false).await;
    browser.viewport(TABLET).await;
    browser.screenshot("result-volts-tablet", false).await;
    browser.viewport(LAPTOP).await;

    // 4. A record with a linear drift of 20 nm/s (the thermal motion's sd is about 9 nm), uploaded
    // through the API: the Allan figure marks the drift onset at the API's exact value.
    let drifting = dir.path().join("drifting.csv");
    let output = binary()
        .arg("simulate")
        .arg("-o")
        .arg(&drifting)
        .args(["--sample-rate", "20000", "--duration", "2"])
        .args(["--stiffness", "0.05", "--seed", "44", "--drift", "20"])
        .output()
        .expect("run trapwise simulate");
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    let fields: Vec<(String, String)> = [
        ("instrument", "bench-a"),
        ("trap", "t3"),
        ("bead_diameter_um", "1"),
        ("temperature_c", "25"),
    ]
    .iter()
    .map(|(k, v)| (k.to_string(), v.to_string()))
    .collect();
    let (status, doc) = api_upload(
        &server,
        &fields,
        Some(("drifting.csv", std::fs::read(&drifting).expect("read"))),
    )
    .await;
    assert_eq!(status, 201, "{doc}");
    let id3 = doc["id"].as_str().expect("id").to_string();
    browser
        .goto(&server.url(&format!("/#/calibrations/{id3}")))
        .await;
    browser
        .wait_for(
            "the drifting result",
            &RESULT_ID.replace("return m &&", &format!("return m && m[1] === '{id3}' &&")),
        )
        .await;
    let doc = api_json(&server, &format!("/api/v1/calibrations/{id3}")).await;
    let plots = api_json(&server, &format!("/api/v1/calibrations/{id3}/plots")).await;
    let shown = browser.js(READ_RESULT, vec![]).await;
    check_result_view(&shown, &doc, &plots);
    let onset = doc["result"]["axes"][0]["allan"]["drift_onset_s"].as_f64();
    assert!(
        onset.is_some(),
        "no drift onset: {}",
        doc["result"]["axes"][0]["allan"]
    );
    browser
        .js(
            "document.querySelector('#view-result figure[data-plot=allan]').scrollIntoView();",
            vec![],
        )
        .await;
    browser.screenshot("result-drift-allan", false).await;

    // 5. The fields remember their last values across a reload.
    browser.goto(&server.url("/#/")).await;
    browser.client.refresh().await.expect("reload");
    browser.wait_settings().await;
    let remembered = browser
        .js(
            "return ['instrument','trap','bead_diameter_um','temperature_c','sample_rate_hz',
                     'format','channels','volts_per_count']
               .map((n) => document.getElementById('f-' + n).value);",
            vec![],
        )
        .await;
    let field = |k: &str| {
        volts
            .fields()
            .into_iter()
            .find(|(n, _)| n == k)
            .map(|(_, v)| v)
            .unwrap_or_default()
    };
    assert_eq!(
        remembered,
        json!([
            "bench-a",
            "t2",
            field("bead_diameter_um"),
            field("temperature_c"),
            field("sample_rate_hz"),
            field("format"),
            field("channels"),
            field("volts_per_count")
        ]),
        "remembered fields"
    );
    browser.close().await;
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn on_a_protected_server_the_document_links_fetch_with_the_page_token() {
    let _turn = ONE_BROWSER.lock().await;
    let db = TestDb::new(Backend::Sqlite).await;
    let server = TestServer::start(
        &db,
        ServiceOptions {
            tokens_required: true,
            ..options()
        },
    )
    .await;
    let (_, secret) = server.store.create_token("lab-a").await.expect("token");
    let dir = tempfile::tempdir().expect("temporary folder");
    let csv = demo(dir.path(), "two_axes.csv");
    let (status, doc) = upload(
        &server,
        &csv,
        &[("instrument", "bench-a"), ("trap", "t1")],
        Some(&secret),
    )
    .await;
    assert_eq!(status, 201, "{doc}");
    let id = doc["id"].as_str().unwrap_or("").to_string();
    // What the API gives for each link with the token in the header.
    let mut expected = Vec::new();
    for link in ["recording", "self", "plots"] {
        let path = doc["links"][link].as_str().unwrap_or("").to_string();
        let plain = server
            .client
            .get(server.url(&path))
            .send()
            .await
            .expect("GET");
        assert_eq!(plain.status().as_u16(), 401, "{path} without a token");
        let body = server
            .client
            .get(server.url(&path))
            .bearer_auth(&secret)
            .send()
            .await
            .expect("GET")
            .bytes()
            .await
            .expect("bytes");
        expected.push(body.len());
    }
    assert_eq!(expected[0], csv.bytes().len());

    let browser = Browser::start().await;
    browser.goto(&server.url("/")).await;
    browser
        .js(
            "localStorage.setItem('trapwise.page.token/1', arguments[0]);",
            vec![json!(secret)],
        )
        .await;
    browser
        .goto(&server.url(&format!("/#/calibrations/{id}")))
        .await;
    browser.wait_view("result").await;
    const CLICK_AND_WAIT: &str = "
        const status = document.querySelector('#view-result [data-link-status]');
        status.dataset.state = '';
        document.querySelector(`#view-result a[data-link=${arguments[0]}]`).click();";
    const OUTCOME: &str = "
        const s = document.querySelector('#view-result [data-link-status]');
        return s && (s.dataset.state === 'done' || s.dataset.state === 'error')
            ? [s.dataset.state, s.dataset.bytes || '', s.textContent] : null;";
    for (link, bytes) in ["recording", "json", "plots"].into_iter().zip(&expected) {
        browser.js(CLICK_AND_WAIT, vec![json!(link)]).await;
        let outcome = browser.wait_for(&format!("the {link} link"), OUTCOME).await;
        assert_eq!(outcome[0], "done", "{link}: {outcome}");
        assert_eq!(outcome[1], json!(bytes.to_string()), "{link}: {outcome}");
    }
    // A token the server does not know: the link says why instead of failing silently.
    browser
        .js(
            "localStorage.setItem('trapwise.page.token/1', 'tw_not-a-token');",
            vec![],
        )
        .await;
    browser.js(CLICK_AND_WAIT, vec![json!("json")]).await;
    let outcome = browser.wait_for("the refused json link", OUTCOME).await;
    assert_eq!(outcome[0], "error", "{outcome}");
    assert!(
        outcome[2].as_str().unwrap_or("").contains("(401)"),
        "{outcome}"
    );
    browser.close().await;
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn history_and_overview_show_every_run_of_each_trap_and_open_their_results() {
    let _turn = ONE_BROWSER.lock().await;
    let (_db, server) = sqlite_server().await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let conditions = [
        ("bead_diameter_um".to_string(), "1".to_string()),
        ("temperature_c".to_string(), "25".to_string()),
    ];
    // Our invented bench: five runs of trap t1 at one alignment, then one after a realignment
    // that stiffened x by 40 %, plus one run of t2 and one of another instrument.
    let mut runs = Vec::new();
    for (i, (instrument, trap, stiffness)) in [
        ("bench-a", "t1", "0.05,0.04"),
        ("bench-a", "t1", "0.05,0.04"),
        ("bench-a", "t1", "0.05,0.04"),
        ("bench-a", "t1", "0.05,0.04"),
        ("bench-a", "t1", "0.05,0.04"),
        ("bench-a", "t1", "0.07,0.04"),
        ("bench-a", "t2", "0.03,0.03"),
        ("bench-b", "left", "0.02,0.02"),
    ]
    .into_iter()
    .enumerate()
    {
        let name = format!("run{i}.csv");
        let path = simulated(dir.path(), &name, stiffness, 100 + i as u64);
        let mut fields = vec![
            ("instrument".to_string(), instrument.to_string()),
            ("trap".to_string(), trap.to_string()),
        ];
        fields.extend(conditions.iter().cloned());
        let (status, doc) = api_upload(
            &server,
            &fields,
            Some((&name, std::fs::read(&path).expect("read"))),
        )
        .await;
        assert_eq!(status, 201, "upload {name}: {doc}");
        runs.push(doc);
        // Distinct, increasing creation times.
        tokio::time::sleep(Duration::from_millis(20)).await;
    }

    let mut browser = Browser::start().await;
    browser.goto(&server.url("/#/overview")).await;
    browser.wait_view("overview").await;
    let overview = browser
        .js(
            "const out = {};
             for (const s of document.querySelectorAll('#view-overview [data-instrument]')) {
               out[s.dataset.instrument] = {};
               for (const tr of s.querySelectorAll('tr[data-trap]')) {
                 out[s.dataset.instrument][tr.dataset.trap] = {
                   kappa: Object.fromEntries([...tr.querySelectorAll('td[data-axis]')]
                     .map((td) => [td.dataset.axis, td.dataset.value])),
                   runs: tr.querySelector('td[data-runs]').textContent,
                   latest: tr.querySelector('a[data-link=latest]').getAttribute('href'),
                 };
               }
             }
             return out;",
            vec![],
        )
        .await;
    for (instrument, trap, n_runs, latest) in [
        ("bench-a", "t1", 6, &runs[5]),
        ("bench-a", "t2", 1, &runs[6]),
        ("bench-b", "left", 1, &runs[7]),
    ] {
        let row = &overview[instrument][trap];
        assert!(
            row.is_object(),
            "overview lacks {instrument} {trap}: {overview}"
        );
        assert_eq!(
            row["runs"],
            json!(n_runs.to_string()),
            "{instrument} {trap} runs"
        );
        let id = latest["id"].as_str().unwrap_or("");
        assert_eq!(row["latest"], json!(format!("#/calibrations/{id}")));
        for axis in latest["result"]["axes"].as_array().expect("axes") {
            let name = axis["axis"].as_str().unwrap_or("");
            assert_eq!(
                f64_of(&row["kappa"][name], name),
                f64_of(&axis["stiffness_pn_per_nm"]["consensus"]["value"], name),
                "{instrument} {trap} axis {name}"
            );
        }
    }
    assert_eq!(
        overview.as_object().map_or(0, serde_json::Map::len),
        2,
        "instruments"
    );
    browser.screenshot("overview", false).await;

    // From the overview to the history of t1, by the keyboard-reachable link.
    browser
        .client
        .find(Locator::Css(
            "[data-instrument='bench-a'] tr[data-trap='t1'] a[data-link=history]",
        ))
        .await
        .expect("the history link")
        .click()
        .await
        .expect("follow it");
    browser.wait_view("history").await;
    let history = api_json(&server, "/api/v1/instruments/bench-a/traps/t1/history").await;
    let drawn = browser
        .js(
            "const out = {};
             for (const f of document.querySelectorAll('#view-history figure[data-plot=history]')) {
               out[f.dataset.axis] = {
                 runs: [...f.querySelectorAll('[data-series=run]')]
                   .map((m) => [m.dataset.id, m.dataset.value, m.dataset.outside]),
                 spread: f.querySelectorAll('[data-series=spread]').length,
                 labels: [...f.querySelectorAll('.axis-label')].map((t) => t.textContent),
               };
             }
             return {axes: out,
                     rows: [...document.querySelectorAll('#runs-table tbody tr')].map((r) => r.dataset.id)};",
            vec![],
        )
        .await;
    for axis in history["axes"].as_array().expect("history axes") {
        let name = axis["axis"].as_str().unwrap_or("");
        let points = axis["points"].as_array().expect("points");
        let marks = drawn["axes"][name]["runs"]
            .as_array()
            .cloned()
            .unwrap_or_default();
        assert_eq!(marks.len(), points.len(), "axis {name}: one mark per run");
        assert_eq!(points.len(), 6, "axis {name}: runs of t1");
        for (mark, point) in marks.iter().zip(points) {
            assert_eq!(mark[0], point["calibration_id"]);
            assert_eq!(
                f64_of(&mark[1], name),
                f64_of(&point["stiffness_pn_per_nm"]["value"], name)
            );
        }
        check_count(
            &format!("axis {name} spread"),
            &drawn["axes"][name]["spread"],
            1,
        );
        assert!(
            drawn["axes"][name]["labels"][1]
                .as_str()
                .unwrap_or("")
                .contains("pN/nm"),
            "axis {name}: y label"
        );
    }
    // The realignment stands out on x: the last run lies outside the spread of the five before.
    let x_marks = drawn["axes"]["x"]["runs"]
        .as_array()
        .cloned()
        .unwrap_or_default();
    assert_eq!(
        x_marks.last().map(|m| m[2].clone()),
        Some(json!("true")),
        "the realigned run is not marked: {x_marks:?}"
    );
    let listed: Vec<Value> = runs[..6].iter().rev().map(|d| d["id"].clone()).collect();
    assert_eq!(
        drawn["rows"],
        Value::Array(listed),
        "past runs, newest first"
    );
    browser.screenshot("history", false).await;
    browser.screenshot("history-full", true).await;

    // A past run opens its result.
    let first = runs[0]["id"].as_str().unwrap_or("").to_string();
    browser
        .client
        .find(Locator::Css(&format!(
            "#runs-table tr[data-id='{first}'] a[data-link=open]"
        )))
        .await
        .expect("the Open link")
        .click()
        .await
        .expect("open the run");
    browser.wait_view("result").await;
    let hash = browser.js("return location.hash;", vec![]).await;
    assert_eq!(hash, json!(format!("#/calibrations/{first}")));
    browser.close().await;
    server.stop().await;
}

/// Every run-setting control, read in one script: control, label, choices, hint, visibility.
const READ_SETTING_CONTROLS: &str = "
const out = {};
for (const f of document.querySelectorAll('#upload-form [data-setting]')) {
  const key = f.dataset.setting;
  const c = document.getElementById('f-' + key);
  out[key] = {
    tag: c.tagName.toLowerCase(),
    type: c.type,
    label: c.labels.length ? c.labels[0].textContent : '',
    options: c.tagName === 'SELECT' ? [...c.options].map((o) => o.value) : null,
    hint: document.getElementById('hint-' + key).textContent,
    visible: c.getClientRects().length > 0,
    required: c.required,
  };
}
return out;
";

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_setting_of_the_table_has_a_control_and_reaches_the_stored_calibration() {
    let _turn = ONE_BROWSER.lock().await;
    let (_db, server) = sqlite_server().await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let table = api_json(&server, "/api/v1/settings").await;
    let specs = table["settings"].as_array().cloned().unwrap_or_default();
    assert_eq!(specs.len(), trapwise::settings::SPECS.len());

    let mut browser = Browser::start().await;
    browser.goto(&server.url("/")).await;
    browser.wait_settings().await;
    browser.open_more_settings().await;
    let shown = browser.js(READ_SETTING_CONTROLS, vec![]).await;
    assert_eq!(
        shown.as_object().map_or(0, serde_json::Map::len),
        specs.len(),
        "one control per setting: {shown}"
    );
    for spec in &specs {
        let key = spec["key"].as_str().unwrap_or("");
        let c = &shown[key];
        assert!(c.is_object(), "{key}: no control on the page");
        let (tag, kind) = (c["tag"].as_str().unwrap_or(""), spec["kind"].as_str());
        match kind {
            Some("boolean") => {
                assert_eq!((tag, &c["type"]), ("input", &json!("checkbox")), "{key}")
            }
            Some("choice") => {
                assert_eq!(tag, "select", "{key}");
                let mut options = vec![json!("")];
                options.extend(spec["choices"].as_array().cloned().unwrap_or_default());
                assert_eq!(c["options"], Value::Array(options), "{key}: options");
            }
            _ => assert_eq!((tag, &c["type"]), ("input", &json!("text")), "{key}"),
        }
        let unit = spec["unit"].as_str().unwrap_or("");
        let label = spec["label"].as_str().unwrap_or("");
        let expected_label = if unit.is_empty() {
            label.to_string()
        } else {
            format!("{label} ({unit})")
        };
        assert_eq!(c["label"], json!(expected_label), "{key}: label");
        let hint = c["hint"].as_str().unwrap_or("");
        assert!(
            hint.contains(spec["help"].as_str().unwrap_or("-")),
            "{key}: hint `{hint}`"
        );
        match spec["default"].as_str() {
            Some(d) => assert!(hint.contains(&format!("Default: {d}")), "{key}: `{hint}`"),
            None => assert_eq!(c["required"], true, "{key}: not marked required"),
        }
        assert_eq!(
            c["visible"], true,
            "{key}: not reachable with the panel open"
        );
    }
    browser.screenshot("upload-all-settings", true).await;

    // Settings no fixed field ever had: a count, a choice, a box and a number.
    let csv = simulated(dir.path(), "tuned.csv", "0.05,0.04", 21);
    let fields: Vec<(String, String)> = [
        ("instrument", "bench-a"),
        ("trap", "t1"),
        ("bead_diameter_um", "1"),
        ("temperature_c", "25"),
        ("windows", "3"),
        ("detrend", "linear"),
        ("hydrodynamics", "true"),
        ("time_tolerance", "0.002"),
    ]
    .iter()
    .map(|(k, v)| (k.to_string(), v.to_string()))
    .collect();
    for (k, v) in &fields {
        browser.set_field(k, v).await;
    }
    browser.pick_file(&csv).await;
    browser.submit().await;
    let id = browser.wait_for("the tuned result", RESULT_ID).await;
    let id = id.as_str().unwrap_or("").to_string();
    let doc = api_json(&server, &format!("/api/v1/calibrations/{id}")).await;
    let used = &doc["result"]["options"];
    assert_eq!(
        (&used["windows"], &used["detrend"], &used["hydrodynamics"]),
        (&json!(3), &json!("linear"), &json!(true)),
        "{used}"
    );
    let stored = server
        .store
        .calibration(trapwise::http::auth::OPEN_LAB, &id)
        .await
        .expect("read")
        .expect("stored");
    for (key, value) in [
        ("detrend", "linear"),
        ("hydrodynamics", "true"),
        ("time_tolerance", "0.002"),
        ("windows", "3"),
    ] {
        assert!(
            stored
                .settings
                .contains(&(key.to_string(), value.to_string())),
            "{key}: {:?}",
            stored.settings
        );
    }
    // The page sent exactly these settings and labels: the same upload through the API finds
    // the stored calibration by its idempotency key.
    let bytes = std::fs::read(&csv).expect("read");
    let (status, again) = api_upload(&server, &fields, Some(("tuned.csv", bytes))).await;
    assert_eq!((status, &again["id"]), (200, &json!(id)), "{again}");

    // The settings are remembered across a reload, the box included.
    browser.goto(&server.url("/#/")).await;
    browser.client.refresh().await.expect("reload");
    browser.wait_settings().await;
    let remembered = browser
        .js(
            "const v = (k) => document.getElementById('f-' + k);
             return [v('windows').value, v('detrend').value, v('hydrodynamics').checked,
                     v('time_tolerance').value];",
            vec![],
        )
        .await;
    assert_eq!(remembered, json!(["3", "linear", true, "0.002"]));
    browser.close().await;
    server.stop().await;

    // On a server that wants a token, the status line says why there are no controls, and
    // giving the token makes them.
    let db = TestDb::new(Backend::Sqlite).await;
    let protected = TestServer::start(
        &db,
        ServiceOptions {
            tokens_required: true,
            ..options()
        },
    )
    .await;
    let (_, secret) = protected.store.create_token("lab-a").await.expect("token");
    let browser = Browser::start().await;
    browser.goto(&protected.url("/")).await;
    let refused = browser
        .wait_for(
            "the refused settings",
            "const s = document.getElementById('settings-status');
             return document.getElementById('upload-form').dataset.settings === 'error'
               ? [s.textContent, s.dataset.code, document.getElementById('more-settings').open,
                  document.querySelectorAll('[data-setting]').length]
               : null;",
        )
        .await;
    assert_eq!(refused[1], "token-required", "{refused}");
    assert!(
        refused[0].as_str().unwrap_or("").contains("access token"),
        "{refused}"
    );
    assert_eq!((&refused[2], &refused[3]), (&json!(true), &json!(0)));
    browser.set_field("token", &secret).await;
    browser
        .client
        .find(Locator::Id("f-token"))
        .await
        .expect("the token field")
        .send_keys("\u{E004}")
        .await
        .expect("press Tab");
    browser.wait_settings().await;
    let n_controls = browser
        .js(
            "return document.querySelectorAll('[data-setting]').length;",
            vec![],
        )
        .await;
    assert_eq!(n_controls, json!(specs.len()));
    browser.close().await;
    protected.stop().await;
}

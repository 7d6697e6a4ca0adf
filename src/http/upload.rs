//! `POST /api/v1/calibrations`: one recording in, one stored calibration out.
//!
//! Two request shapes carry the same vocabulary: `multipart/form-data` with a `file` part and
//! text fields, or the raw file as the body with the fields as query parameters (for curl and
//! scripts). Fields are the labels `instrument`, `trap` (both required), `note`, `axes`
//! (comma-separated axis labels), `file_name`, and exactly the run settings of the settings
//! table (`settings::KEYS`), which go through `Settings::apply`; any other name is refused.
//!
//! The recording streams to a temporary file while its SHA-256 is taken, so it is never held
//! twice in memory; the file is read back once for parsing. The idempotency key (SHA-256 of the
//! file hash, the effective settings, the labels and the model version) finds a retried upload's calibration before
//! any work. The calibration runs on the blocking pool behind the admission gate; only when it
//! succeeds are the blob and the rows stored, so a failed upload leaves nothing behind.

use super::AppState;
use super::auth::Lab;
use super::idle::{BodyWatch, IdleBody};
use super::problem::AppError;
use super::wire::{AxisPlots, CalibrationDocument, PlotsDocument};
use crate::pipeline;
use crate::settings::Settings;
use crate::store::blobs::{BlobWriter, StagedBlob};
use crate::store::{NewCalibration, now_ms};
use axum::extract::{FromRequest, Multipart, Request, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use futures_util::StreamExt;
use std::collections::BTreeMap;
use std::sync::Arc;
use std::time::Instant;

/// Largest text field, bytes.
const MAX_FIELD_BYTES: usize = 64 * 1024;
/// Slack for multipart framing and text fields in the early Content-Length check, bytes.
const FORM_OVERHEAD_BYTES: u64 = 1 << 20;
/// Longest label, characters.
const MAX_LABEL_CHARS: usize = crate::recording::MAX_NAME_CHARS;
/// Most bytes read and discarded after refusing an upload (see `linger`).
const LINGER_BYTES: usize = 16 << 20;
/// Longest time spent discarding them, seconds.
const LINGER_S: u64 = 10;
/// Seconds a client is asked to wait when the queue is full.
const RETRY_AFTER_S: u64 = 5;
/// Raw-body content types accepted (besides none at all).
const RAW_TYPES: [&str; 6] = [
    "application/octet-stream",
    "text/csv",
    "text/tab-separated-values",
    "text/plain",
    "application/x-npy",
    "application/vnd.trapwise.recording",
];

/// The labels of an upload.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
struct Labels {
    instrument: String,
    trap: String,
    note: String,
    axes: Vec<String>,
    file_name: String,
}

/// After refusing an upload, keeps reading (and discarding) what the client still sends, for at
/// most `LINGER_BYTES` or `LINGER_S`, so that it can read the 413 instead of seeing its
/// connection reset mid-send (the "lingering close" of common HTTP servers).
fn linger<S, T, E>(mut chunks: S)
where
    S: futures_util::Stream<Item = Result<T, E>> + Unpin + Send + 'static,
    T: AsRef<[u8]> + Send,
{
    tokio::spawn(async move {
        let drain = async {
            let mut n_bytes = 0usize;
            while let Some(Ok(chunk)) = chunks.next().await {
                n_bytes += chunk.as_ref().len();
                if n_bytes > LINGER_BYTES {
                    break;
                }
            }
        };
        let _ = tokio::time::timeout(std::time::Duration::from_secs(LINGER_S), drain).await;
    });
}

/// Lingers on the rest of a multipart body (see `linger`).
fn linger_multipart(mut multipart: Multipart) {
    tokio::spawn(async move {
        let drain = async {
            let mut n_bytes = 0usize;
            while let Ok(Some(mut field)) = multipart.next_field().await {
                while let Ok(Some(chunk)) = field.chunk().await {
                    n_bytes += chunk.len();
                    if n_bytes > LINGER_BYTES {
                        return;
                    }
                }
            }
        };
        let _ = tokio::time::timeout(std::time::Duration::from_secs(LINGER_S), drain).await;
    });
}

fn too_large(state: &AppState) -> AppError {
    AppError::TooLarge {
        limit_bytes: state.max_upload_bytes(),
        hint: "split the recording, or ask the operator to raise TRAPWISE_MAX_UPLOAD_BYTES",
    }
}

fn busy(state: &AppState) -> AppError {
    AppError::Busy {
        capacity: state.admission().capacity(),
        retry_after_s: RETRY_AFTER_S,
    }
}

fn io_error(e: std::io::Error) -> AppError {
    AppError::internal(format!("upload temporary file: {e}"))
}

/// The error of a body read that failed: the stall when `watch` saw one (408), else `other`.
fn body_error(state: &AppState, watch: &BodyWatch, other: AppError) -> AppError {
    if watch.stalled() {
        AppError::Stalled {
            idle_s: state.upload_idle_s(),
            byte_offset: watch.received_bytes(),
        }
    } else {
        other
    }
}

/// Streams `chunks` into a new blob file, enforcing the size limit. The idle limit is the
/// body's own (`idle::IdleBody`), so a stall ends the stream with an error that `watch` names.
async fn stream_to_blob<S, E>(
    state: &AppState,
    watch: &BodyWatch,
    chunks: &mut S,
) -> Result<StagedBlob, AppError>
where
    S: futures_util::Stream<Item = Result<axum::body::Bytes, E>> + Unpin,
    E: std::fmt::Display,
{
    let mut writer: BlobWriter = state.store().blobs().writer().await.map_err(io_error)?;
    while let Some(chunk) = chunks.next().await {
        let chunk = chunk.map_err(|e| {
            let failed = AppError::BadRequest {
                code: "body-read-failed",
                detail: format!(
                    "request body, byte offset {}: {e}; send the file again",
                    writer.size_bytes()
                ),
                field: Some("file".into()),
            };
            body_error(state, watch, failed)
        })?;
        if writer.size_bytes() + chunk.len() as u64 > state.max_upload_bytes() {
            return Err(too_large(state));
        }
        writer.write(&chunk).await.map_err(io_error)?;
    }
    writer.finish().await.map_err(io_error)
}

/// Reads one text field, at most `MAX_FIELD_BYTES`.
async fn field_text(
    state: &AppState,
    watch: &BodyWatch,
    name: &str,
    mut field: axum::extract::multipart::Field<'_>,
) -> Result<String, AppError> {
    let mut bytes = Vec::new();
    while let Some(chunk) = field.chunk().await.map_err(|e| {
        let malformed = AppError::bad_field(
            "malformed-multipart",
            name,
            format!("form field `{name}`: {e}"),
        );
        body_error(state, watch, malformed)
    })? {
        if bytes.len() + chunk.len() > MAX_FIELD_BYTES {
            return Err(AppError::bad_field(
                "field-too-long",
                name,
                format!(
                    "form field `{name}` is longer than {MAX_FIELD_BYTES} bytes; a text field holds one value"
                ),
            ));
        }
        bytes.extend_from_slice(&chunk);
    }
    String::from_utf8(bytes).map_err(|e| {
        AppError::bad_field(
            "invalid-utf8",
            name,
            format!(
                "form field `{name}`, byte offset {}: invalid UTF-8; send text fields as UTF-8",
                e.utf8_error().valid_up_to()
            ),
        )
    })
}

/// Reads a multipart body: the `file` part to a blob, the rest as text pairs.
async fn read_multipart(
    state: &AppState,
    watch: &BodyWatch,
    request: Request,
    pairs: &mut Vec<(String, String)>,
) -> Result<(Option<StagedBlob>, Option<String>), AppError> {
    let mut multipart =
        Multipart::from_request(request, state)
            .await
            .map_err(|e| AppError::BadRequest {
                code: "malformed-multipart",
                detail: format!("header `Content-Type`: {}", e.body_text()),
                field: None,
            })?;
    let mut staged = None;
    let mut part_file_name = None;
    loop {
        let field = multipart.next_field().await.map_err(|e| {
            let malformed = AppError::BadRequest {
                code: "malformed-multipart",
                detail: format!("multipart body: {e}; check the boundary and the part headers"),
                field: None,
            };
            body_error(state, watch, malformed)
        })?;
        let Some(field) = field else { break };
        let name = field.name().unwrap_or("").to_string();
        if name == "file" {
            if staged.is_some() {
                return Err(AppError::bad_field(
                    "duplicate-field",
                    "file",
                    "form field `file` appears twice; send one recording per upload",
                ));
            }
            part_file_name = field.file_name().map(str::to_string);
            let stream = futures_util::stream::unfold(field, |mut f| async move {
                match f.chunk().await {
                    Ok(Some(c)) => Some((Ok(c), f)),
                    Ok(None) => None,
                    Err(e) => Some((Err(e), f)),
                }
            });
            let mut stream = Box::pin(stream);
            let result = stream_to_blob(state, watch, &mut stream).await;
            drop(stream);
            match result {
                Ok(blob) => staged = Some(blob),
                Err(e) => {
                    if matches!(e, AppError::TooLarge { .. }) {
                        linger_multipart(multipart);
                    }
                    return Err(e);
                }
            }
        } else if name.is_empty() {
            return Err(AppError::BadRequest {
                code: "malformed-multipart",
                detail: "multipart body: a part has no name in its Content-Disposition; name \
                         every part (file, instrument, trap, ...)"
                    .into(),
                field: None,
            });
        } else {
            let text = field_text(state, watch, &name, field).await?;
            pairs.push((name, text));
        }
    }
    Ok((staged, part_file_name))
}

fn query_pairs(request: &Request) -> Result<Vec<(String, String)>, AppError> {
    axum::extract::Query::<Vec<(String, String)>>::try_from_uri(request.uri())
        .map(|q| q.0)
        .map_err(|e| AppError::BadRequest {
            code: "malformed-query",
            detail: format!("query string: {}", e.body_text()),
            field: None,
        })
}

fn check_label(name: &str, value: &str) -> Result<String, AppError> {
    let value = value.trim();
    if value.chars().count() > MAX_LABEL_CHARS || value.chars().any(char::is_control) {
        return Err(AppError::bad_field(
            "invalid-field",
            name,
            format!(
                "field `{name}`: at most {MAX_LABEL_CHARS} characters without control characters"
            ),
        ));
    }
    Ok(value.to_string())
}

fn required_label(map: &BTreeMap<String, String>, name: &str) -> Result<String, AppError> {
    let value = check_label(name, map.get(name).map_or("", String::as_str))?;
    if value.is_empty() {
        return Err(AppError::bad_field(
            "missing-field",
            name,
            format!("field `{name}` is required: name the {name} this recording comes from"),
        ));
    }
    check_name(name, &value)?;
    Ok(value)
}

/// A label that names something (an instrument, a trap, an axis) follows the rules of every
/// stored name, `recording::name_fault`, the same as axis names from a file's header.
fn check_name(field: &str, value: &str) -> Result<(), AppError> {
    match crate::recording::name_fault(value) {
        None => Ok(()),
        Some(fault) => Err(AppError::bad_field(
            "invalid-field",
            field,
            format!("field `{field}`: {fault}"),
        )),
    }
}

/// The file name without directories, or `upload` when none was given.
fn clean_file_name(name: Option<&str>) -> String {
    let base = name
        .unwrap_or("")
        .rsplit(['/', '\\'])
        .next()
        .unwrap_or("")
        .trim()
        .chars()
        .filter(|c| !c.is_control() && *c != '"')
        .take(MAX_LABEL_CHARS)
        .collect::<String>();
    if base.is_empty() {
        "upload".to_string()
    } else {
        base
    }
}

/// Splits fields into settings and labels; duplicate and unknown keys are errors.
fn split_fields(
    pairs: Vec<(String, String)>,
    part_file_name: Option<String>,
) -> Result<(Settings, Labels), AppError> {
    let mut map: BTreeMap<String, String> = BTreeMap::new();
    for (key, value) in pairs {
        // A list setting (`dataset`) may be repeated, one name per field; the names join.
        let repeatable = crate::settings::spec::spec(&key).is_some_and(|s| s.repeatable());
        if let (true, Some(names)) = (repeatable, map.get_mut(&key)) {
            names.push(',');
            names.push_str(&value);
            continue;
        }
        if map.contains_key(&key) {
            return Err(AppError::bad_field(
                "duplicate-field",
                &key,
                format!("field `{key}` is given twice; give each field once"),
            ));
        }
        map.insert(key, value);
    }
    let mut settings = Settings::default();
    for (key, value) in &map {
        if !matches!(
            key.as_str(),
            "instrument" | "trap" | "note" | "axes" | "file_name"
        ) {
            settings.apply(key, value)?;
        }
    }
    let axes: Vec<String> = check_label("axes", map.get("axes").map_or("", String::as_str))?
        .split(',')
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty())
        .collect();
    for axis in &axes {
        check_name("axes", axis)?;
    }
    let file_name = match map.get("file_name") {
        Some(n) => clean_file_name(Some(n)),
        None => clean_file_name(part_file_name.as_deref()),
    };
    let labels = Labels {
        instrument: required_label(&map, "instrument")?,
        trap: required_label(&map, "trap")?,
        note: check_label("note", map.get("note").map_or("", String::as_str))?,
        axes,
        file_name,
    };
    Ok((settings, labels))
}

fn content_type(headers: &HeaderMap) -> Result<Option<String>, AppError> {
    headers
        .get(header::CONTENT_TYPE)
        .map(|v| {
            v.to_str()
                .map(|s| s.to_ascii_lowercase())
                .map_err(|_| AppError::BadRequest {
                    code: "malformed-header",
                    detail: "header `Content-Type` is not visible ASCII".into(),
                    field: None,
                })
        })
        .transpose()
}

/// The idempotency key: SHA-256 over the file hash, the effective settings (given ones and the
/// stated defaults, `Settings::effective_pairs`), the labels and the model version, so a retry
/// after a default or a model changed is a new calibration.
fn idempotency_key(
    sha256: &str,
    effective: &[(String, String)],
    labels: &Labels,
    model_version: u32,
) -> String {
    let text =
        serde_json::to_string(&(sha256, effective, labels, model_version)).unwrap_or_default();
    crate::store::sha256_text(&text)
}

fn document_response(status: StatusCode, doc: &CalibrationDocument) -> Result<Response, AppError> {
    let body = serde_json::to_string(doc).map_err(AppError::internal)?;
    let mut response = (status, body).into_response();
    let headers = response.headers_mut();
    headers.insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/json"),
    );
    if let Ok(location) = HeaderValue::from_str(&doc.links.self_) {
        headers.insert(header::LOCATION, location);
    }
    Ok(response)
}

/// Upload a recording and store its calibration.
#[utoipa::path(
    post,
    path = "/api/v1/calibrations",
    tag = "calibrations",
    params(
        ("instrument" = String, Query, description = "Instrument label (required: here, or as a form field of a multipart body)"),
        ("trap" = String, Query, description = "Trap label (required: here, or as a form field of a multipart body)"),
        ("note" = Option<String>, Query, description = "Operator note"),
        ("axes" = Option<String>, Query, description = "Comma-separated axis labels"),
        ("file_name" = Option<String>, Query, description = "File name, used for format detection"),
        // The run settings follow, one per row of the settings table (`openapi::SettingParameters`),
        // and the two bodies (`openapi::UploadBody`).
    ),
    responses(
        (status = 201, description = "Calibrated and stored", body = CalibrationDocument),
        (status = 200, description = "The same upload was stored before: its calibration", body = CalibrationDocument),
        (status = 400, description = "Malformed input", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 401, description = "Missing or bad token", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 413, description = "Upload too large", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 408, description = "The client sent nothing for the idle limit", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 415, description = "Unknown content type or file format", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 422, description = "Parsed but cannot be calibrated", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 429, description = "Too many connections from this client (Retry-After)", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 503, description = "Calibration queue full or too many uploads at once, answered before the body is read (Retry-After)", body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn create(
    State(state): State<AppState>,
    lab: Result<Lab, AppError>,
    request: Request,
) -> Result<Response, AppError> {
    // Refusals before the body is read linger on it, so that large uploads see the answer.
    let refuse = |request: Request, e: AppError| {
        linger(request.into_body().into_data_stream());
        Err(e)
    };
    let lab = match lab {
        Ok(Lab(lab)) => lab,
        Err(e) => return refuse(request, e),
    };
    let mut pairs = match query_pairs(&request) {
        Ok(p) => p,
        Err(e) => return refuse(request, e),
    };
    let declared = request
        .headers()
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<u64>().ok());
    let raw_limit_exceeded = declared.is_some_and(|n| n > state.max_upload_bytes());
    let form_limit_exceeded =
        declared.is_some_and(|n| n > state.max_upload_bytes().saturating_add(FORM_OVERHEAD_BYTES));
    let mime = match content_type(request.headers()) {
        Ok(m) => m,
        Err(e) => return refuse(request, e),
    };
    let essence = mime
        .as_deref()
        .map(|m| m.split(';').next().unwrap_or("").trim().to_string());
    let is_multipart = essence.as_deref() == Some("multipart/form-data");
    let is_raw = essence.as_deref().is_none_or(|m| RAW_TYPES.contains(&m));
    if !is_multipart && !is_raw {
        return refuse(
            request,
            AppError::UnsupportedMediaType {
                code: "unsupported-media-type",
                detail: format!(
                    "header `Content-Type`: `{}` is not accepted; send multipart/form-data with \
                 a `file` part, or the raw file as application/octet-stream",
                    essence.unwrap_or_default()
                ),
                field: None,
            },
        );
    }
    if form_limit_exceeded || (is_raw && raw_limit_exceeded) {
        return refuse(request, too_large(&state));
    }
    // A full queue or too many uploads on their way to disk: say so before the body is read,
    // instead of after the client spent minutes sending it.
    if state.admission().is_full() {
        return refuse(request, busy(&state));
    }
    let Ok(upload_permit) = Arc::clone(state.uploads()).try_acquire_owned() else {
        let e = AppError::TooManyUploads {
            limit: state.max_uploads(),
            retry_after_s: RETRY_AFTER_S,
        };
        return refuse(request, e);
    };
    let watch = Arc::new(BodyWatch::default());
    let (parts, body) = request.into_parts();
    let idle = std::time::Duration::from_secs(state.upload_idle_s());
    let body = IdleBody::new(body.into_data_stream(), idle, Arc::clone(&watch));
    let request = Request::from_parts(parts, axum::body::Body::from_stream(body));
    let (staged, part_file_name) = if is_multipart {
        read_multipart(&state, &watch, request, &mut pairs).await?
    } else {
        let mut stream = request.into_body().into_data_stream();
        match stream_to_blob(&state, &watch, &mut stream).await {
            Ok(blob) => (Some(blob), None),
            Err(e) => {
                if matches!(e, AppError::TooLarge { .. }) {
                    linger(stream);
                }
                return Err(e);
            }
        }
    };
    drop(upload_permit);
    let staged = staged.ok_or_else(|| {
        AppError::bad_field(
            "missing-field",
            "file",
            "form field `file` is missing: attach the recording as a part named `file`",
        )
    })?;
    let (settings, labels) = split_fields(pairs, part_file_name)?;
    let canonical: Vec<(String, String)> = settings
        .to_pairs()
        .into_iter()
        .map(|(k, v)| (k.to_string(), v))
        .collect();
    let effective: Vec<(String, String)> = settings
        .effective_pairs()
        .into_iter()
        .map(|(k, v)| (k.to_string(), v))
        .collect();
    let key = idempotency_key(
        &staged.sha256,
        &effective,
        &labels,
        crate::calibration::MODEL_VERSION,
    );
    if let Some(existing) = state.store().find_by_key(&lab, &key).await? {
        metrics::counter!("trapwise_calibrations_total", "outcome" => "replayed").increment(1);
        return document_response(
            StatusCode::OK,
            &CalibrationDocument::from_stored(&existing)?,
        );
    }

    let place = state.admission().try_enter().ok_or_else(|| busy(&state))?;
    let permit = place
        .slot()
        .await
        .ok_or_else(|| AppError::internal("calibration slots closed"))?;
    let path = staged.path().to_path_buf();
    let file_name = labels.file_name.clone();
    let run_settings = settings.clone();
    let max_upload_bytes = state.max_upload_bytes();
    let started = Instant::now();
    let outcome = tokio::task::spawn_blocking(move || {
        let _permit = permit;
        let mut file = std::fs::File::open(&path)?;
        let size = usize::try_from(file.metadata()?.len()).ok();
        Ok::<_, std::io::Error>(pipeline::run_from_limited(
            &file_name,
            &mut file,
            size,
            &run_settings,
            true,
            max_upload_bytes,
        ))
    })
    .await
    .map_err(|e| AppError::internal(format!("calibration task: {e}")))?
    .map_err(io_error)?;
    drop(place);
    metrics::histogram!("trapwise_calibration_duration_seconds")
        .record(started.elapsed().as_secs_f64());
    let mut report = match outcome {
        Ok(r) => r,
        Err(e) => {
            metrics::counter!("trapwise_calibrations_total", "outcome" => "rejected").increment(1);
            return Err(e.into());
        }
    };
    if !labels.axes.is_empty() && labels.axes.len() != report.axes.len() {
        metrics::counter!("trapwise_calibrations_total", "outcome" => "rejected").increment(1);
        return Err(AppError::bad_field(
            "axes-mismatch",
            "axes",
            format!(
                "field `axes` names {} axes but the recording holds {} ({}); give one label per axis or none",
                labels.axes.len(),
                report.axes.len(),
                report.input.axes.join(", ")
            ),
        ));
    }
    let id = uuid::Uuid::now_v7().to_string();
    let plots = PlotsDocument {
        calibration_id: id.clone(),
        axes: report
            .axes
            .iter_mut()
            .filter_map(|a| {
                a.plots.take().map(|p| AxisPlots {
                    axis: a.axis.clone(),
                    spectrum: p.spectrum,
                    autocorrelation: p.autocorrelation,
                    histogram: p.histogram,
                })
            })
            .collect(),
    };
    let new = NewCalibration {
        id,
        lab,
        idempotency_key: key,
        instrument: labels.instrument,
        trap: labels.trap,
        note: labels.note,
        axes_labels: labels.axes,
        file_name: labels.file_name,
        recording_sha256: staged.sha256.clone(),
        recording_size_bytes: staged.size_bytes,
        settings: canonical,
        created_at_ms: now_ms(),
        result_json: serde_json::to_string(&report).map_err(AppError::internal)?,
        plots_json: serde_json::to_string(&plots).map_err(AppError::internal)?,
    };
    let (stored, inserted) = state.store().insert_calibration(staged, &new).await?;
    metrics::counter!("trapwise_calibrations_total", "outcome" => if inserted { "stored" } else { "replayed" })
        .increment(1);
    let status = if inserted {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    document_response(status, &CalibrationDocument::from_stored(&stored)?)
}

#[cfg(test)]
#[path = "upload_tests.rs"]
mod tests;

//! `POST /api/v1/inspect`: what a file holds and how it would be read, stored nowhere.
//!
//! The body is the raw file; the query takes `file_name` (for format detection) and the reading
//! settings of the settings table (`format`, `delimiter`, `decimal_comma`, `dataset`,
//! repeatable, and `sample_rate_hz`, `units`, `volts_per_count`, which drop out of the missing
//! list), parsed by `Settings::apply` like an upload's. The body is held in memory, so it is
//! limited to `MAX_INSPECT_BYTES` (or the upload limit, if smaller); the answer is the document
//! of `trapwise inspect --json`.

use super::AppState;
use super::auth::Lab;
use super::problem::AppError;
use crate::ingest;
use crate::pipeline::PipelineError;
use crate::report;
use crate::settings::Settings;
use axum::Json;
use axum::extract::{Request, State};

/// Largest body inspected, bytes (a file the page can show before it is uploaded).
const MAX_INSPECT_BYTES: u64 = 100 << 20;

/// Inspect a file without storing it.
#[utoipa::path(
    post,
    path = "/api/v1/inspect",
    tag = "calibrations",
    params(
        ("file_name" = Option<String>, Query, description = "File name, used for format detection"),
        ("dataset" = Option<String>, Query, description = "A dataset to read (repeatable)"),
    ),
    request_body(description = "the raw file", content((Vec<u8> = "application/octet-stream"))),
    responses(
        (status = 200, description = "What the file holds and the settings it lacks"),
        (status = 400, description = "A file that cannot be read", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body too large", body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 415, description = "Unknown file format", body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn inspect(
    State(state): State<AppState>,
    lab: Result<Lab, AppError>,
    request: Request,
) -> Result<Json<serde_json::Value>, AppError> {
    lab?;
    let pairs = axum::extract::Query::<Vec<(String, String)>>::try_from_uri(request.uri())
        .map(|q| q.0)
        .map_err(|e| AppError::BadRequest {
            code: "malformed-query",
            detail: format!("query string: {}", e.body_text()),
            field: None,
        })?;
    let mut settings = Settings::default();
    let mut file_name = "upload".to_string();
    let mut datasets = Vec::new();
    for (key, value) in pairs {
        match key.as_str() {
            "file_name" => file_name = value,
            "dataset" => datasets.push(value),
            _ => settings.apply(&key, &value)?,
        }
    }
    if !datasets.is_empty() {
        settings.apply("dataset", &datasets.join(","))?;
    }
    let limit_bytes = state.max_upload_bytes().min(MAX_INSPECT_BYTES);
    let limit = usize::try_from(limit_bytes).unwrap_or(usize::MAX);
    let body = axum::body::to_bytes(request.into_body(), limit)
        .await
        .map_err(|_| AppError::TooLarge {
            limit_bytes,
            hint: "inspect the first part of the file, or the file itself with trapwise inspect",
        })?;
    let options = settings.reading_options();
    let name = file_name.clone();
    let found =
        tokio::task::spawn_blocking(move || ingest::inspect(&name, &mut body.as_ref(), &options))
            .await
            .map_err(|e| AppError::internal(format!("inspect task: {e}")))?
            .map_err(|e| AppError::from(PipelineError::Ingest(e)))?;
    Ok(Json(report::inspection_json(&file_name, &found)))
}

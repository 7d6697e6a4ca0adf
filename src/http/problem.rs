//! The one application error of the HTTP layer and its RFC 9457 problem document.
//!
//! Every failure a handler returns is an `AppError`; its single `IntoResponse` writes
//! `application/problem+json` with `type` = `https://trapwise.invalid/problems/<code>` (the
//! reserved `.invalid` domain says the URI identifies the problem and is not meant to be
//! fetched), `title`, `status`, a `detail` that names the field, line or byte, and the
//! extension members `code` (the same kebab-case code) and, where one field is at fault, `field`.
//! 4xx answers are logged at debug level; 5xx answers are logged as errors and their detail
//! is hidden from the client.
//!
//! Status codes (the one place they are decided): 400 malformed input, 401 missing or bad
//! token, 404 unknown id (including another lab's), 405 method not allowed, 408 upload stalled,
//! 413 upload past the limit, 415 content type
//! or file format not read, 422 data that parse but cannot be calibrated, 429 too many
//! connections from one client, 503 queue full, too many uploads at once or database down,
//! 500 anything else.
//!
//! Answers that do not come from an `AppError` (the rejections of axum's extractors, such as a
//! path segment that is not UTF-8) are rewritten by `problem_for_bare_errors`, a middleware
//! around the whole application, into a problem document with the same status, so that every
//! error the service gives is one. The `detail` is capped at `MAX_DETAIL_CHARS`, because some
//! details quote the input (a header line, a field's value).

use crate::calibration::CalibrationError;
use crate::ingest::IngestError;
use crate::pipeline::PipelineError;
use crate::settings::SettingsError;
use crate::store::StoreError;
use axum::extract::Request;
use axum::http::{HeaderValue, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use serde::{Deserialize, Serialize};

/// Base of the problem `type` URIs.
pub const PROBLEM_BASE: &str = "https://trapwise.invalid/problems/";

/// Longest `detail`, characters: enough for a message with its place and hint, short enough
/// that a detail quoting the input (a megabyte header line) is not sent back whole.
pub const MAX_DETAIL_CHARS: usize = 1000;

/// Longest `field` member, characters (a setting's key is far shorter; an unknown field's
/// name is whatever the client sent).
const MAX_FIELD_CHARS: usize = 200;

/// Most bytes of a bare error body read to become a problem's detail (see
/// `problem_for_bare_errors`); axum's rejection texts are far shorter.
const MAX_BARE_BODY_BYTES: usize = 16 * 1024;

/// An RFC 9457 problem document as sent on the wire.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct Problem {
    /// `https://trapwise.invalid/problems/<code>`.
    #[serde(rename = "type")]
    pub type_uri: String,
    /// Short summary, the same for every occurrence of the code.
    pub title: String,
    /// HTTP status code.
    pub status: u16,
    /// This occurrence, naming the field, line, column or byte offset at fault.
    pub detail: String,
    /// The kebab-case code (the last segment of `type`).
    pub code: String,
    /// The form field or query parameter at fault, when there is one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub field: Option<String>,
}

/// Every failure of a request.
#[derive(Debug, thiserror::Error)]
pub enum AppError {
    /// Malformed input (400): a form, query, setting or file that cannot be read.
    #[error("{detail}")]
    BadRequest {
        /// Kebab-case problem code.
        code: &'static str,
        /// This occurrence.
        detail: String,
        /// The field at fault.
        field: Option<String>,
    },
    /// No token where one is required, or a token that is unknown or revoked (401).
    #[error("{detail}")]
    Unauthorized {
        /// `token-required` or `bad-token`.
        code: &'static str,
        /// This occurrence.
        detail: String,
    },
    /// No such resource for this lab (404).
    #[error("{detail}")]
    NotFound {
        /// This occurrence.
        detail: String,
    },
    /// The route exists but not for this method (405).
    #[error("method {method} is not allowed at `{path}`; see /api/v1/openapi.json")]
    MethodNotAllowed {
        /// The request's method.
        method: String,
        /// The request's path.
        path: String,
    },
    /// An answer made outside the handlers (an extractor's rejection of axum, with its own
    /// status and text), turned into a problem document by `problem_for_bare_errors`.
    #[error("{detail}")]
    Rejected {
        /// The status the rejection chose (4xx or 5xx).
        status: StatusCode,
        /// The rejection's text.
        detail: String,
    },
    /// The upload is larger than the configured limit (413).
    #[error("the upload is larger than the limit of {limit_bytes} bytes; {hint}")]
    TooLarge {
        /// The configured limit.
        limit_bytes: u64,
        /// What to do.
        hint: &'static str,
    },
    /// A content type or file format the service does not read (415).
    #[error("{detail}")]
    UnsupportedMediaType {
        /// Kebab-case problem code.
        code: &'static str,
        /// This occurrence.
        detail: String,
        /// The field at fault.
        field: Option<String>,
    },
    /// The client stopped sending the upload for too long (408).
    #[error(
        "the upload sent nothing for {idle_s} s at byte offset {byte_offset}; check the network and send it again"
    )]
    Stalled {
        /// The idle limit, seconds.
        idle_s: u64,
        /// Bytes received before the stall.
        byte_offset: u64,
    },
    /// Data that parse but cannot be calibrated (422).
    #[error("{detail}")]
    Unprocessable {
        /// Kebab-case problem code.
        code: &'static str,
        /// This occurrence.
        detail: String,
        /// The field at fault.
        field: Option<String>,
    },
    /// All calibration slots and the queue are taken (503 with Retry-After).
    #[error(
        "all {capacity} calibration slots and queue places are taken; retry after {retry_after_s} s"
    )]
    Busy {
        /// Running plus waiting calibrations allowed.
        capacity: usize,
        /// Seconds the client should wait.
        retry_after_s: u64,
    },
    /// As many uploads as allowed are streaming to disk (503 with Retry-After).
    #[error(
        "{limit} uploads are on their way to disk already, the most the server takes at once; retry after {retry_after_s} s"
    )]
    TooManyUploads {
        /// Uploads allowed at once.
        limit: usize,
        /// Seconds the client should wait.
        retry_after_s: u64,
    },
    /// The client holds as many connections (or, through a trusted proxy, requests) as one
    /// client may (429 with Retry-After).
    #[error(
        "this client already holds {limit} connections, the most one client may; close one or retry after {retry_after_s} s"
    )]
    TooManyConnections {
        /// Connections allowed per client address.
        limit: usize,
        /// Seconds the client should wait.
        retry_after_s: u64,
    },
    /// The database cannot be reached (503).
    #[error("the database is not available; retry later")]
    Unavailable {
        /// The internal reason, logged and not sent.
        reason: String,
    },
    /// Anything else (500); the reason is logged, not sent.
    #[error("internal error")]
    Internal {
        /// The internal reason, logged and not sent.
        reason: String,
    },
}

impl AppError {
    /// A 400 with a field.
    pub fn bad_field(code: &'static str, field: &str, detail: impl Into<String>) -> Self {
        AppError::BadRequest {
            code,
            detail: detail.into(),
            field: Some(field.to_string()),
        }
    }

    /// A 500 whose reason is logged.
    pub fn internal(reason: impl std::fmt::Display) -> Self {
        AppError::Internal {
            reason: reason.to_string(),
        }
    }

    /// The HTTP status.
    pub fn status(&self) -> StatusCode {
        match self {
            AppError::BadRequest { .. } => StatusCode::BAD_REQUEST,
            AppError::Unauthorized { .. } => StatusCode::UNAUTHORIZED,
            AppError::NotFound { .. } => StatusCode::NOT_FOUND,
            AppError::MethodNotAllowed { .. } => StatusCode::METHOD_NOT_ALLOWED,
            AppError::Rejected { status, .. } => *status,
            AppError::TooLarge { .. } => StatusCode::PAYLOAD_TOO_LARGE,
            AppError::UnsupportedMediaType { .. } => StatusCode::UNSUPPORTED_MEDIA_TYPE,
            AppError::Stalled { .. } => StatusCode::REQUEST_TIMEOUT,
            AppError::Unprocessable { .. } => StatusCode::UNPROCESSABLE_ENTITY,
            AppError::TooManyConnections { .. } => StatusCode::TOO_MANY_REQUESTS,
            AppError::Busy { .. }
            | AppError::TooManyUploads { .. }
            | AppError::Unavailable { .. } => StatusCode::SERVICE_UNAVAILABLE,
            AppError::Internal { .. } => StatusCode::INTERNAL_SERVER_ERROR,
        }
    }

    /// The kebab-case problem code.
    pub fn code(&self) -> &'static str {
        match self {
            AppError::BadRequest { code, .. }
            | AppError::Unauthorized { code, .. }
            | AppError::UnsupportedMediaType { code, .. }
            | AppError::Unprocessable { code, .. } => code,
            AppError::NotFound { .. } => "not-found",
            AppError::MethodNotAllowed { .. } => "method-not-allowed",
            AppError::Rejected { status, .. } => rejection_code(*status),
            AppError::TooLarge { .. } => "upload-too-large",
            AppError::Stalled { .. } => "upload-stalled",
            AppError::Busy { .. } => "busy",
            AppError::TooManyConnections { .. } => "too-many-connections",
            AppError::TooManyUploads { .. } => "uploads-busy",
            AppError::Unavailable { .. } => "database-unavailable",
            AppError::Internal { .. } => "internal",
        }
    }

    fn title(&self) -> &'static str {
        match self {
            AppError::MethodNotAllowed { .. } => "method not allowed",
            AppError::Rejected { status, .. } => {
                status.canonical_reason().unwrap_or("request refused")
            }
            AppError::BadRequest { .. } => "malformed input",
            AppError::Unauthorized { .. } => "missing or invalid bearer token",
            AppError::NotFound { .. } => "not found",
            AppError::TooLarge { .. } => "upload too large",
            AppError::Stalled { .. } => "upload stalled",
            AppError::UnsupportedMediaType { .. } => "unsupported content type or file format",
            AppError::Unprocessable { .. } => "recording cannot be calibrated",
            AppError::Busy { .. } => "calibration queue full",
            AppError::TooManyConnections { .. } => "too many connections",
            AppError::TooManyUploads { .. } => "too many uploads at once",
            AppError::Unavailable { .. } => "database unavailable",
            AppError::Internal { .. } => "internal error",
        }
    }

    fn field(&self) -> Option<String> {
        match self {
            AppError::BadRequest { field, .. }
            | AppError::UnsupportedMediaType { field, .. }
            | AppError::Unprocessable { field, .. } => field.clone(),
            _ => None,
        }
    }

    /// The problem document, its detail capped at `MAX_DETAIL_CHARS`.
    pub fn problem(&self) -> Problem {
        Problem {
            type_uri: format!("{PROBLEM_BASE}{}", self.code()),
            title: self.title().to_string(),
            status: self.status().as_u16(),
            detail: cap_detail(&self.to_string()),
            code: self.code().to_string(),
            // An unknown field's name is the client's text, so it is capped too.
            field: self.field().map(|f| cap_chars(&f, MAX_FIELD_CHARS)),
        }
    }
}

/// `text` cut to `MAX_DETAIL_CHARS` characters, saying how much was left out.
pub fn cap_detail(text: &str) -> String {
    cap_chars(text, MAX_DETAIL_CHARS)
}

/// `text` cut to `max_chars` characters, saying how much was left out.
fn cap_chars(text: &str, max_chars: usize) -> String {
    match text.char_indices().nth(max_chars) {
        None => text.to_string(),
        Some((cut, _)) => format!(
            "{}... ({} more characters left out)",
            &text[..cut],
            text[cut..].chars().count()
        ),
    }
}

/// The problem code of a bare answer of status `status` (see `problem_for_bare_errors`).
fn rejection_code(status: StatusCode) -> &'static str {
    match status {
        StatusCode::BAD_REQUEST => "malformed-request",
        StatusCode::NOT_FOUND => "not-found",
        StatusCode::METHOD_NOT_ALLOWED => "method-not-allowed",
        StatusCode::REQUEST_TIMEOUT => "upload-stalled",
        StatusCode::PAYLOAD_TOO_LARGE => "upload-too-large",
        StatusCode::UNSUPPORTED_MEDIA_TYPE => "unsupported-media-type",
        StatusCode::UNPROCESSABLE_ENTITY => "unprocessable",
        StatusCode::SERVICE_UNAVAILABLE => "unavailable",
        s if s.is_server_error() => "internal",
        _ => "request-refused",
    }
}

/// Middleware: an error answer (4xx or 5xx) that is not already a problem document (the
/// rejections of axum's extractors answer `text/plain`) becomes one with the same status and
/// headers, its text the detail (hidden for 5xx, like every 5xx's).
pub async fn problem_for_bare_errors(request: Request, next: Next) -> Response {
    let response = next.run(request).await;
    let status = response.status();
    let is_problem = response
        .headers()
        .get(header::CONTENT_TYPE)
        .is_some_and(|v| v.as_bytes().starts_with(b"application/problem+json"));
    if !(status.is_client_error() || status.is_server_error()) || is_problem {
        return response;
    }
    let (parts, body) = response.into_parts();
    let text = axum::body::to_bytes(body, MAX_BARE_BODY_BYTES)
        .await
        .map(|b| String::from_utf8_lossy(&b).trim().to_string())
        .unwrap_or_default();
    let detail = if status.is_server_error() {
        // Like every 5xx, the cause is logged and not sent.
        tracing::error!(%status, reason = %text, "bare error answer");
        "the server could not answer this request; retry later".to_string()
    } else if text.is_empty() {
        format!("the request was refused ({status})")
    } else {
        text
    };
    let mut problem = AppError::Rejected { status, detail }.into_response();
    for (name, value) in &parts.headers {
        if name != header::CONTENT_TYPE && name != header::CONTENT_LENGTH {
            problem.headers_mut().insert(name, value.clone());
        }
    }
    problem
}

impl IntoResponse for AppError {
    fn into_response(self) -> Response {
        match &self {
            AppError::Internal { reason } | AppError::Unavailable { reason } => {
                tracing::error!(code = self.code(), %reason, "request failed");
            }
            _ => tracing::debug!(code = self.code(), detail = %self, "request rejected"),
        }
        let body = serde_json::to_string(&self.problem()).unwrap_or_else(|_| "{}".into());
        let mut response = (self.status(), body).into_response();
        let headers = response.headers_mut();
        headers.insert(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/problem+json"),
        );
        match &self {
            AppError::Busy { retry_after_s, .. }
            | AppError::TooManyUploads { retry_after_s, .. }
            | AppError::TooManyConnections { retry_after_s, .. } => {
                headers.insert(header::RETRY_AFTER, HeaderValue::from(*retry_after_s));
            }
            AppError::Unauthorized { .. } => {
                headers.insert(
                    header::WWW_AUTHENTICATE,
                    HeaderValue::from_static("Bearer realm=\"trapwise\""),
                );
            }
            _ => {}
        }
        response
    }
}

impl From<StoreError> for AppError {
    fn from(e: StoreError) -> Self {
        match e {
            StoreError::Database(sqlx::Error::PoolTimedOut | sqlx::Error::Io(_)) => {
                AppError::Unavailable {
                    reason: e.to_string(),
                }
            }
            other => AppError::internal(other),
        }
    }
}

/// The 422 codes among ingest errors: the file is well formed but its samples cannot be
/// calibrated (too few, or time stamps that are not a uniform increasing grid).
fn ingest_is_unprocessable(e: &IngestError) -> bool {
    matches!(
        e,
        IngestError::TooFewSamples { .. }
            | IngestError::TimeNotIncreasing { .. }
            | IngestError::TimeStepNotUniform { .. }
    )
}

/// The run-settings key an ingest error is about, when it is one.
fn ingest_field(e: &IngestError) -> Option<&'static str> {
    match e {
        IngestError::SampleRateMissing { .. }
        | IngestError::SampleRateInvalid { .. }
        | IngestError::SampleRateConflict { .. } => Some("sample_rate_hz"),
        IngestError::ToleranceInvalid { .. } => Some("time_tolerance"),
        IngestError::ChannelsInvalid { .. } => Some("channels"),
        IngestError::VoltsPerCountMissing { .. }
        | IngestError::VoltsPerCountInvalid { .. }
        | IngestError::VoltsPerCountUnitConflict { .. } => Some("volts_per_count"),
        IngestError::UnitRequired { .. } | IngestError::UnitConflict { .. } => Some("units"),
        IngestError::DelimiterAmbiguous { .. } => Some("delimiter"),
        IngestError::DecimalMarkAmbiguous { .. } | IngestError::DecimalCommaConflict { .. } => {
            Some("decimal_comma")
        }
        IngestError::DatasetMissing { .. }
        | IngestError::DatasetChoice { .. }
        | IngestError::DatasetUnusable { .. } => Some("dataset"),
        _ => None,
    }
}

/// The request field of a run condition named in SI by the calibration core.
fn request_key(core_field: &'static str) -> &'static str {
    match core_field {
        "bead_diameter_m" => "bead_diameter_um",
        "bead_diameter_se_m" => "bead_diameter_se_um",
        "height_m" => "height_um",
        "height_se_m" => "height_se_um",
        "viscosity_pa_s" => "viscosity_mpa_s",
        other => other,
    }
}

fn calibration_code(e: &CalibrationError) -> (&'static str, Option<String>) {
    match e {
        CalibrationError::InvalidCondition { field, .. } => {
            ("invalid-condition", Some(request_key(field).to_string()))
        }
        CalibrationError::Water(_) => ("viscosity-unavailable", Some("temperature_c".into())),
        CalibrationError::Drag(_) => ("wall-correction-undefined", Some("height_um".into())),
        CalibrationError::NoAxes => ("no-axes", None),
        CalibrationError::Spectrum { .. } => ("spectrum-fit-failed", None),
        CalibrationError::TooShort { .. } => ("too-short", None),
        CalibrationError::Autocorrelation { .. } => ("autocorrelation-fit-failed", None),
        CalibrationError::Equipartition { .. } => ("equipartition-failed", None),
        CalibrationError::ConstantSignal { .. } => ("constant-signal", None),
        CalibrationError::InvalidExposure { .. } => {
            ("invalid-exposure", Some("exposure_time_s".into()))
        }
        CalibrationError::PrincipalAxes { .. } => (
            "principal-axes-not-applicable",
            Some("principal_axes".into()),
        ),
        CalibrationError::InvalidDrive { field, .. } => ("invalid-drive", Some((*field).into())),
    }
}

impl From<SettingsError> for AppError {
    fn from(e: SettingsError) -> Self {
        let (code, field) = match &e {
            SettingsError::UnknownKey { key, .. } => ("unknown-field", key.clone()),
            SettingsError::BadValue { key, .. } => ("invalid-field", key.clone()),
            SettingsError::Missing { key, .. } => ("missing-field", (*key).to_string()),
        };
        AppError::bad_field(code, &field, e.to_string())
    }
}

impl From<PipelineError> for AppError {
    fn from(e: PipelineError) -> Self {
        match e {
            PipelineError::Settings(s) => s.into(),
            // The staged upload could not be read back: the server's fault, not the client's.
            PipelineError::Ingest(i @ IngestError::Read { .. }) => AppError::internal(i),
            // A compressed upload counts by its decompressed size: past the limit it is too
            // large like any other.
            PipelineError::Ingest(IngestError::DecompressedTooLarge { limit_bytes, .. }) => {
                AppError::TooLarge {
                    limit_bytes,
                    hint: "the file decompresses past it; send it uncompressed or in parts, or \
                           ask the operator to raise TRAPWISE_MAX_UPLOAD_BYTES",
                }
            }
            PipelineError::Ingest(i) => {
                let field = ingest_field(&i).map(str::to_string);
                if i.is_unsupported_format() {
                    AppError::UnsupportedMediaType {
                        code: i.kind(),
                        detail: i.to_string(),
                        field,
                    }
                } else if ingest_is_unprocessable(&i) {
                    AppError::Unprocessable {
                        code: i.kind(),
                        detail: i.to_string(),
                        field,
                    }
                } else {
                    AppError::BadRequest {
                        code: i.kind(),
                        detail: i.to_string(),
                        field,
                    }
                }
            }
            PipelineError::Calibration(c) => {
                let (code, field) = calibration_code(&c);
                // The core names conditions in SI; say which request field to change.
                let detail = match (&c, &field) {
                    (
                        CalibrationError::InvalidCondition {
                            field: core,
                            reason,
                            ..
                        },
                        Some(key),
                    ) if *core != key.as_str() => {
                        format!("field `{key}`: {reason} ({c})")
                    }
                    _ => c.to_string(),
                };
                AppError::Unprocessable {
                    code,
                    detail,
                    field,
                }
            }
        }
    }
}

#[cfg(test)]
#[path = "problem_tests.rs"]
mod tests;

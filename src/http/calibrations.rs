//! Reading stored calibrations: one, a filtered page, the raw recording, the plot arrays, and a
//! trap's history. Every query is scoped to the request's lab; another lab's ids are 404.

use super::AppState;
use super::auth::Lab;
use super::problem::AppError;
use super::wire::{
    API, AxisHistory, CalibrationDocument, CalibrationPage, HistoryPoint, TrapEntry, TrapHistory,
    TrapList, history_url, stored_report,
};
use crate::store::ListFilter;
use axum::Json;
use axum::body::Body;
use axum::extract::{Path, RawQuery, State};
use axum::http::{HeaderValue, header};
use axum::response::{IntoResponse, Response};

/// Default and largest page size of the listing.
const DEFAULT_PAGE: u32 = 50;
const MAX_PAGE: u32 = 500;
/// Default and largest number of calibrations in a history.
const DEFAULT_HISTORY: u32 = 1000;
const MAX_HISTORY: u32 = 10_000;

fn not_found(id: &str) -> AppError {
    AppError::NotFound {
        detail: format!(
            "calibration `{id}` does not exist for this lab; list calibrations at {API}/calibrations"
        ),
    }
}

/// Query parameters as pairs; unknown names are rejected with the name.
pub(super) fn query(raw: Option<&str>, known: &[&str]) -> Result<Vec<(String, String)>, AppError> {
    let uri: axum::http::Uri =
        format!("/?{}", raw.unwrap_or(""))
            .parse()
            .map_err(|_| AppError::BadRequest {
                code: "malformed-query",
                detail: "query string is not a valid URI query".into(),
                field: None,
            })?;
    let pairs = axum::extract::Query::<Vec<(String, String)>>::try_from_uri(&uri)
        .map_err(|e| AppError::BadRequest {
            code: "malformed-query",
            detail: format!("query string: {}", e.body_text()),
            field: None,
        })?
        .0;
    for (k, _) in &pairs {
        if !known.contains(&k.as_str()) {
            return Err(AppError::bad_field(
                "unknown-field",
                k,
                if known.is_empty() {
                    format!("query parameter `{k}` is not known here; this endpoint takes none")
                } else {
                    format!(
                        "query parameter `{k}` is not known here; known parameters are: {}",
                        known.join(", ")
                    )
                },
            ));
        }
    }
    Ok(pairs)
}

fn get<'a>(pairs: &'a [(String, String)], key: &str) -> Option<&'a str> {
    pairs
        .iter()
        .rev()
        .find(|(k, _)| k == key)
        .map(|(_, v)| v.as_str())
        .filter(|v| !v.is_empty())
}

fn int<T: std::str::FromStr>(pairs: &[(String, String)], key: &str) -> Result<Option<T>, AppError> {
    get(pairs, key)
        .map(|v| {
            v.trim().parse::<T>().map_err(|_| {
                AppError::bad_field(
                    "invalid-field",
                    key,
                    format!("query parameter `{key}` = `{v}` is not a valid whole number"),
                )
            })
        })
        .transpose()
}

fn limit(pairs: &[(String, String)], default: u32, max: u32) -> Result<u32, AppError> {
    match int::<u32>(pairs, "limit")? {
        None => Ok(default),
        Some(n) if (1..=max).contains(&n) => Ok(n),
        Some(n) => Err(AppError::bad_field(
            "invalid-field",
            "limit",
            format!("query parameter `limit` = {n} is out of range; use 1 to {max}"),
        )),
    }
}

fn parse_cursor(text: &str) -> Result<(i64, String), AppError> {
    text.split_once('.')
        .and_then(|(t, id)| Some((t.parse::<i64>().ok()?, id.to_string())))
        .filter(|(_, id)| uuid::Uuid::parse_str(id).is_ok())
        .ok_or_else(|| {
            AppError::bad_field(
                "invalid-field",
                "cursor",
                format!(
                    "query parameter `cursor` = `{text}` is not a cursor from a previous page; \
                     copy `next_cursor` unchanged"
                ),
            )
        })
}

/// Fetch one calibration.
#[utoipa::path(
    get,
    path = "/api/v1/calibrations/{id}",
    tag = "calibrations",
    params(("id" = String, Path, description = "Calibration id")),
    responses(
        (status = 200, body = CalibrationDocument),
        (status = 404, body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn one(
    State(state): State<AppState>,
    Lab(lab): Lab,
    Path(id): Path<String>,
) -> Result<Json<CalibrationDocument>, AppError> {
    let row = state
        .store()
        .calibration(&lab, &id)
        .await?
        .ok_or_else(|| not_found(&id))?;
    Ok(Json(CalibrationDocument::from_stored(&row)?))
}

/// List calibrations, newest first, filtered by instrument, trap and time range.
#[utoipa::path(
    get,
    path = "/api/v1/calibrations",
    tag = "calibrations",
    params(
        ("instrument" = Option<String>, Query, description = "Only this instrument"),
        ("trap" = Option<String>, Query, description = "Only this trap"),
        ("from_ms" = Option<i64>, Query, description = "Stored at or after, ms since the Unix epoch"),
        ("to_ms" = Option<i64>, Query, description = "Stored before, ms since the Unix epoch"),
        ("limit" = Option<u32>, Query, minimum = 1, maximum = 500, description = "Page size, 1 to 500 (default 50)"),
        ("cursor" = Option<String>, Query, description = "`next_cursor` of the previous page"),
    ),
    responses(
        (status = 200, body = CalibrationPage),
        (status = 400, body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn list(
    State(state): State<AppState>,
    Lab(lab): Lab,
    RawQuery(raw): RawQuery,
) -> Result<Json<CalibrationPage>, AppError> {
    let known = ["instrument", "trap", "from_ms", "to_ms", "limit", "cursor"];
    let pairs = query(raw.as_deref(), &known)?;
    let filter = ListFilter {
        instrument: get(&pairs, "instrument").map(str::to_string),
        trap: get(&pairs, "trap").map(str::to_string),
        from_ms: int(&pairs, "from_ms")?,
        to_ms: int(&pairs, "to_ms")?,
        after: get(&pairs, "cursor").map(parse_cursor).transpose()?,
        limit: limit(&pairs, DEFAULT_PAGE, MAX_PAGE)?,
    };
    let rows = state.store().list(&lab, &filter).await?;
    let items = rows
        .iter()
        .map(CalibrationDocument::from_stored)
        .collect::<Result<Vec<_>, _>>()?;
    let next_cursor = (items.len() == filter.limit as usize)
        .then(|| {
            items
                .last()
                .map(|d| format!("{}.{}", d.created_at_ms, d.id))
        })
        .flatten();
    let next = next_cursor.as_ref().map(|c| {
        let mut url = format!("{API}/calibrations?limit={}&cursor={c}", filter.limit);
        for key in ["instrument", "trap", "from_ms", "to_ms"] {
            if let Some(v) = get(&pairs, key) {
                url.push_str(&format!("&{key}={}", super::wire::encode_segment(v)));
            }
        }
        url
    });
    Ok(Json(CalibrationPage {
        items,
        next_cursor,
        next,
    }))
}

/// Download the raw recording, byte-identical to the upload.
#[utoipa::path(
    get,
    path = "/api/v1/calibrations/{id}/recording",
    tag = "calibrations",
    params(("id" = String, Path, description = "Calibration id")),
    responses(
        (status = 200, description = "The uploaded bytes", body = Vec<u8>, content_type = "application/octet-stream"),
        (status = 404, body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn recording(
    State(state): State<AppState>,
    Lab(lab): Lab,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let row = state
        .store()
        .calibration(&lab, &id)
        .await?
        .ok_or_else(|| not_found(&id))?;
    let path = state
        .store()
        .blobs()
        .path_of(&row.recording_sha256)
        .ok_or_else(|| AppError::internal(format!("calibration {id}: bad recording hash")))?;
    let file = tokio::fs::File::open(&path)
        .await
        .map_err(|e| AppError::internal(format!("recording {}: {e}", path.display())))?;
    let size = file
        .metadata()
        .await
        .map_err(|e| AppError::internal(format!("recording {}: {e}", path.display())))?
        .len();
    let body = Body::from_stream(tokio_util::io::ReaderStream::new(file));
    let mut response = body.into_response();
    let headers = response.headers_mut();
    headers.insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/octet-stream"),
    );
    headers.insert(header::CONTENT_LENGTH, HeaderValue::from(size));
    if let Ok(v) = HeaderValue::from_str(&format!(
        "attachment; filename=\"{}\"",
        row.file_name
            .replace(|c: char| !c.is_ascii_graphic() && c != ' ', "_")
    )) {
        headers.insert(header::CONTENT_DISPOSITION, v);
    }
    if let Ok(v) = HeaderValue::from_str(&format!("\"{}\"", row.recording_sha256)) {
        headers.insert(header::ETAG, v);
    }
    Ok(response)
}

/// Spectrum, autocorrelation and histogram arrays of a calibration, for plotting.
#[utoipa::path(
    get,
    path = "/api/v1/calibrations/{id}/plots",
    tag = "calibrations",
    params(("id" = String, Path, description = "Calibration id")),
    responses(
        (status = 200, body = super::wire::PlotsDocument),
        (status = 404, body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn plots(
    State(state): State<AppState>,
    Lab(lab): Lab,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let text = state
        .store()
        .plots_json(&lab, &id)
        .await?
        .ok_or_else(|| not_found(&id))?;
    let mut response = text.into_response();
    response.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/json"),
    );
    Ok(response)
}

/// Every instrument and trap of the lab that has calibrations: count, time span, history link.
#[utoipa::path(
    get,
    path = "/api/v1/instruments",
    tag = "history",
    responses(
        (status = 200, body = TrapList),
        (status = 400, body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn traps(
    State(state): State<AppState>,
    Lab(lab): Lab,
    RawQuery(raw): RawQuery,
) -> Result<Json<TrapList>, AppError> {
    // No parameters; an unknown one is refused like everywhere else.
    query(raw.as_deref(), &[])?;
    let traps = state
        .store()
        .traps(&lab)
        .await?
        .into_iter()
        .map(|t| TrapEntry {
            history: history_url(&t.instrument, &t.trap),
            instrument: t.instrument,
            trap: t.trap,
            calibrations: t.calibrations,
            first_at_ms: t.first_at_ms,
            latest_at_ms: t.latest_at_ms,
        })
        .collect();
    Ok(Json(TrapList { traps }))
}

/// The history of one trap: consensus stiffness, sensitivity and corner frequency per axis.
#[utoipa::path(
    get,
    path = "/api/v1/instruments/{instrument}/traps/{trap}/history",
    tag = "history",
    params(
        ("instrument" = String, Path, description = "Instrument label"),
        ("trap" = String, Path, description = "Trap label"),
        ("from_ms" = Option<i64>, Query, description = "Stored at or after, ms since the Unix epoch"),
        ("to_ms" = Option<i64>, Query, description = "Stored before, ms since the Unix epoch"),
        ("limit" = Option<u32>, Query, minimum = 1, maximum = 10000, description = "At most this many calibrations, oldest first (default 1000, at most 10000)"),
    ),
    responses(
        (status = 200, body = TrapHistory),
        (status = 400, body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn history(
    State(state): State<AppState>,
    Lab(lab): Lab,
    Path((instrument, trap)): Path<(String, String)>,
    RawQuery(raw): RawQuery,
) -> Result<Json<TrapHistory>, AppError> {
    let pairs = query(raw.as_deref(), &["from_ms", "to_ms", "limit"])?;
    let rows = state
        .store()
        .history(
            &lab,
            &instrument,
            &trap,
            int(&pairs, "from_ms")?,
            int(&pairs, "to_ms")?,
            limit(&pairs, DEFAULT_HISTORY, MAX_HISTORY)?,
        )
        .await?;
    let mut axes: Vec<AxisHistory> = Vec::new();
    for row in &rows {
        let report = stored_report(row)?;
        for axis in &report.axes {
            let point = HistoryPoint {
                calibration_id: row.id.clone(),
                created_at_ms: row.created_at_ms,
                stiffness_pn_per_nm: axis.stiffness_pn_per_nm.consensus.into(),
                sensitivity_nm_per_v: axis.sensitivity_nm_per_v.map(Into::into),
                corner_frequency_hz: axis.corner_frequency_hz.map(Into::into),
                verdict: axis.verdict.clone(),
            };
            match axes.iter_mut().find(|a| a.axis == axis.axis) {
                Some(a) => a.points.push(point),
                None => axes.push(AxisHistory {
                    axis: axis.axis.clone(),
                    points: vec![point],
                }),
            }
        }
    }
    Ok(Json(TrapHistory {
        instrument,
        trap,
        axes,
    }))
}

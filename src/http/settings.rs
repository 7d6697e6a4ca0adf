//! `GET /api/v1/settings`: the run settings an upload takes, as the settings table states them
//! (key, label, kind, unit, help, required, default, choices, range, example, flag), so that
//! clients (the page among them) build their forms from the table instead of a copy of it.
//! Protected like the other reads: with tokens required, it needs one.

use super::auth::Lab;
use super::calibrations::query;
use super::problem::AppError;
use super::wire::SettingsDocument;
use crate::settings::SPECS;
use axum::Json;
use axum::extract::RawQuery;

/// The run settings an upload takes, in the order they are listed to people.
#[utoipa::path(
    get,
    path = "/api/v1/settings",
    operation_id = "list_settings",
    tag = "calibrations",
    responses(
        (status = 200, body = SettingsDocument),
        (status = 400, body = super::problem::Problem, content_type = "application/problem+json"),
        (status = 401, body = super::problem::Problem, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub(crate) async fn list(
    Lab(_lab): Lab,
    RawQuery(raw): RawQuery,
) -> Result<Json<SettingsDocument>, AppError> {
    // No parameters; an unknown one is refused like everywhere else.
    query(raw.as_deref(), &[])?;
    Ok(Json(SettingsDocument::from_table(SPECS)))
}

//! Operations endpoints: `/healthz` (checks the database), `/metrics` (Prometheus text format)
//! and the OpenAPI document.

use super::AppState;
use super::problem::AppError;
use super::wire::Health;
use crate::store::Backend;
use axum::Json;
use axum::extract::State;
use axum::http::{HeaderValue, header};
use axum::response::{IntoResponse, Response};

/// Health: 200 when the database answers, 503 otherwise.
#[utoipa::path(
    get,
    path = "/healthz",
    tag = "operations",
    responses(
        (status = 200, body = Health),
        (status = 503, body = super::problem::Problem, content_type = "application/problem+json"),
    )
)]
pub(crate) async fn healthz(State(state): State<AppState>) -> Result<Json<Health>, AppError> {
    state
        .store()
        .ping()
        .await
        .map_err(|e| AppError::Unavailable {
            reason: e.to_string(),
        })?;
    Ok(Json(Health {
        status: "ok".into(),
        database: match state.store().backend() {
            Backend::Sqlite => "sqlite",
            Backend::Postgres => "postgres",
        }
        .into(),
    }))
}

/// Metrics in the Prometheus text exposition format.
#[utoipa::path(
    get,
    path = "/metrics",
    tag = "operations",
    responses((status = 200, description = "Prometheus text format", body = String, content_type = "text/plain"))
)]
pub(crate) async fn metrics() -> Response {
    let mut response = super::metrics_handle().render().into_response();
    response.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("text/plain; version=0.0.4; charset=utf-8"),
    );
    response
}

/// The OpenAPI 3.1 document of this API, generated from the code.
pub(crate) async fn openapi() -> Response {
    let text = super::openapi::document_json();
    let mut response = text.into_response();
    response.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/json"),
    );
    response
}

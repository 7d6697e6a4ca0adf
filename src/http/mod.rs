//! The HTTP service: routes, shared state, middleware and the server loop.
//!
//! `app(state)` builds the whole `Router`, so tests can drive it without a socket; `serve`
//! takes the listener and the shutdown signal from the caller, so end-to-end tests bind port 0
//! and stop the server when they like. The server loop (`connections`) bounds what a client can
//! hold: a header-read timeout, a number of connections per client address, and a shutdown that
//! lets requests in flight finish within a grace period and then closes what is left.
//!
//! Routes (documented in the OpenAPI document at `/api/v1/openapi.json`):
//! `POST /api/v1/calibrations`, `GET /api/v1/calibrations`, `GET /api/v1/calibrations/{id}`,
//! `GET /api/v1/calibrations/{id}/recording`, `GET /api/v1/calibrations/{id}/plots`,
//! `GET /api/v1/instruments`, `GET /api/v1/instruments/{instrument}/traps/{trap}/history`,
//! `GET /api/v1/settings`, `GET /healthz`, `GET /metrics`,
//! and the page at `/` with its `/app.js` and `/style.css` (see `page`).

pub mod admission;
pub mod auth;
mod calibrations;
pub mod connections;
mod idle;
mod inspect;
pub mod openapi;
mod ops;
mod page;
pub mod problem;
mod settings;
mod upload;
pub mod wire;

use crate::store::Store;
use admission::Admission;
use axum::Router;
use axum::extract::{DefaultBodyLimit, MatchedPath, Request};
use axum::http::{HeaderValue, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use connections::ClientCounts;
use metrics_exporter_prometheus::{PrometheusBuilder, PrometheusHandle};
use problem::AppError;
use std::future::Future;
use std::net::IpAddr;
use std::sync::{Arc, OnceLock};
use std::time::{Duration, Instant};
use tokio::sync::Semaphore;
use tower_http::request_id::{
    MakeRequestId, PropagateRequestIdLayer, RequestId, SetRequestIdLayer,
};
use tower_http::trace::TraceLayer;

/// Limits and access policy of a running service.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ServiceOptions {
    /// Largest recording accepted, bytes.
    pub max_upload_bytes: u64,
    /// Calibrations running at once.
    pub max_concurrent: usize,
    /// Calibrations waiting beyond those before 503.
    pub queue: usize,
    /// Whether every API request needs a bearer token.
    pub tokens_required: bool,
    /// Longest pause inside an upload body before it is given up (408), seconds; also the
    /// header-read timeout (at most 30 s, see `connections::header_read_timeout`).
    pub upload_idle_s: u64,
    /// Uploads streaming to disk at once; one more is answered 503 before its body is read.
    pub max_uploads: usize,
    /// Connections one client address may hold open (through a trusted proxy: requests).
    pub max_connections_per_client: usize,
    /// Peers whose `X-Forwarded-For` header names the client.
    pub trusted_proxies: Vec<IpAddr>,
    /// How long a shutdown lets requests in flight finish before closing them, seconds.
    pub shutdown_grace_s: u64,
}

/// State shared by all handlers (cheap to clone).
#[derive(Clone, Debug)]
pub struct AppState {
    inner: Arc<Inner>,
}

#[derive(Debug)]
struct Inner {
    store: Store,
    options: ServiceOptions,
    admission: Arc<Admission>,
    uploads: Arc<Semaphore>,
    clients: Arc<ClientCounts>,
}

impl AppState {
    /// State over a connected store.
    pub fn new(store: Store, options: ServiceOptions) -> Self {
        AppState {
            inner: Arc::new(Inner {
                store,
                admission: Admission::new(options.max_concurrent, options.queue),
                uploads: Arc::new(Semaphore::new(options.max_uploads)),
                clients: ClientCounts::new(options.max_connections_per_client),
                options,
            }),
        }
    }

    /// The store.
    pub fn store(&self) -> &Store {
        &self.inner.store
    }

    /// The largest accepted upload, bytes.
    pub fn max_upload_bytes(&self) -> u64 {
        self.inner.options.max_upload_bytes
    }

    /// Longest pause inside an upload body, seconds.
    pub fn upload_idle_s(&self) -> u64 {
        self.inner.options.upload_idle_s
    }

    /// Whether requests need a bearer token.
    pub fn tokens_required(&self) -> bool {
        self.inner.options.tokens_required
    }

    /// The calibration admission gate.
    pub fn admission(&self) -> &Arc<Admission> {
        &self.inner.admission
    }

    /// Uploads allowed to stream to disk at once.
    pub fn max_uploads(&self) -> usize {
        self.inner.options.max_uploads
    }

    /// The permits of uploads streaming to disk.
    pub fn uploads(&self) -> &Arc<Semaphore> {
        &self.inner.uploads
    }

    /// Connections (or forwarded requests) per client address.
    pub fn clients(&self) -> &Arc<ClientCounts> {
        &self.inner.clients
    }

    /// Peers whose `X-Forwarded-For` is believed.
    pub fn trusted_proxies(&self) -> &[IpAddr] {
        &self.inner.options.trusted_proxies
    }

    /// How long a shutdown waits for requests in flight.
    pub fn shutdown_grace(&self) -> Duration {
        Duration::from_secs(self.inner.options.shutdown_grace_s)
    }
}

/// The process-wide Prometheus recorder's handle. The recorder is global, so it is installed
/// once and shared by every server in the process (tests start several).
pub fn metrics_handle() -> &'static PrometheusHandle {
    static HANDLE: OnceLock<PrometheusHandle> = OnceLock::new();
    HANDLE.get_or_init(|| {
        let builder = PrometheusBuilder::new();
        match builder.install_recorder() {
            Ok(handle) => handle,
            // Another recorder is installed: render an empty one rather than fail.
            Err(_) => PrometheusBuilder::new().build_recorder().handle(),
        }
    })
}

/// Request ids are UUID v7, so they sort by time in the logs.
#[derive(Clone, Copy, Debug, Default)]
struct MakeV7;

impl MakeRequestId for MakeV7 {
    fn make_request_id<B>(&mut self, _request: &axum::http::Request<B>) -> Option<RequestId> {
        HeaderValue::from_str(&uuid::Uuid::now_v7().to_string())
            .ok()
            .map(RequestId::new)
    }
}

/// Counts requests and their durations by route and status.
async fn track(request: Request, next: Next) -> Response {
    let route = request
        .extensions()
        .get::<MatchedPath>()
        .map_or_else(|| "unmatched".to_string(), |p| p.as_str().to_string());
    let method = request.method().to_string();
    let started = Instant::now();
    let response = next.run(request).await;
    let status = response.status().as_u16().to_string();
    metrics::counter!("trapwise_http_requests_total", "method" => method.clone(), "route" => route.clone(), "status" => status)
        .increment(1);
    metrics::histogram!("trapwise_http_request_duration_seconds", "method" => method, "route" => route)
        .record(started.elapsed().as_secs_f64());
    response
}

/// A handler that panicked answers 500 with a problem document; the panic is logged.
fn panic_response(payload: Box<dyn std::any::Any + Send + 'static>) -> Response {
    let reason = payload
        .downcast_ref::<&str>()
        .map(|s| (*s).to_string())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "a handler panicked".to_string());
    AppError::internal(format!("panic: {reason}")).into_response()
}

async fn not_found(request: Request) -> AppError {
    AppError::NotFound {
        detail: format!(
            "no resource at `{}`; the API lives under {} (see {}/openapi.json)",
            request.uri().path(),
            wire::API,
            wire::API
        ),
    }
}

async fn method_not_allowed(request: Request) -> AppError {
    AppError::MethodNotAllowed {
        method: request.method().to_string(),
        path: request.uri().path().to_string(),
    }
}

/// Logs a failed response. A 503 is the service protecting itself (queue full, no upload
/// place, database away, each logged where it is decided), not a fault, so it is logged at
/// warning level; other 5xx and transport failures are errors.
fn on_failure(
    class: tower_http::classify::ServerErrorsFailureClass,
    latency: Duration,
    _span: &tracing::Span,
) {
    let latency_ms = latency.as_millis();
    match class {
        tower_http::classify::ServerErrorsFailureClass::StatusCode(status)
            if status == axum::http::StatusCode::SERVICE_UNAVAILABLE =>
        {
            tracing::warn!(%status, latency_ms, "service unavailable");
        }
        class => tracing::error!(classification = %class, latency_ms, "response failed"),
    }
}

/// The whole application.
pub fn app(state: AppState) -> Router {
    let forwarded =
        axum::middleware::from_fn_with_state(state.clone(), connections::limit_forwarded_clients);
    let api = Router::new()
        .route(
            "/calibrations",
            get(calibrations::list)
                .post(upload::create)
                .layer(DefaultBodyLimit::disable()),
        )
        .route("/calibrations/{id}", get(calibrations::one))
        .route("/calibrations/{id}/recording", get(calibrations::recording))
        .route("/calibrations/{id}/plots", get(calibrations::plots))
        .route("/instruments", get(calibrations::traps))
        .route(
            "/instruments/{instrument}/traps/{trap}/history",
            get(calibrations::history),
        )
        .route(
            "/inspect",
            post(inspect::inspect).layer(DefaultBodyLimit::disable()),
        )
        .route("/settings", get(settings::list))
        .route("/openapi.json", get(ops::openapi));
    Router::new()
        .route("/", get(page::index))
        .route("/index.html", get(page::index))
        .route("/app.js", get(page::app_js))
        .route("/style.css", get(page::style_css))
        .route("/healthz", get(ops::healthz))
        .route("/metrics", get(ops::metrics))
        .nest(wire::API, api)
        .route_layer(axum::middleware::from_fn(track))
        .fallback(not_found)
        .method_not_allowed_fallback(method_not_allowed)
        .with_state(state)
        .layer(forwarded)
        .layer(PropagateRequestIdLayer::x_request_id())
        .layer(
            TraceLayer::new_for_http()
                .make_span_with(|request: &axum::http::Request<_>| {
                    let request_id = request
                        .headers()
                        .get("x-request-id")
                        .and_then(|v| v.to_str().ok())
                        .unwrap_or("-");
                    tracing::info_span!(
                        "request",
                        method = %request.method(),
                        path = %request.uri().path(),
                        request_id = %request_id,
                    )
                })
                .on_response(
                    tower_http::trace::DefaultOnResponse::new().level(tracing::Level::INFO),
                )
                .on_failure(on_failure),
        )
        .layer(axum::middleware::from_fn(problem::problem_for_bare_errors))
        .layer(tower_http::catch_panic::CatchPanicLayer::custom(
            panic_response,
        ))
        .layer(SetRequestIdLayer::x_request_id(MakeV7))
        .layer(
            tower_http::set_header::SetResponseHeaderLayer::if_not_present(
                header::X_CONTENT_TYPE_OPTIONS,
                HeaderValue::from_static("nosniff"),
            ),
        )
}

/// Serves `state` on `listener` until `shutdown` resolves, then lets the requests in flight
/// finish for at most the grace period (`ServiceOptions::shutdown_grace_s`) and closes the rest.
pub async fn serve(
    listener: tokio::net::TcpListener,
    state: AppState,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    metrics_handle();
    // The heartbeat of this process's temporary upload files (see `store::blobs`).
    let heartbeat = tokio::spawn(state.store().blobs().clone().heartbeat());
    let router = app(state.clone());
    let served = connections::run(listener, state, router, shutdown).await;
    heartbeat.abort();
    served
}

#[cfg(test)]
mod tests {
    use super::on_failure;
    use axum::http::StatusCode;
    use std::sync::{Arc, Mutex};
    use std::time::Duration;
    use tower_http::classify::ServerErrorsFailureClass;

    /// The log lines `on_failure` writes for `class`, at every level.
    fn logged(class: ServerErrorsFailureClass) -> String {
        let buffer = Arc::new(Mutex::new(Vec::<u8>::new()));
        let sink = Arc::clone(&buffer);
        let subscriber = tracing_subscriber::fmt()
            .with_max_level(tracing::Level::TRACE)
            .with_ansi(false)
            .with_writer(move || SharedWriter(Arc::clone(&sink)))
            .finish();
        tracing::subscriber::with_default(subscriber, || {
            on_failure(class, Duration::from_millis(3), &tracing::Span::none());
        });
        let bytes = buffer.lock().map(|b| b.clone()).unwrap_or_default();
        String::from_utf8_lossy(&bytes).into_owned()
    }

    struct SharedWriter(Arc<Mutex<Vec<u8>>>);

    impl std::io::Write for SharedWriter {
        fn write(&mut self, bytes: &[u8]) -> std::io::Result<usize> {
            if let Ok(mut b) = self.0.lock() {
                b.extend_from_slice(bytes);
            }
            Ok(bytes.len())
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Ok(())
        }
    }

    #[test]
    fn a_503_is_logged_as_a_warning_and_other_5xx_as_errors() {
        let busy = logged(ServerErrorsFailureClass::StatusCode(
            StatusCode::SERVICE_UNAVAILABLE,
        ));
        assert!(busy.contains("WARN") && !busy.contains("ERROR"), "{busy}");
        let broken = logged(ServerErrorsFailureClass::StatusCode(
            StatusCode::INTERNAL_SERVER_ERROR,
        ));
        assert!(broken.contains("ERROR"), "{broken}");
    }
}

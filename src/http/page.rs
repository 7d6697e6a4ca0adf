//! The page: `static/index.html`, `static/app.js` and `static/style.css`, compiled into the
//! binary so the service (and its container image) needs no static folder at run time.
//!
//! The page is plain HTML, CSS and an ES module with no build step and nothing fetched from
//! elsewhere; it talks to the service only through the documented `/api/v1` routes.

use axum::http::{HeaderValue, header};
use axum::response::{IntoResponse, Response};

/// The page served at `/`.
const INDEX_HTML: &str = include_str!("../../static/index.html");
/// The page's script (an ES module).
const APP_JS: &str = include_str!("../../static/app.js");
/// The page's style sheet.
const STYLE_CSS: &str = include_str!("../../static/style.css");

/// The page's Content-Security-Policy: scripts, styles and requests only from this origin (the
/// page has no inline script or style, and fetches nothing from elsewhere), saved files through
/// `blob:` object URLs, no plugins, and `frame-ancestors 'none'` so no other site can frame the
/// page to trick a user into clicking its controls (clickjacking).
pub(crate) const CONTENT_SECURITY_POLICY: &str = "default-src 'self'; script-src 'self'; \
     style-src 'self'; img-src 'self' data: blob:; connect-src 'self'; object-src 'none'; \
     base-uri 'none'; form-action 'self'; frame-ancestors 'none'";

/// `body` with `content_type`, revalidated on every load (the files change with the binary).
fn asset(content_type: &'static str, body: &'static str) -> Response {
    let mut response = body.into_response();
    let headers = response.headers_mut();
    headers.insert(header::CONTENT_TYPE, HeaderValue::from_static(content_type));
    headers.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    response
}

/// `GET /` and `GET /index.html`, with the Content-Security-Policy.
pub(crate) async fn index() -> Response {
    let mut response = asset("text/html; charset=utf-8", INDEX_HTML);
    response.headers_mut().insert(
        header::CONTENT_SECURITY_POLICY,
        HeaderValue::from_static(CONTENT_SECURITY_POLICY),
    );
    response
}

/// `GET /app.js`.
pub(crate) async fn app_js() -> Response {
    asset("text/javascript; charset=utf-8", APP_JS)
}

/// `GET /style.css`.
pub(crate) async fn style_css() -> Response {
    asset("text/css; charset=utf-8", STYLE_CSS)
}

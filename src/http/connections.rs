//! The server loop: accepting connections, bounding them per client, and a shutdown that ends.
//!
//! Every connection is served by hyper's HTTP/1.1 connection with a header-read timeout, so a
//! client that opens a socket and sends part of a request (or nothing) is closed after the
//! timeout instead of holding the socket forever. Each client address may hold at most
//! `max_connections_per_client` connections; the next one is answered 429 and closed. Behind a
//! reverse proxy every connection comes from the proxy, so for peers listed as trusted proxies
//! the count moves to requests, keyed by the client address the proxy put in `X-Forwarded-For`
//! (see `limit_forwarded_clients`); from any other peer that header is ignored, since a client
//! could write anything there.
//!
//! Shutdown stops accepting, asks every connection to finish its request in flight and close,
//! and waits at most the grace period; connections still open after it (a stalled client, an
//! upload that did not finish in time) are dropped, so the process ends within the grace period
//! whatever its clients do.

use super::AppState;
use super::problem::AppError;
use axum::Router;
use axum::extract::{Request, State};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use hyper_util::rt::{TokioIo, TokioTimer};
use std::collections::HashMap;
use std::future::Future;
use std::net::{IpAddr, SocketAddr};
use std::sync::{Arc, Mutex};
use std::time::Duration;
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::task::JoinSet;
use tower::ServiceExt;

/// Longest header-read timeout, seconds, whatever the upload idle limit: hyper's default.
const MAX_HEADER_READ_TIMEOUT_S: u64 = 30;
/// Seconds a client refused for too many connections is asked to wait.
const RETRY_AFTER_S: u64 = 1;
/// Longest time spent answering and draining a refused connection.
const REFUSAL_LINGER: Duration = Duration::from_secs(2);

/// Open connections (or requests through a trusted proxy) per client address.
#[derive(Debug)]
pub struct ClientCounts {
    limit: usize,
    open: Mutex<HashMap<IpAddr, usize>>,
}

/// One counted connection or request; dropping it gives the place back.
#[derive(Debug)]
pub struct ClientGuard {
    counts: Arc<ClientCounts>,
    address: IpAddr,
}

impl ClientCounts {
    /// Counts allowing `limit` places per address.
    pub fn new(limit: usize) -> Arc<Self> {
        Arc::new(ClientCounts {
            limit,
            open: Mutex::new(HashMap::new()),
        })
    }

    /// The places allowed per address.
    pub fn limit(&self) -> usize {
        self.limit
    }

    /// Takes a place for `address`, or `None` when it holds `limit` already.
    pub fn try_enter(self: &Arc<Self>, address: IpAddr) -> Option<ClientGuard> {
        let mut open = self
            .open
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner);
        let n = open.entry(address).or_insert(0);
        if *n >= self.limit {
            return None;
        }
        *n += 1;
        Some(ClientGuard {
            counts: Arc::clone(self),
            address,
        })
    }

    /// Places taken by `address` now.
    pub fn open(&self, address: IpAddr) -> usize {
        let open = self
            .open
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner);
        open.get(&address).copied().unwrap_or(0)
    }
}

impl Drop for ClientGuard {
    fn drop(&mut self) {
        let mut open = self
            .counts
            .open
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner);
        if let Some(n) = open.get_mut(&self.address) {
            *n = n.saturating_sub(1);
            if *n == 0 {
                open.remove(&self.address);
            }
        }
    }
}

/// The peer of a request's connection, put into the request's extensions by the server loop.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Peer {
    /// The address the connection came from.
    pub address: SocketAddr,
    /// Whether that address is a trusted proxy (whose `X-Forwarded-For` names the client).
    pub trusted_proxy: bool,
}

/// The client a trusted proxy forwarded the request for: the right-most address in
/// `X-Forwarded-For` that is not itself a trusted proxy (entries further left were written by
/// the client or by proxies we do not know, and could be anything). `None` when the header is
/// missing or holds no address.
pub fn forwarded_client(headers: &axum::http::HeaderMap, trusted: &[IpAddr]) -> Option<IpAddr> {
    let mut hops: Vec<IpAddr> = Vec::new();
    for value in headers.get_all("x-forwarded-for") {
        let text = value.to_str().ok()?;
        for hop in text.split(',') {
            hops.push(hop.trim().parse().ok()?);
        }
    }
    hops.iter()
        .rev()
        .find(|hop| !trusted.contains(hop))
        .copied()
}

/// Middleware: for requests through a trusted proxy, holds one of the forwarded client's places
/// while the request runs, or answers 429 when that client holds them all.
pub(crate) async fn limit_forwarded_clients(
    State(state): State<AppState>,
    request: Request,
    next: Next,
) -> Response {
    let Some(peer) = request.extensions().get::<Peer>().copied() else {
        return next.run(request).await;
    };
    if !peer.trusted_proxy {
        return next.run(request).await;
    }
    let client = forwarded_client(request.headers(), state.trusted_proxies())
        .unwrap_or_else(|| peer.address.ip());
    let Some(_guard) = state.clients().try_enter(client) else {
        return too_many(state.clients().limit()).into_response();
    };
    next.run(request).await
}

fn too_many(limit: usize) -> AppError {
    AppError::TooManyConnections {
        limit,
        retry_after_s: RETRY_AFTER_S,
    }
}

/// Answers a connection past the per-client limit with a 429 problem document and closes it,
/// reading (and dropping) what the client sends meanwhile so that it sees the answer rather than
/// a reset. Bounded by `REFUSAL_LINGER`.
async fn refuse(mut stream: tokio::net::TcpStream, limit: usize) {
    let error = too_many(limit);
    let body = serde_json::to_string(&error.problem()).unwrap_or_else(|_| "{}".into());
    let head = format!(
        "HTTP/1.1 429 Too Many Requests\r\ncontent-type: application/problem+json\r\n\
         content-length: {}\r\nretry-after: {RETRY_AFTER_S}\r\nconnection: close\r\n\r\n",
        body.len()
    );
    let answer = async {
        stream.write_all(head.as_bytes()).await?;
        stream.write_all(body.as_bytes()).await?;
        stream.shutdown().await?;
        let mut sink = [0u8; 4096];
        while stream.read(&mut sink).await? > 0 {}
        Ok::<_, std::io::Error>(())
    };
    let _ = tokio::time::timeout(REFUSAL_LINGER, answer).await;
}

/// The header-read timeout: the upload idle limit, at most `MAX_HEADER_READ_TIMEOUT_S` and at
/// least one second.
pub fn header_read_timeout(upload_idle_s: u64) -> Duration {
    Duration::from_secs(upload_idle_s.clamp(1, MAX_HEADER_READ_TIMEOUT_S))
}

/// Serves `router` on `listener` until `shutdown` resolves, then lets connections finish for at
/// most `state`'s grace period and drops the rest.
pub(crate) async fn run(
    listener: tokio::net::TcpListener,
    state: AppState,
    router: Router,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    let mut builder = hyper::server::conn::http1::Builder::new();
    builder
        .timer(TokioTimer::new())
        .header_read_timeout(header_read_timeout(state.upload_idle_s()));
    let graceful = hyper_util::server::graceful::GracefulShutdown::new();
    let mut connections = JoinSet::new();
    let mut shutdown = std::pin::pin!(shutdown);
    loop {
        let (stream, address) = tokio::select! {
            accepted = listener.accept() => match accepted {
                Ok(pair) => pair,
                Err(e) => {
                    // Out of file descriptors and the like: wait instead of spinning.
                    tracing::warn!(error = %e, "accepting a connection failed");
                    tokio::time::sleep(Duration::from_millis(100)).await;
                    continue;
                }
            },
            Some(_) = connections.join_next(), if !connections.is_empty() => continue,
            () = &mut shutdown => break,
        };
        let trusted_proxy = state.trusted_proxies().contains(&address.ip());
        let guard = if trusted_proxy {
            None
        } else {
            match state.clients().try_enter(address.ip()) {
                Some(guard) => Some(guard),
                None => {
                    tracing::debug!(%address, "connection refused: too many from this client");
                    connections.spawn(refuse(stream, state.clients().limit()));
                    continue;
                }
            }
        };
        let peer = Peer {
            address,
            trusted_proxy,
        };
        let router = router.clone();
        let service = hyper::service::service_fn(move |mut request: Request<_>| {
            request.extensions_mut().insert(peer);
            router.clone().oneshot(request.map(axum::body::Body::new))
        });
        let connection = graceful.watch(builder.serve_connection(TokioIo::new(stream), service));
        connections.spawn(async move {
            let _guard = guard;
            if let Err(e) = connection.await {
                tracing::debug!(%address, error = %e, "connection closed with an error");
            }
        });
    }
    drop(listener);
    finish(graceful, connections, state.shutdown_grace()).await;
    Ok(())
}

/// Asks every connection to close after its request in flight and waits at most `grace` for
/// them; the ones left are dropped (closing their sockets).
async fn finish(
    graceful: hyper_util::server::graceful::GracefulShutdown,
    mut connections: JoinSet<()>,
    grace: Duration,
) {
    let drained = async {
        graceful.shutdown().await;
        while connections.join_next().await.is_some() {}
    };
    if tokio::time::timeout(grace, drained).await.is_err() {
        tracing::warn!(
            grace_s = grace.as_secs(),
            "connections still open after the shutdown grace period are closed"
        );
    }
    connections.abort_all();
}

#[cfg(test)]
#[path = "connections_tests.rs"]
mod tests;

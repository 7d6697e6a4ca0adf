//! What a client can hold of the service, over raw sockets: the header-read timeout, the idle
//! limit inside multipart bodies, the connections per client (directly and through a trusted
//! proxy), refusals before the body is read, and a SIGTERM that ends the process within the
//! grace period while a client stalls. On SQLite and PostgreSQL like every service test.

use crate::on_both_backends;
use crate::support::{Backend, TestDb, TestServer, binary, options};
use serde_json::Value;
use std::time::{Duration, Instant};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::net::TcpStream;
use trapwise::http::ServiceOptions;

/// What a raw exchange saw: the bytes the server sent, and whether it closed the connection
/// (end of stream) before `wait` ran out.
struct Exchange {
    text: String,
    closed: bool,
}

/// Sends `bytes` on a fresh connection and reads until the server closes it or `wait` passes.
async fn exchange(addr: &str, bytes: &[u8], wait: Duration) -> Exchange {
    let mut stream = TcpStream::connect(addr).await.expect("connect");
    stream.write_all(bytes).await.expect("send");
    read_until_closed(&mut stream, wait).await
}

async fn read_until_closed(stream: &mut TcpStream, wait: Duration) -> Exchange {
    let mut received = Vec::new();
    let read = async {
        let mut buf = [0u8; 4096];
        loop {
            match stream.read(&mut buf).await {
                Ok(0) | Err(_) => return,
                Ok(n) => received.extend_from_slice(&buf[..n]),
            }
        }
    };
    let closed = tokio::time::timeout(wait, read).await.is_ok();
    Exchange {
        text: String::from_utf8_lossy(&received).into_owned(),
        closed,
    }
}

/// The problem document at the end of a raw HTTP response.
fn problem_of(text: &str) -> Value {
    let body = text.split_once("\r\n\r\n").map_or("", |(_, b)| b);
    serde_json::from_str(body).unwrap_or_else(|e| panic!("{e}: {text}"))
}

fn addr_of(server: &TestServer) -> String {
    server.base.trim_start_matches("http://").to_string()
}

async fn a_request_whose_headers_stall_is_closed_within_the_timeout(backend: Backend) {
    let db = TestDb::new(backend).await;
    // Tokens required: the timeout acts before anything asks for one.
    let impatient = ServiceOptions {
        upload_idle_s: 1,
        tokens_required: true,
        ..options()
    };
    let server = TestServer::start(&db, impatient).await;
    let started = Instant::now();
    let seen = exchange(
        &addr_of(&server),
        b"GET /healthz HTTP/1.1\r\nHost: x\r\n",
        Duration::from_secs(10),
    )
    .await;
    assert!(seen.closed, "still open after 10 s: {}", seen.text);
    assert!(
        started.elapsed() < Duration::from_secs(5),
        "{:?}",
        started.elapsed()
    );
    // A connection that sends nothing at all is closed the same way.
    let silent = exchange(&addr_of(&server), b"", Duration::from_secs(10)).await;
    assert!(silent.closed);
    server.stop().await;
}

/// A multipart upload that sends `sent` and then nothing.
fn stalled_multipart(sent: &str) -> Vec<u8> {
    format!(
        "POST /api/v1/calibrations HTTP/1.1\r\nHost: x\r\n\
         Content-Type: multipart/form-data; boundary=XyZ\r\nContent-Length: 100000\r\n\r\n{sent}"
    )
    .into_bytes()
}

async fn a_multipart_body_that_stalls_anywhere_is_408(backend: Backend) {
    let db = TestDb::new(backend).await;
    let impatient = ServiceOptions {
        upload_idle_s: 1,
        ..options()
    };
    let server = TestServer::start(&db, impatient).await;
    let text_part = "--XyZ\r\nContent-Disposition: form-data; name=\"instrument\"\r\n\r\n";
    let cases = [
        // Inside a text field's value.
        format!("{text_part}kitti"),
        // Between two parts: the text field is complete, the next part's headers never come.
        format!("{text_part}kittiwake\r\n--XyZ\r\n"),
        // Before the first boundary.
        String::new(),
    ];
    for sent in cases {
        let seen = exchange(
            &addr_of(&server),
            &stalled_multipart(&sent),
            Duration::from_secs(10),
        )
        .await;
        assert!(
            seen.text.starts_with("HTTP/1.1 408"),
            "after {sent:?}: {}",
            seen.text
        );
        let problem = problem_of(&seen.text);
        assert_eq!(problem["code"], "upload-stalled", "after {sent:?}");
        let offset = format!("byte offset {}", sent.len());
        assert!(
            problem["detail"].as_str().unwrap_or("").contains(&offset),
            "after {sent:?}: {problem}"
        );
    }
    assert_eq!(server.store.counts().await.expect("counts").calibrations, 0);
    server.stop().await;
}

async fn a_client_past_its_connection_limit_is_answered_429(backend: Backend) {
    let db = TestDb::new(backend).await;
    let two = ServiceOptions {
        max_connections_per_client: 2,
        ..options()
    };
    let server = TestServer::start(&db, two).await;
    let addr = addr_of(&server);
    let first = TcpStream::connect(&addr).await.expect("first");
    let second = TcpStream::connect(&addr).await.expect("second");
    let third = exchange(
        &addr,
        b"GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n",
        Duration::from_secs(10),
    )
    .await;
    assert!(third.text.starts_with("HTTP/1.1 429"), "{}", third.text);
    assert_eq!(problem_of(&third.text)["code"], "too-many-connections");
    // A closed connection gives its place back.
    drop((first, second));
    tokio::time::sleep(Duration::from_millis(200)).await;
    let again = exchange(
        &addr,
        b"GET /healthz HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n",
        Duration::from_secs(10),
    )
    .await;
    assert!(again.text.starts_with("HTTP/1.1 200"), "{}", again.text);
    server.stop().await;
}

/// A raw upload through the proxy for `client` whose body stalls (held until the test ends).
fn held_upload(client: &str) -> Vec<u8> {
    format!(
        "POST /api/v1/calibrations?instrument=a&trap=b HTTP/1.1\r\nHost: x\r\n\
         X-Forwarded-For: {client}\r\nContent-Type: text/csv\r\nContent-Length: 1000\r\n\r\nt"
    )
    .into_bytes()
}

async fn through_a_trusted_proxy_the_limit_is_per_forwarded_client(backend: Backend) {
    let db = TestDb::new(backend).await;
    // The tests connect from 127.0.0.1, which plays the proxy here.
    let proxied = ServiceOptions {
        max_connections_per_client: 1,
        trusted_proxies: vec!["127.0.0.1".parse().expect("address")],
        ..options()
    };
    let server = TestServer::start(&db, proxied).await;
    let addr = addr_of(&server);
    let mut held = TcpStream::connect(&addr).await.expect("connect");
    held.write_all(&held_upload("203.0.113.7"))
        .await
        .expect("send");
    tokio::time::sleep(Duration::from_millis(300)).await;
    let get_for = |client: &str| {
        format!(
            "GET /healthz HTTP/1.1\r\nHost: x\r\nX-Forwarded-For: {client}\r\n\
             Connection: close\r\n\r\n"
        )
    };
    // The same client through the proxy holds its one place already; another client does not,
    // and the proxy's own connections are not counted against it.
    let same = exchange(
        &addr,
        get_for("203.0.113.7").as_bytes(),
        Duration::from_secs(10),
    )
    .await;
    assert!(same.text.starts_with("HTTP/1.1 429"), "{}", same.text);
    let other = exchange(
        &addr,
        get_for("203.0.113.8").as_bytes(),
        Duration::from_secs(10),
    )
    .await;
    assert!(other.text.starts_with("HTTP/1.1 200"), "{}", other.text);
    drop(held);
    server.stop().await;
}

async fn a_full_queue_or_too_many_uploads_is_refused_before_the_body(backend: Backend) {
    let db = TestDb::new(backend).await;
    // Only part of a body is sent: the answer must come without the rest.
    let partial = "POST /api/v1/calibrations?instrument=a&trap=b HTTP/1.1\r\nHost: x\r\n\
                   Content-Type: text/csv\r\nContent-Length: 1000000\r\n\r\ntime_s,x_nm\n";
    let closed = ServiceOptions {
        max_concurrent: 0,
        queue: 0,
        ..options()
    };
    let server = TestServer::start(&db, closed).await;
    let seen = exchange(
        &addr_of(&server),
        partial.as_bytes(),
        Duration::from_secs(5),
    )
    .await;
    assert!(seen.text.starts_with("HTTP/1.1 503"), "{}", seen.text);
    assert!(seen.text.contains("retry-after: 5"), "{}", seen.text);
    assert_eq!(problem_of(&seen.text)["code"], "busy");
    server.stop().await;

    let one_upload = ServiceOptions {
        max_uploads: 1,
        ..options()
    };
    let server = TestServer::start(&db, one_upload).await;
    let mut held = TcpStream::connect(addr_of(&server)).await.expect("connect");
    held.write_all(partial.as_bytes()).await.expect("send");
    tokio::time::sleep(Duration::from_millis(300)).await;
    let seen = exchange(
        &addr_of(&server),
        partial.as_bytes(),
        Duration::from_secs(5),
    )
    .await;
    assert!(seen.text.starts_with("HTTP/1.1 503"), "{}", seen.text);
    assert_eq!(problem_of(&seen.text)["code"], "uploads-busy");
    drop(held);
    server.stop().await;
}

/// A free port on loopback (bound and released; the service binds it next).
fn free_port() -> u16 {
    let listener = std::net::TcpListener::bind("127.0.0.1:0").expect("bind");
    listener.local_addr().expect("address").port()
}

async fn wait_until_serving(addr: &str) {
    for _ in 0..200 {
        if TcpStream::connect(addr).await.is_ok() {
            return;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    panic!("the service at {addr} did not start");
}

async fn sigterm_ends_the_service_within_the_grace_period_despite_a_stalled_client(
    backend: Backend,
) {
    let db = TestDb::new(backend).await;
    let addr = format!("127.0.0.1:{}", free_port());
    let grace_s = 2;
    let mut child = binary()
        .args(["serve", "--bind", &addr, "--data-dir"])
        .arg(db.data_dir.path())
        .env("DATABASE_URL", &db.url)
        // The header timeout (30 s) and the idle limit (60 s) are far longer than the grace.
        .env("TRAPWISE_UPLOAD_IDLE_S", "60")
        .env("TRAPWISE_SHUTDOWN_GRACE_S", grace_s.to_string())
        .stderr(std::process::Stdio::null())
        .spawn()
        .expect("start trapwise serve");
    wait_until_serving(&addr).await;
    let mut stalled_head = TcpStream::connect(&addr).await.expect("connect");
    stalled_head
        .write_all(b"GET /healthz HTTP/1.1\r\nHost: x\r\n")
        .await
        .expect("send");
    let mut stalled_body = TcpStream::connect(&addr).await.expect("connect");
    stalled_body
        .write_all(&stalled_multipart("--XyZ\r\n"))
        .await
        .expect("send");
    tokio::time::sleep(Duration::from_millis(300)).await;
    let status = std::process::Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status()
        .expect("kill");
    assert!(status.success());
    let signalled = Instant::now();
    let exit = loop {
        if let Some(exit) = child.try_wait().expect("wait") {
            break Some(exit);
        }
        if signalled.elapsed() > Duration::from_secs(grace_s + 10) {
            break None;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    };
    let Some(exit) = exit else {
        let _ = child.kill();
        let _ = child.wait();
        panic!("the service still ran {} s after SIGTERM", grace_s + 10);
    };
    let took = signalled.elapsed();
    assert!(exit.success(), "{exit:?}");
    // The grace period plus a margin for the runtime's own shutdown and a loaded machine.
    assert!(took < Duration::from_secs(grace_s + 3), "{took:?}");
    // The stalled clients see their connections closed.
    let seen = read_until_closed(&mut stalled_head, Duration::from_secs(5)).await;
    assert!(seen.closed);
}

on_both_backends!(
    a_request_whose_headers_stall_is_closed_within_the_timeout,
    a_multipart_body_that_stalls_anywhere_is_408,
    a_client_past_its_connection_limit_is_answered_429,
    through_a_trusted_proxy_the_limit_is_per_forwarded_client,
    a_full_queue_or_too_many_uploads_is_refused_before_the_body,
    sigterm_ends_the_service_within_the_grace_period_despite_a_stalled_client,
);

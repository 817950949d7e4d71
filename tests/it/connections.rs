//! The HTTP listener under slow, many and oversized clients, through a
//! real server on a real socket: a client that never finishes its headers
//! is closed after `server.header_read_timeout_secs` (they used to be held
//! for ever: 2,000 of them were all still open after 45 s), connections
//! over `server.max_connections` are answered 503 with a problem document,
//! a request head over `server.max_header_bytes` is refused with 431, and
//! an unreadable request with 400, both as problem documents.

use std::time::{Duration, Instant};

use crate::common::{spawn_app_with, test_config};
use tokio::{
    io::{AsyncReadExt, AsyncWriteExt},
    net::TcpStream,
};

/// Reads until the server closes the connection or `within` passes; what
/// was read, and whether it was closed.
async fn read_to_close(stream: &mut TcpStream, within: Duration) -> (String, bool) {
    let deadline = Instant::now() + within;
    let mut got = Vec::new();
    let mut buf = [0u8; 4096];
    loop {
        let left = deadline.saturating_duration_since(Instant::now());
        match tokio::time::timeout(left, stream.read(&mut buf)).await {
            Ok(Ok(0)) | Ok(Err(_)) => return (String::from_utf8_lossy(&got).into_owned(), true),
            Ok(Ok(n)) => got.extend_from_slice(&buf[..n]),
            Err(_) => return (String::from_utf8_lossy(&got).into_owned(), false),
        }
    }
}

async fn half_open(addr: &str) -> TcpStream {
    let mut s = TcpStream::connect(addr).await.expect("connect");
    s.write_all(b"GET /health HTTP/1.1\r\nHost: reachcast.test\r\n")
        .await
        .expect("write");
    s
}

#[tokio::test]
async fn slow_many_and_oversized_clients_are_answered_or_closed() {
    let dir = tempfile::tempdir().expect("temp dir");
    let mut config = test_config(dir.path());
    config.server.header_read_timeout_secs = 1;
    config.server.max_connections = 40;
    let app = spawn_app_with(config).await;
    let addr = app.url("").trim_start_matches("http://").to_owned();

    // 40 clients that never finish their headers fill the cap…
    let mut slow = Vec::new();
    for _ in 0..40 {
        slow.push(half_open(&addr).await);
    }
    // …so one more is answered 503 with a problem document and closed.
    let mut extra = TcpStream::connect(&addr).await.expect("connect");
    let (answer, closed) = read_to_close(&mut extra, Duration::from_secs(10)).await;
    assert!(answer.starts_with("HTTP/1.1 503"), "{answer}");
    assert!(answer.contains("application/problem+json") && answer.contains("too-many-connections"));
    assert!(closed);
    // Every slow client is closed once its header time is up (1 s here),
    // well before this test's 10 s deadline.
    for s in &mut slow {
        let (answer, closed) = read_to_close(s, Duration::from_secs(10)).await;
        assert!(closed, "a half-open connection was held: {answer:?}");
        assert!(
            answer.is_empty() || answer.starts_with("HTTP/1.1 408"),
            "{answer}"
        );
    }
    // Then the server answers normally again.
    let deadline = Instant::now() + Duration::from_secs(10);
    loop {
        if let Ok(res) = reqwest::get(app.url("/health")).await
            && res.status() == 200
        {
            break;
        }
        assert!(Instant::now() < deadline, "the server did not recover");
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    // A 200 kB header is refused with 431 (RFC 6585 §5), not answered 200.
    let mut big = TcpStream::connect(&addr).await.expect("connect");
    let head = format!(
        "GET /health HTTP/1.1\r\nHost: reachcast.test\r\nX-Padding: {}\r\n\r\n",
        "a".repeat(200_000)
    );
    let _ = big.write_all(head.as_bytes()).await;
    let (answer, _) = read_to_close(&mut big, Duration::from_secs(10)).await;
    let p = problem_answer(&answer, 431);
    assert_eq!(p["type"], "/problems/header-too-large", "{p}");
    app.stop().await;
}

/// The status line and problem document of a raw HTTP/1.1 answer; checks
/// the status, the media type (RFC 9457 §3) and that the body is whole.
fn problem_answer(answer: &str, status: u16) -> serde_json::Value {
    let (head, body) = answer.split_once("\r\n\r\n").unwrap_or((answer, ""));
    assert!(
        head.starts_with(&format!("HTTP/1.1 {status} ")),
        "{:?}",
        answer.get(..120)
    );
    let head = head.to_ascii_lowercase();
    assert!(
        head.contains("content-type: application/problem+json"),
        "{head}"
    );
    assert!(
        head.contains(&format!("content-length: {}", body.len())),
        "{head}"
    );
    let p: serde_json::Value = serde_json::from_str(body).expect("a JSON problem document");
    assert_eq!(p["status"], status, "{p}");
    assert!(p["detail"].as_str().is_some_and(|d| !d.is_empty()), "{p}");
    p
}

/// Sends `bytes` on a new connection and reads the answer until the
/// server closes it (10 s at most).
async fn exchange(addr: &str, bytes: &[u8]) -> (String, bool) {
    let mut s = TcpStream::connect(addr).await.expect("connect");
    s.write_all(bytes).await.expect("write");
    read_to_close(&mut s, Duration::from_secs(10)).await
}

/// A request that is not HTTP/1.1 (RFC 9112 §3: method SP target SP
/// version) gets a 400 problem document, not hyper's bare status line:
/// as the first request of a connection and after a good one on a kept
/// connection.
#[tokio::test]
async fn unreadable_requests_are_answered_with_problem_documents() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app_with(test_config(dir.path())).await;
    let addr = app.url("").trim_start_matches("http://").to_owned();
    for garbled in [
        "GARBAGE\r\n\r\n",
        "GET /health HTTP/1.1\r\nHost reachcast.test\r\n\r\n",
        "GET /he alth HTTP/1.1\r\nHost: reachcast.test\r\n\r\n",
    ] {
        let (answer, closed) = exchange(&addr, garbled.as_bytes()).await;
        assert!(closed, "{garbled:?}: the connection was kept");
        let p = problem_answer(&answer, 400);
        assert_eq!(p["type"], "/problems/bad-request", "{garbled:?}: {p}");
    }
    let (answer, _) = exchange(&addr, b"GET /health HTTP/1.1\r\nHost: reachcast.test\r\n\r\nGET /health HTTP/1.1\r\nHost reachcast.test\r\n\r\n").await;
    let (first, rest) = answer
        .split_once("HTTP/1.1 400 ")
        .expect("a 400 after the first answer");
    assert!(first.starts_with("HTTP/1.1 200 OK"), "{first}");
    assert!(first.contains("\"status\":\"ok\""), "{first}");
    let p = problem_answer(&format!("HTTP/1.1 400 {rest}"), 400);
    assert_eq!(p["type"], "/problems/bad-request", "{p}");
    // The service's own 400 to a HEAD request has no body (RFC 9110
    // §9.3.2) and is left alone: the kept connection answers the next
    // request in step.
    let (answer, _) = exchange(&addr, b"HEAD /api/exceedances?min_severity=zzz HTTP/1.1\r\nHost: reachcast.test\r\n\r\nGET /health HTTP/1.1\r\nHost: reachcast.test\r\nConnection: close\r\n\r\n").await;
    let (head, rest) = answer.split_once("\r\n\r\n").expect("a first answer");
    assert!(head.starts_with("HTTP/1.1 400 "), "{head}");
    assert!(!head.contains("connection: close"), "{head}");
    assert!(rest.starts_with("HTTP/1.1 200 OK"), "{rest}");
    app.stop().await;
}

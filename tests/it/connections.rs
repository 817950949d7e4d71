//! The HTTP listener under slow, many and oversized clients, through a
//! real server on a real socket: a client that never finishes its headers
//! is closed after `server.header_read_timeout_secs` (they used to be held
//! for ever: 2,000 of them were all still open after 45 s), connections
//! over `server.max_connections` are answered 503 with a problem document,
//! and a request head over `server.max_header_bytes` is refused with 431.

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
    assert!(answer.starts_with("HTTP/1.1 431"), "{:?}", answer.get(..80));
    app.stop().await;
}

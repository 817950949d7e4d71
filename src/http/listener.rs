//! The HTTP listener: HTTP/1.1 connections served by hyper with the limits
//! a server facing the public needs and `axum::serve` does not set:
//! a client must send its request head within `server.header_read_timeout_secs`
//! (one that opens a connection and never finishes its headers is closed,
//! not held for ever), the head is capped at `server.max_header_bytes`
//! (431; hyper's bare answers to unreadable heads become problem documents
//! in `unreadable`), and at most `server.max_connections` are open at
//! once (more are answered 503 with a problem document and closed).
//! Shutdown stops accepting, lets requests in flight finish and closes
//! idle connections.

use std::{future::Future, sync::Arc, time::Duration};

use super::error::Problem;
use super::unreadable::ProblemAnswers;
use axum::{
    Router,
    extract::{ConnectInfo, Request},
    http::StatusCode,
};
use hyper::body::Incoming;
use hyper::server::conn::http1;
use hyper_util::{
    rt::{TokioIo, TokioTimer},
    server::graceful::GracefulShutdown,
    service::TowerToHyperService,
};
use tokio::{io::AsyncWriteExt, net::TcpListener, net::TcpStream, sync::Semaphore};

/// The limits of the listener (from `[server]`).
#[derive(Debug, Clone, Copy)]
pub struct Limits {
    pub header_read_timeout: Duration,
    pub max_connections: usize,
    pub max_header_bytes: usize,
}

impl Limits {
    pub fn of(s: &crate::config::ServerConfig) -> Self {
        Self {
            header_read_timeout: Duration::from_secs(s.header_read_timeout_secs),
            max_connections: usize::try_from(s.max_connections).unwrap_or(usize::MAX),
            max_header_bytes: usize::try_from(s.max_header_bytes).unwrap_or(usize::MAX),
        }
    }
}

/// Serves `router` on `listener` until `stop` completes, then drains.
pub async fn serve(
    listener: TcpListener,
    router: Router,
    limits: Limits,
    stop: impl Future<Output = ()>,
) {
    let permits = Arc::new(Semaphore::new(limits.max_connections));
    let graceful = GracefulShutdown::new();
    let mut builder = http1::Builder::new();
    builder
        .timer(TokioTimer::new())
        .header_read_timeout(limits.header_read_timeout)
        // hyper's smallest read buffer is 8 KiB.
        .max_buf_size(limits.max_header_bytes.max(8_192));
    tokio::pin!(stop);
    loop {
        let (stream, peer) = tokio::select! {
            accepted = listener.accept() => match accepted {
                Ok(pair) => pair,
                Err(e) => {
                    // Out of file descriptors, say: back off a moment
                    // rather than spin on the error.
                    tracing::warn!(error = %e, "accepting a connection failed");
                    tokio::time::sleep(Duration::from_millis(50)).await;
                    continue;
                }
            },
            () = &mut stop => break,
        };
        let Ok(permit) = permits.clone().try_acquire_owned() else {
            tokio::spawn(refuse(stream));
            continue;
        };
        // The peer address, for per-client limits (`ConnectInfo`, as
        // axum's own server gives it).
        let with_peer =
            tower::ServiceExt::map_request(router.clone(), move |mut req: Request<Incoming>| {
                req.extensions_mut().insert(ConnectInfo(peer));
                req
            });
        let service = TowerToHyperService::new(with_peer);
        // No upgrades (the API has no WebSocket): a plain connection,
        // which the graceful shutdown can watch.
        let conn = graceful.watch(builder.serve_connection(
            TokioIo::new(ProblemAnswers::new(stream, limits.max_header_bytes)),
            service,
        ));
        tokio::spawn(async move {
            if let Err(e) = conn.await {
                tracing::debug!(error = %e, "connection ended with an error");
            }
            drop(permit);
        });
    }
    drop(listener);
    graceful.shutdown().await;
}

/// The answer to a connection over `server.max_connections`: a 503
/// problem document, written with a short deadline, then close.
async fn refuse(mut stream: TcpStream) {
    tracing::warn!("connection refused: server.max_connections are open");
    let problem = Problem::new(
        StatusCode::SERVICE_UNAVAILABLE,
        "too-many-connections",
        "Too many connections",
    )
    .detail("The server has server.max_connections connections open; retry shortly.");
    let answer = problem.to_closing_http1("retry-after: 1\r\n");
    let write = async {
        stream.write_all(&answer).await?;
        stream.shutdown().await
    };
    let _ = tokio::time::timeout(Duration::from_secs(1), write).await;
}

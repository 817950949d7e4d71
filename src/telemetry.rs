//! Logging: `tracing` events to standard error, filtered by `log.filter`
//! (or `RUST_LOG` when set). Each HTTP request gets a span with its id,
//! method and path (see `http::router`); request and response events are at
//! DEBUG so a polled API does not flood the log: use
//! `log.filter = "info,tower_http=debug"` to see every request. Colours only
//! when standard error is a terminal, so journald and files get plain text.

use std::io::IsTerminal;

use tracing_subscriber::{EnvFilter, fmt, prelude::*};

/// Installs the global subscriber, `json` for one JSON object per line.
/// Safe to call more than once (later calls are ignored), which keeps
/// tests that build several apps simple.
pub fn init(filter: &str, json: bool) {
    let filter = std::env::var("RUST_LOG")
        .ok()
        .and_then(|f| EnvFilter::try_new(f).ok())
        .or_else(|| EnvFilter::try_new(filter).ok())
        .unwrap_or_else(|| EnvFilter::new("info"));
    let registry = tracing_subscriber::registry().with(filter);
    let _ = if json {
        registry
            .with(
                fmt::layer()
                    .json()
                    .with_writer(std::io::stderr)
                    .with_current_span(true)
                    .with_target(false),
            )
            .try_init()
    } else {
        registry
            .with(
                fmt::layer()
                    .with_writer(std::io::stderr)
                    .with_ansi(std::io::stderr().is_terminal())
                    .with_target(false),
            )
            .try_init()
    };
}

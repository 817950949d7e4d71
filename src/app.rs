//! Start-up and shutdown: `Application::build` opens the store and binds the
//! listener (port 0 in tests, so the port is read back), `run_until` serves
//! until a shutdown signal and then drains for a bounded time.

use std::{future::Future, net::SocketAddr, time::Duration};

use anyhow::Context;
use tokio::net::TcpListener;

use crate::{
    config::Config,
    http::{self, AppState},
    store::Store,
};

/// A built service: database open and migrated, socket bound.
pub struct Application {
    listener: TcpListener,
    state: AppState,
    grace: Duration,
}

impl Application {
    /// Opens the database (creating and migrating it) and binds the socket.
    pub async fn build(config: Config) -> anyhow::Result<Self> {
        let addr = config
            .bind_addr()
            .context("server.bind is not a socket address")?;
        let store = Store::open(&config.storage).await.with_context(|| {
            format!("opening database in {}", config.storage.data_dir.display())
        })?;
        let listener = TcpListener::bind(addr)
            .await
            .with_context(|| format!("binding {addr}"))?;
        let grace = config.shutdown_grace();
        Ok(Self {
            listener,
            state: AppState::new(config, store),
            grace,
        })
    }

    /// The address actually bound (the real port when 0 was asked for).
    pub fn local_addr(&self) -> std::io::Result<SocketAddr> {
        self.listener.local_addr()
    }

    /// The store, for tests that inspect what was written.
    pub fn store(&self) -> &Store {
        &self.state.store
    }

    /// Serves until `shutdown` completes, then stops accepting connections
    /// and waits at most the configured grace period for requests in flight.
    pub async fn run_until(self, shutdown: impl Future<Output = ()>) -> anyhow::Result<()> {
        let Self {
            listener,
            state,
            grace,
        } = self;
        let store = state.store.clone();
        let router = http::router(state);
        let (stop_tx, stop_rx) = tokio::sync::oneshot::channel::<()>();
        let mut server = tokio::spawn(async move {
            axum::serve(listener, router)
                .with_graceful_shutdown(async move {
                    let _ = stop_rx.await;
                })
                .await
        });
        tokio::select! {
            ended = &mut server => {
                store.close().await;
                ended.context("server task failed")?.context("server stopped")?;
                return Ok(());
            }
            () = shutdown => {}
        }
        tracing::info!(
            grace_secs = grace.as_secs(),
            "shutdown requested; draining requests in flight"
        );
        let _ = stop_tx.send(());
        match tokio::time::timeout(grace, &mut server).await {
            Ok(ended) => ended
                .context("server task failed")?
                .context("server stopped")?,
            Err(_) => {
                tracing::warn!("requests still running after the grace period; closing them");
                server.abort();
            }
        }
        store.close().await;
        tracing::info!("stopped");
        Ok(())
    }
}

/// Completes on Ctrl-C or, on Unix, SIGTERM (what systemd sends on stop).
///
/// The handlers are installed when this is called, not when the future is
/// first polled, so a caller that installs them before announcing that it
/// listens never dies of a SIGTERM that arrives in between.
pub fn shutdown_signal() -> impl Future<Output = ()> {
    #[cfg(unix)]
    let terminate = tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate());
    #[cfg(unix)]
    let interrupt = tokio::signal::unix::signal(tokio::signal::unix::SignalKind::interrupt());
    async move {
        #[cfg(unix)]
        {
            let wait = |s: std::io::Result<tokio::signal::unix::Signal>, name: &'static str| async move {
                match s {
                    Ok(mut s) => {
                        s.recv().await;
                    }
                    Err(e) => {
                        tracing::error!(error = %e, "cannot listen for {name}");
                        std::future::pending::<()>().await;
                    }
                }
            };
            tokio::select! {
                () = wait(terminate, "SIGTERM") => {}
                () = wait(interrupt, "SIGINT") => {}
            }
        }
        #[cfg(not(unix))]
        if let Err(e) = tokio::signal::ctrl_c().await {
            tracing::error!(error = %e, "cannot listen for Ctrl-C");
            std::future::pending::<()>().await;
        }
    }
}

//! Start-up and shutdown: `Application::build` opens the store and binds the
//! listener (port 0 in tests, so the port is read back), `run_until` serves
//! until a shutdown signal and then drains for a bounded time.

use std::{future::Future, net::SocketAddr, time::Duration};

use anyhow::Context;
use tokio::net::TcpListener;

use crate::{
    config::Config,
    http::{self, AppState},
    service::Forecaster,
    store::Store,
};

/// A built service: database open and migrated, socket bound.
pub struct Application {
    listener: TcpListener,
    state: AppState,
    grace: Duration,
    stop_workers: tokio::sync::watch::Sender<bool>,
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
        let (stop_workers, stop_rx) = tokio::sync::watch::channel(false);
        let forecaster = Forecaster::new(
            store.clone(),
            config.forecast.clone(),
            config.verification.clone(),
            crate::service::alerts::Alerter::new(&config),
            stop_rx.clone(),
        );
        if config.demo.enabled {
            crate::demo::seed(&store)
                .await
                .context("seeding the demo reach")?;
        }
        load_reach_dir(&store, &config.forecast).await?;
        forecaster
            .start()
            .await
            .context("starting the forecast cycle")?;
        let metrics = forecaster.metrics_handle();
        store.observe_write_waits(std::sync::Arc::new(move |waited| {
            metrics.db_write_wait.observe(waited.as_secs_f64());
        }));
        crate::service::backups::spawn(store.clone(), &config, forecaster.clone(), stop_rx.clone());
        crate::service::retention::spawn(
            store.clone(),
            config.clone(),
            forecaster.clone(),
            stop_rx.clone(),
        );
        if config.demo.enabled {
            crate::demo::spawn_replay(
                store.clone(),
                forecaster.clone(),
                Duration::from_secs(config.demo.replay_secs),
                stop_rx,
            );
        }
        Ok(Self {
            listener,
            state: AppState::new(config, store, forecaster),
            grace,
            stop_workers,
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
            stop_workers,
        } = self;
        let store = state.store.clone();
        let limits = crate::http::listener::Limits::of(&state.config.server);
        let router = http::router(state);
        let (stop_tx, stop_rx) = tokio::sync::oneshot::channel::<()>();
        let mut server = tokio::spawn(crate::http::listener::serve(
            listener,
            router,
            limits,
            async move {
                let _ = stop_rx.await;
            },
        ));
        tokio::select! {
            ended = &mut server => {
                store.close().await;
                ended.context("server task failed")?;
                return Ok(());
            }
            () = shutdown => {}
        }
        tracing::info!(
            grace_secs = grace.as_secs(),
            "shutdown requested; draining requests in flight"
        );
        let _ = stop_workers.send(true);
        let _ = stop_tx.send(());
        match tokio::time::timeout(grace, &mut server).await {
            Ok(ended) => ended.context("server task failed")?,
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

/// Loads every `NAME.json` in `dir` as the reach `NAME`, storing a new
/// version only when the description differs from the stored one, so a
/// restart with unchanged files adds nothing. A bad file stops the start
/// with an error naming the file and the field.
pub async fn load_reach_dir(
    store: &Store,
    forecast: &crate::config::ForecastConfig,
) -> anyhow::Result<usize> {
    let dir = forecast.reach_dir.as_path();
    if dir.as_os_str().is_empty() {
        return Ok(0);
    }
    let entries = std::fs::read_dir(dir)
        .with_context(|| format!("forecast.reach_dir: cannot read {}", dir.display()))?;
    let mut paths: Vec<std::path::PathBuf> = entries
        .filter_map(Result::ok)
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .collect();
    paths.sort();
    let mut stored = 0;
    for path in paths {
        let id = path
            .file_stem()
            .and_then(|s| s.to_str())
            .unwrap_or_default()
            .to_owned();
        anyhow::ensure!(
            crate::gauge::valid_slug(&id),
            "{}: the file name must be a reach id (a-z, 0-9, -) followed by .json",
            path.display()
        );
        let text = std::fs::read_to_string(&path)
            .with_context(|| format!("reading {}", path.display()))?;
        let spec = crate::forecast::spec::ReachSpec::from_json(&text)
            .with_context(|| format!("in {}", path.display()))?;
        crate::forecast::budget::admit(&spec, &forecast.budget(), forecast.window_s())
            .with_context(|| format!("in {}", path.display()))?;
        let current = store.latest_reach(&id).await?;
        if current.as_ref().is_none_or(|c| c.spec != spec) {
            let version = store.put_reach(&id, &spec, None).await?;
            tracing::info!(reach = %id, version, file = %path.display(), "reach loaded from file");
            stored += 1;
        }
    }
    Ok(stored)
}

/// Registers for SIGINT (Ctrl-C) and SIGTERM (what systemd sends on stop)
/// now, and returns a future that completes when either arrives.
///
/// Registration happens before the future is polled so that a signal sent
/// right after the service announces itself is not lost to the default
/// handler (which would kill the process without a drain).
#[cfg(unix)]
pub fn shutdown_signal() -> std::io::Result<impl Future<Output = ()>> {
    use tokio::signal::unix::{SignalKind, signal};
    let mut term = signal(SignalKind::terminate())?;
    let mut int = signal(SignalKind::interrupt())?;
    Ok(async move {
        tokio::select! {
            _ = term.recv() => tracing::info!("SIGTERM received"),
            _ = int.recv() => tracing::info!("interrupt received"),
        }
    })
}

/// Ctrl-C on platforms without Unix signals.
#[cfg(not(unix))]
pub fn shutdown_signal() -> std::io::Result<impl Future<Output = ()>> {
    Ok(async {
        let _ = tokio::signal::ctrl_c().await;
    })
}

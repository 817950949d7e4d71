//! The forecast cycle's handle and workers: each reach is forecast every
//! `forecast.interval_minutes` and soon after new readings or a new inflow
//! upload (debounced), one run at a time per reach, with the engine on
//! `spawn_blocking` so the API never stalls.
//!
//! A run: load the newest reach version, assemble the inflow (observed
//! upstream discharge, then the newest upload or the extrapolation rule),
//! route it, store results and provenance, refresh the exceedance board and
//! issue the CAP messages due (`super::alerts`; never fails the run), then
//! verify what earlier runs forecast against the readings since
//! (`super::verifier`; never fails the run either). A
//! failed run is logged and stored with its error; the last good forecast
//! stays served.

use std::{
    collections::HashMap,
    sync::{Arc, Mutex as StdMutex, RwLock},
    time::Duration,
};

use serde::Serialize;
use tokio::sync::{Mutex, Notify, watch};

use super::{
    alerts::Alerter,
    board::{Board, GoodRun},
};
use crate::{
    config::{ForecastConfig, VerificationConfig},
    forecast::{cap::Situation, record::RunStatus, run::Prepared},
    store::{Store, StoreError},
};

/// How a run ended, as the trigger endpoint reports it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunSummary {
    pub run_id: i64,
    pub status: RunStatus,
    pub error: Option<String>,
}

struct Worker {
    notify: Arc<Notify>,
    run_lock: Arc<Mutex<()>>,
    /// The worker's task, so readiness can tell that it still runs.
    task: Option<tokio::task::JoinHandle<()>>,
}

pub(super) struct Inner {
    pub(super) store: Store,
    pub(super) config: ForecastConfig,
    /// How forecasts are verified.
    pub(super) verification: VerificationConfig,
    /// Issues CAP messages after each successful run.
    pub(super) alerts: Alerter,
    workers: StdMutex<HashMap<String, Worker>>,
    pub(super) board: RwLock<Board>,
    /// Incremented whenever the board changes (the exceedance cache key).
    pub(super) board_version: watch::Sender<u64>,
    shutdown: watch::Receiver<bool>,
    /// What the service counts (served at `/metrics`).
    pub(super) metrics: Arc<crate::metrics::Metrics>,
    /// The prepared tables of each reach's newest version.
    pub(super) prepared: StdMutex<HashMap<String, (i64, Arc<Prepared>)>>,
    /// Verification reports merged since each reach's last pass.
    pub(super) reports: super::verification_cache::ReportCache,
}

/// Handle to the forecast cycle. Cheap to clone.
#[derive(Clone)]
pub struct Forecaster {
    pub(super) inner: Arc<Inner>,
}

/// Why a cycle could not even be recorded as a run.
#[derive(Debug, thiserror::Error)]
pub enum CycleError {
    #[error("no reach `{0}`")]
    NoReach(String),
    #[error(transparent)]
    Store(#[from] StoreError),
    /// Blocking work panicked or was cancelled.
    #[error("{0}")]
    Task(String),
}

impl Forecaster {
    /// Creates the cycle; `start` spawns the workers.
    pub fn new(
        store: Store,
        config: ForecastConfig,
        verification: VerificationConfig,
        alerts: Alerter,
        shutdown: watch::Receiver<bool>,
    ) -> Self {
        let (board_version, _) = watch::channel(0);
        Self {
            inner: Arc::new(Inner {
                store,
                alerts,
                config,
                verification,
                workers: StdMutex::new(HashMap::new()),
                board: RwLock::new(Board::default()),
                board_version,
                shutdown,
                metrics: Arc::default(),
                prepared: StdMutex::new(HashMap::new()),
                reports: Default::default(),
            }),
        }
    }

    /// The service's metrics.
    pub fn metrics(&self) -> &crate::metrics::Metrics {
        &self.inner.metrics
    }

    /// The service's metrics, shared.
    pub fn metrics_handle(&self) -> Arc<crate::metrics::Metrics> {
        self.inner.metrics.clone()
    }

    /// Loads the board from the stored runs and starts a worker per reach.
    pub async fn start(&self) -> Result<(), StoreError> {
        for reach in self.inner.store.reaches().await? {
            let run = self
                .inner
                .store
                .latest_run(&reach.reach_id, Some(RunStatus::Ok))
                .await?;
            if let Some(good) = run.as_ref().and_then(GoodRun::of) {
                self.refresh_board(&reach, good);
            }
            self.ensure_worker(&reach.reach_id);
        }
        Ok(())
    }

    /// The situation of every (point, threshold) at the latest good run of
    /// each reach, and the board version.
    pub fn board(&self) -> (Vec<Situation>, u64) {
        let version = *self.inner.board_version.borrow();
        let items = self
            .inner
            .board
            .read()
            .map(|b| b.situations())
            .unwrap_or_default();
        (items, version)
    }

    /// The board's current version (changes whenever a run lands).
    pub fn board_version(&self) -> u64 {
        *self.inner.board_version.borrow()
    }

    /// The forecast configuration in force.
    pub fn config(&self) -> &ForecastConfig {
        &self.inner.config
    }

    /// Starts the worker of a reach if it has none (after a reach is
    /// created) and asks it to run soon.
    pub fn ensure_worker(&self, reach_id: &str) {
        let mut workers = match self.inner.workers.lock() {
            Ok(w) => w,
            Err(poisoned) => poisoned.into_inner(),
        };
        if let Some(w) = workers.get(reach_id) {
            w.notify.notify_one();
            return;
        }
        let mut worker = Worker {
            notify: Arc::new(Notify::new()),
            run_lock: Arc::new(Mutex::new(())),
            task: None,
        };
        // Run promptly at start: notify before the loop waits.
        worker.notify.notify_one();
        let this = self.clone();
        let id = reach_id.to_owned();
        let notify = worker.notify.clone();
        worker.task = Some(tokio::spawn(
            async move { this.worker_loop(id, notify).await },
        ));
        workers.insert(reach_id.to_owned(), worker);
    }

    /// The reaches whose scheduler task has ended although the service is
    /// not stopping (a worker that panicked, say): readiness reports them.
    pub fn stopped_workers(&self) -> Vec<String> {
        if *self.inner.shutdown.borrow() {
            return Vec::new();
        }
        let workers = match self.inner.workers.lock() {
            Ok(w) => w,
            Err(poisoned) => poisoned.into_inner(),
        };
        let mut out: Vec<String> = workers
            .iter()
            .filter(|(_, w)| w.task.as_ref().is_some_and(|t| t.is_finished()))
            .map(|(id, _)| id.clone())
            .collect();
        out.sort();
        out
    }

    /// New data for a reach: run after the debounce delay.
    pub fn data_arrived(&self, reach_id: &str) {
        if let Ok(workers) = self.inner.workers.lock()
            && let Some(w) = workers.get(reach_id)
        {
            w.notify.notify_one();
        }
    }

    /// New readings of a gauge: wake every reach whose upstream gauge,
    /// tributary gauge or point gauge it is.
    pub async fn gauge_updated(&self, gauge_id: &str) {
        match self.inner.store.reaches().await {
            Ok(reaches) => {
                for r in reaches {
                    let uses = r.spec.service.upstream_gauge.as_deref() == Some(gauge_id)
                        || r.spec
                            .points
                            .iter()
                            .any(|p| p.gauge.as_deref() == Some(gauge_id))
                        || r.spec
                            .tributaries()
                            .iter()
                            .any(|t| t.gauge == Some(gauge_id));
                    if uses {
                        self.data_arrived(&r.reach_id);
                    }
                }
            }
            Err(e) => tracing::warn!(error = %e, gauge = gauge_id, "cannot find reaches of gauge"),
        }
    }

    /// The lock one reach's runs take, so they never interleave (a fresh
    /// one, after starting the worker, for a reach without a worker yet).
    pub(super) fn run_lock(&self, reach_id: &str) -> Arc<Mutex<()>> {
        let lock = {
            let workers = match self.inner.workers.lock() {
                Ok(w) => w,
                Err(poisoned) => poisoned.into_inner(),
            };
            workers.get(reach_id).map(|w| w.run_lock.clone())
        };
        lock.unwrap_or_else(|| {
            self.ensure_worker(reach_id);
            Arc::new(Mutex::new(()))
        })
    }

    /// Runs a reach now (waiting for a run in progress to finish first).
    pub async fn run_now(&self, reach_id: &str) -> Result<RunSummary, CycleError> {
        let lock = self.run_lock(reach_id);
        let _guard = lock.lock().await;
        let summary = self.cycle(reach_id).await;
        self.verify(reach_id).await;
        summary
    }

    async fn worker_loop(self, reach_id: String, notify: Arc<Notify>) {
        let interval = Duration::from_secs(self.inner.config.interval_minutes * 60);
        let debounce = Duration::from_millis(self.inner.config.debounce_ms);
        let mut shutdown = self.inner.shutdown.clone();
        let mut first = true;
        loop {
            tokio::select! {
                () = tokio::time::sleep(interval) => {}
                () = notify.notified() => {
                    // Debounce: let a burst of posts settle into one run
                    // (not at start-up, where the first run is wanted now).
                    if !first && !debounce.is_zero() {
                        tokio::select! {
                            () = tokio::time::sleep(debounce) => {}
                            _ = shutdown.changed() => break,
                        }
                    }
                }
                _ = shutdown.changed() => break,
            }
            first = false;
            if *shutdown.borrow() {
                break;
            }
            let lock = {
                let workers = match self.inner.workers.lock() {
                    Ok(w) => w,
                    Err(poisoned) => poisoned.into_inner(),
                };
                workers.get(&reach_id).map(|w| w.run_lock.clone())
            };
            let Some(lock) = lock else { break };
            let _guard = lock.lock().await;
            if let Err(e) = self.cycle(&reach_id).await {
                tracing::error!(reach = %reach_id, error = %e, "forecast cycle could not run");
            }
            self.verify(&reach_id).await;
        }
        tracing::debug!(reach = %reach_id, "forecast worker stopped");
    }
}

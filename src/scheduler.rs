//! The forecast cycle: each reach is forecast every
//! `forecast.interval_minutes` and soon after new readings or a new inflow
//! upload (debounced), one run at a time per reach, with the engine on
//! `spawn_blocking` so the API never stalls.
//!
//! A run: load the newest reach version, assemble the inflow (observed
//! upstream discharge, then the newest upload or the extrapolation rule),
//! route it, store results and provenance, refresh the exceedance board and
//! issue the CAP messages due (`crate::alerts`; never fails the run). A
//! failed run is logged and stored with its error; the last good forecast
//! stays served.

use std::{
    collections::HashMap,
    sync::{Arc, Mutex as StdMutex, RwLock},
    time::{Duration, Instant},
};

use chrono::{DateTime, Utc};
use serde::Serialize;
use tokio::sync::{Mutex, Notify, watch};

use crate::{
    config::ForecastConfig,
    forecast::{
        assemble::{self, Extrapolation, GaugeBasis, Reading, Rules},
        cap::{RunContext, Situation},
        run::{self, RunOutput},
        spec::ReachSpec,
        view::StoredResults,
    },
    gauge::Measures,
    store::{ReachVersion, Store, StoreError, StoredRun},
};

/// How a run ended, as the trigger endpoint reports it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunSummary {
    pub run_id: i64,
    pub status: &'static str,
    pub error: Option<String>,
}

/// One (point, threshold) pair as the exceedance endpoint reports it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExceedanceItem {
    pub reach: String,
    pub reach_name: String,
    pub point: String,
    pub threshold: String,
    pub elevation: f64,
    pub severity: crate::forecast::spec::Severity,
    pub exceeded: bool,
    pub above_now: bool,
    pub first_above: Option<DateTime<Utc>>,
    pub back_below: Option<DateTime<Utc>>,
    pub crest_stage: f64,
    pub crest_time: DateTime<Utc>,
    pub margin: f64,
    pub run_id: i64,
    pub run_finished: DateTime<Utc>,
    pub stale: bool,
}

/// The current exceedances of every reach, rebuilt after each run.
#[derive(Debug, Default)]
pub struct Board {
    by_reach: HashMap<String, Vec<ExceedanceItem>>,
}

impl Board {
    /// Every item, by reach id, point chainage order as stored.
    pub fn items(&self) -> Vec<ExceedanceItem> {
        let mut keys: Vec<&String> = self.by_reach.keys().collect();
        keys.sort();
        keys.into_iter()
            .flat_map(|k| self.by_reach[k].iter().cloned())
            .collect()
    }
}

struct Worker {
    notify: Arc<Notify>,
    run_lock: Arc<Mutex<()>>,
}

struct Inner {
    store: Store,
    config: ForecastConfig,
    /// Issues CAP messages after each successful run.
    alerts: crate::alerts::Alerter,
    workers: StdMutex<HashMap<String, Worker>>,
    board: RwLock<Board>,
    /// Incremented whenever the board changes (the exceedance cache key).
    board_version: watch::Sender<u64>,
    shutdown: watch::Receiver<bool>,
}

/// Handle to the forecast cycle. Cheap to clone.
#[derive(Clone)]
pub struct Forecaster {
    inner: Arc<Inner>,
}

/// Why a cycle could not even be recorded as a run.
#[derive(Debug, thiserror::Error)]
pub enum CycleError {
    #[error("no reach `{0}`")]
    NoReach(String),
    #[error(transparent)]
    Store(#[from] StoreError),
}

impl Forecaster {
    /// Creates the cycle; `start` spawns the workers.
    pub fn new(
        store: Store,
        config: ForecastConfig,
        alerts: &crate::config::AlertsConfig,
        shutdown: watch::Receiver<bool>,
    ) -> Self {
        let (board_version, _) = watch::channel(0);
        Self {
            inner: Arc::new(Inner {
                store,
                alerts: crate::alerts::Alerter::new(alerts, &config),
                config,
                workers: StdMutex::new(HashMap::new()),
                board: RwLock::new(Board::default()),
                board_version,
                shutdown,
            }),
        }
    }

    /// Loads the board from the stored runs and starts a worker per reach.
    pub async fn start(&self) -> Result<(), StoreError> {
        for reach in self.inner.store.reaches().await? {
            if let Some(run) = self
                .inner
                .store
                .latest_run(&reach.reach_id, Some("ok"))
                .await?
            {
                self.refresh_board(&reach, &run);
            }
            self.ensure_worker(&reach.reach_id);
        }
        Ok(())
    }

    /// Current exceedances and the board version.
    pub fn board(&self) -> (Vec<ExceedanceItem>, u64) {
        let version = *self.inner.board_version.borrow();
        let items = self
            .inner
            .board
            .read()
            .map(|b| b.items())
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
        let worker = Worker {
            notify: Arc::new(Notify::new()),
            run_lock: Arc::new(Mutex::new(())),
        };
        // Run promptly at start: notify before the loop waits.
        worker.notify.notify_one();
        let this = self.clone();
        let id = reach_id.to_owned();
        let notify = worker.notify.clone();
        workers.insert(reach_id.to_owned(), worker);
        tokio::spawn(async move { this.worker_loop(id, notify).await });
    }

    /// New data for a reach: run after the debounce delay.
    pub fn data_arrived(&self, reach_id: &str) {
        if let Ok(workers) = self.inner.workers.lock()
            && let Some(w) = workers.get(reach_id)
        {
            w.notify.notify_one();
        }
    }

    /// New readings of a gauge: wake every reach whose upstream gauge or
    /// point gauge it is.
    pub async fn gauge_updated(&self, gauge_id: &str) {
        match self.inner.store.reaches().await {
            Ok(reaches) => {
                for r in reaches {
                    let uses = r.spec.service.upstream_gauge.as_deref() == Some(gauge_id)
                        || r.spec
                            .points
                            .iter()
                            .any(|p| p.gauge.as_deref() == Some(gauge_id));
                    if uses {
                        self.data_arrived(&r.reach_id);
                    }
                }
            }
            Err(e) => tracing::warn!(error = %e, gauge = gauge_id, "cannot find reaches of gauge"),
        }
    }

    /// Runs a reach now (waiting for a run in progress to finish first).
    pub async fn run_now(&self, reach_id: &str) -> Result<RunSummary, CycleError> {
        let lock = {
            let workers = match self.inner.workers.lock() {
                Ok(w) => w,
                Err(poisoned) => poisoned.into_inner(),
            };
            workers.get(reach_id).map(|w| w.run_lock.clone())
        };
        let lock = match lock {
            Some(l) => l,
            None => {
                self.ensure_worker(reach_id);
                Arc::new(Mutex::new(()))
            }
        };
        let _guard = lock.lock().await;
        self.cycle(reach_id).await
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
        }
        tracing::debug!(reach = %reach_id, "forecast worker stopped");
    }

    fn rules(&self) -> Rules {
        let c = &self.inner.config;
        let minutes =
            |m: u64| chrono::Duration::minutes(i64::try_from(m).unwrap_or(i64::MAX / 60_000));
        Rules {
            lookback: minutes(c.lookback_hours * 60),
            horizon: minutes(c.horizon_hours * 60),
            max_gap: minutes(c.max_gap_minutes),
            stale_after: minutes(c.stale_after_minutes),
            step: minutes(c.step_minutes),
            extrapolation: if c.extrapolation == "recession" {
                Extrapolation::Recession {
                    k_hours: c.recession_hours,
                    base_flow: c.base_flow_m3s,
                }
            } else {
                Extrapolation::Persistence
            },
        }
    }

    /// One forecast run of a reach, recorded whatever happens.
    #[tracing::instrument(skip(self), fields(run_id))]
    async fn cycle(&self, reach_id: &str) -> Result<RunSummary, CycleError> {
        let store = &self.inner.store;
        let reach = store
            .latest_reach(reach_id)
            .await?
            .ok_or_else(|| CycleError::NoReach(reach_id.to_owned()))?;
        let now = Utc::now();
        let rules = self.rules();
        let (readings, basis, basis_error) = self.observed(&reach.spec, now, &rules).await?;
        let upload = store.newest_upload(reach_id).await?;
        let upload_input = upload.as_ref().map(|u| assemble::Upload {
            version: u.version,
            issued_at: DateTime::parse_from_rfc3339(&u.uploaded_at)
                .map(|t| t.with_timezone(&Utc))
                .unwrap_or(now),
            issued_by: u.uploaded_by.clone(),
            series: u.series.clone(),
        });
        let mut provenance = serde_json::json!({
            "reach_version": reach.version,
            "method": reach.spec.routing.method,
            "routing": reach.spec.routing,
            "upstream_gauge": reach.spec.service.upstream_gauge,
            "rules": {
                "lookback_hours": self.inner.config.lookback_hours,
                "horizon_hours": self.inner.config.horizon_hours,
                "max_gap_minutes": self.inner.config.max_gap_minutes,
                "stale_after_minutes": self.inner.config.stale_after_minutes,
                "extrapolation": self.inner.config.extrapolation,
            },
            "engine_version": env!("CARGO_PKG_VERSION"),
        });
        let assembled = match basis_error {
            Some(e) => Err(e),
            None => assemble::assemble(now, &readings, &basis, upload_input.as_ref(), &rules)
                .map_err(|e| format!("inflow: {e}")),
        };
        let upload_id = upload.as_ref().map(|u| u.id);
        let assembled = match assembled {
            Ok(a) => a,
            Err(e) => {
                let run_id = store
                    .start_run(reach_id, reach.version, upload_id, &provenance)
                    .await?;
                store.finish_run(run_id, Err(&e), &provenance).await?;
                tracing::warn!(reach = reach_id, run_id, error = %e, "forecast run failed");
                return Ok(RunSummary {
                    run_id,
                    status: "failed",
                    error: Some(e),
                });
            }
        };
        provenance["inflow"] = serde_json::to_value(&assembled.provenance).unwrap_or_default();
        let run_id = store
            .start_run(reach_id, reach.version, upload_id, &provenance)
            .await?;
        tracing::Span::current().record("run_id", run_id);
        let spec = reach.spec.clone();
        let series = assembled.series;
        let joined = tokio::task::spawn_blocking(move || {
            let started = Instant::now();
            let out = run::run(&spec, &series, None);
            (out, started.elapsed().as_secs_f64())
        })
        .await;
        let (outcome, wall) = match joined {
            Ok((out, wall)) => (out.map_err(|e| e.to_string()), wall),
            Err(e) => (Err(format!("routing task failed: {e}")), 0.0),
        };
        provenance["wall_time_s"] = serde_json::json!(wall);
        match outcome {
            Ok(mut out) => {
                out.diagnostics.wall_time_s = Some(wall);
                provenance["diagnostics"] = diagnostics_json(&out);
                let results = StoredResults {
                    method: out.method,
                    start: out.start,
                    end: out.end,
                    nodes: out.nodes,
                    diagnostics: provenance["diagnostics"].clone(),
                    points: out.points,
                };
                let json = serde_json::to_value(&results).unwrap_or_default();
                store.finish_run(run_id, Ok(&json), &provenance).await?;
                if let Some(run) = store.run(run_id).await? {
                    let situations = self.refresh_board(&reach, &run);
                    self.inner
                        .alerts
                        .after_run(store, &reach, run_id, &situations)
                        .await;
                }
                tracing::info!(
                    reach = reach_id,
                    run_id,
                    wall_ms = wall * 1e3,
                    "forecast run ok"
                );
                Ok(RunSummary {
                    run_id,
                    status: "ok",
                    error: None,
                })
            }
            Err(e) => {
                store.finish_run(run_id, Err(&e), &provenance).await?;
                tracing::warn!(reach = reach_id, run_id, error = %e, "forecast run failed; the last good forecast stays served");
                Ok(RunSummary {
                    run_id,
                    status: "failed",
                    error: Some(e),
                })
            }
        }
    }

    /// Observed readings of the upstream gauge and how to turn them into
    /// discharge; the third value is a reason the gauge cannot be used.
    async fn observed(
        &self,
        spec: &ReachSpec,
        now: DateTime<Utc>,
        rules: &Rules,
    ) -> Result<(Vec<Reading>, GaugeBasis, Option<String>), StoreError> {
        let Some(gauge_id) = spec.service.upstream_gauge.as_deref() else {
            return Ok((Vec::new(), GaugeBasis::Discharge, None));
        };
        let Some(gauge) = self.inner.store.gauge(gauge_id).await? else {
            return Ok((
                Vec::new(),
                GaugeBasis::Discharge,
                Some(format!("upstream gauge `{gauge_id}` does not exist")),
            ));
        };
        let rating = gauge
            .spec
            .rating_curve
            .clone()
            .map(|r| r.validate().map(|()| r));
        let basis = match (gauge.spec.measures, rating) {
            (Measures::Discharge, _) | (Measures::Both, None) => GaugeBasis::Discharge,
            (_, Some(Ok(r))) => GaugeBasis::Stage(r),
            (_, Some(Err(e))) => {
                return Ok((
                    Vec::new(),
                    GaugeBasis::Discharge,
                    Some(format!(
                        "rating curve of gauge `{gauge_id}` is invalid: {e}"
                    )),
                ));
            }
            (Measures::Stage, None) => {
                return Ok((
                    Vec::new(),
                    GaugeBasis::Discharge,
                    Some(format!(
                        "gauge `{gauge_id}` reports stage but has no rating curve"
                    )),
                ));
            }
        };
        let from = now - rules.lookback - rules.max_gap;
        let rows = self
            .inner
            .store
            .readings_for_forecast(gauge_id, from.timestamp_millis(), now.timestamp_millis())
            .await?;
        let readings = rows
            .into_iter()
            .filter_map(|r| {
                Some(Reading {
                    time: DateTime::from_timestamp_millis(r.time_ms)?,
                    stage: r.stage_m,
                    discharge: r.discharge_m3s,
                    usable: r.for_forecast(),
                })
            })
            .collect();
        Ok((readings, basis, None))
    }

    /// Rebuilds the board of `reach` from `run` and returns the run's
    /// situations (one per point and threshold), which CAP planning uses.
    fn refresh_board(&self, reach: &ReachVersion, run: &StoredRun) -> Vec<Situation> {
        let Some(results) = run
            .results
            .as_ref()
            .and_then(|r| serde_json::from_value::<StoredResults>(r.clone()).ok())
        else {
            return Vec::new();
        };
        let finished = run
            .finished_at
            .as_deref()
            .and_then(|t| DateTime::parse_from_rfc3339(t).ok())
            .map_or_else(Utc::now, |t| t.with_timezone(&Utc));
        // Only a gauge can fall silent: a reach fed by uploads alone is
        // never stale for want of readings.
        let stale = reach.spec.service.upstream_gauge.is_some()
            && run
                .provenance
                .pointer("/inflow/stale")
                .and_then(serde_json::Value::as_bool)
                .unwrap_or(false);
        let ctx = RunContext {
            reach_id: reach.reach_id.clone(),
            reach_name: reach.spec.name.clone(),
            run_id: run.id,
            run_finished: finished,
            stale,
        };
        let mut situations = Vec::new();
        for p in &results.points {
            for t in &p.thresholds {
                if let Ok(s) = Situation::from_forecast(&ctx, p, t, finished) {
                    situations.push(s);
                }
            }
        }
        let items = situations.iter().map(item_from).collect();
        if let Ok(mut board) = self.inner.board.write() {
            board.by_reach.insert(reach.reach_id.clone(), items);
        }
        self.inner.board_version.send_modify(|v| *v += 1);
        situations
    }
}

fn item_from(s: &Situation) -> ExceedanceItem {
    ExceedanceItem {
        reach: s.reach_id.clone(),
        reach_name: s.reach_name.clone(),
        point: s.point_name.clone(),
        threshold: s.threshold_name.clone(),
        elevation: s.elevation,
        severity: s.severity,
        exceeded: s.exceeded,
        above_now: s.above_now,
        first_above: s.first_above,
        back_below: s.back_below,
        crest_stage: s.crest_stage,
        crest_time: s.crest_time,
        margin: s.margin,
        run_id: s.run_id,
        run_finished: s.run_finished,
        stale: s.stale,
    }
}

fn diagnostics_json(out: &RunOutput) -> serde_json::Value {
    let d = &out.diagnostics;
    serde_json::json!({
        "mass_balance_error_pct": d.mass_balance_error_pct,
        "max_froude": d.max_froude,
        "max_froude_chainage": d.max_froude_chainage,
        "applicability_number": d.applicability_number,
        "applicability_threshold": d.applicability_threshold,
        "dry_nodes": d.dry_nodes.len(),
        "extrapolated_chainages": d.extrapolated_chainages,
        "steps": d.steps,
        "rejected_steps": d.rejected_steps,
        "newton_iterations_total": d.newton_iterations_total,
        "dt_min_used": d.dt_min_used,
        "dt_max_used": d.dt_max_used,
        "wall_time_s": d.wall_time_s,
        "warnings": d.warnings.iter().map(|w| w.to_string()).collect::<Vec<_>>(),
    })
}

//! One forecast run of a reach: load the newest reach version, assemble
//! the inflow (observed upstream discharge, then the newest upload or the
//! extrapolation rule), route it on `spawn_blocking`, store results and
//! provenance, refresh the board and issue the CAP messages due. A run is
//! recorded whatever happens; a failed run keeps its error and the last
//! good forecast stays served.

use std::time::Instant;

use chrono::{DateTime, Utc};

use super::{
    CycleError, Forecaster, RunSummary,
    board::GoodRun,
    ensemble::{self, EnsembleJob},
};
use crate::{
    forecast::{
        assemble::{self, Extrapolation, GaugeBasis, Reading, Rules},
        record::{
            EnsembleProvenance, EnsembleRecord, HindcastProvenance, Knowledge, RuleSettings,
            RunDiagnostics, RunProvenance, RunStatus, StoredResults,
        },
        run::{self, Adjust},
        spec::ReachSpec,
        traces::Traces,
    },
    gauge::Measures,
    store::{InflowUpload, ReachVersion, StoreError},
};

/// The readings of the upstream gauge and how to turn them into
/// discharge, or why the gauge cannot be used.
type Observed = Result<(Vec<Reading>, GaugeBasis), String>;

/// What a run is issued from: now and all the service has (a live run),
/// or a past instant and what counted as known then (a hindcast).
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Basis {
    pub(super) issued: DateTime<Utc>,
    pub(super) hindcast: Option<Knowledge>,
}

impl Basis {
    pub(super) fn live(now: DateTime<Utc>) -> Self {
        Self {
            issued: now,
            hindcast: None,
        }
    }
}

impl Forecaster {
    pub(super) fn rules(&self) -> Rules {
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

    /// What is known of a run before its inflow is assembled.
    fn provenance(&self, reach: &ReachVersion) -> RunProvenance {
        let c = &self.inner.config;
        RunProvenance {
            reach_version: reach.version,
            method: reach.spec.routing.method,
            routing: reach.spec.routing.clone(),
            upstream_gauge: reach.spec.service.upstream_gauge.clone(),
            roughness: reach.spec.roughness,
            rules: RuleSettings {
                lookback_hours: c.lookback_hours,
                horizon_hours: c.horizon_hours,
                max_gap_minutes: c.max_gap_minutes,
                stale_after_minutes: c.stale_after_minutes,
                extrapolation: c.extrapolation.clone(),
            },
            engine_version: env!("CARGO_PKG_VERSION").to_owned(),
            ..RunProvenance::default()
        }
    }

    /// One forecast run of a reach, now, recorded whatever happens.
    pub(super) async fn cycle(&self, reach_id: &str) -> Result<RunSummary, CycleError> {
        self.cycle_on(reach_id, Basis::live(Utc::now())).await
    }

    /// The reach version, its provenance and the upload a run on `basis`
    /// starts from.
    async fn starting_point(
        &self,
        reach_id: &str,
        basis: Basis,
    ) -> Result<(ReachVersion, RunProvenance, Option<InflowUpload>), CycleError> {
        let store = &self.inner.store;
        let missing = || CycleError::NoReach(reach_id.to_owned());
        let Some(knowledge) = basis.hindcast else {
            let reach = store.latest_reach(reach_id).await?.ok_or_else(missing)?;
            let provenance = self.provenance(&reach);
            return Ok((
                reach,
                provenance,
                store.newest_upload(reach_id, None).await?,
            ));
        };
        let (reach, first) = store
            .reach_as_of(reach_id, basis.issued)
            .await?
            .ok_or_else(missing)?;
        let mut provenance = self.provenance(&reach);
        provenance.hindcast = Some(HindcastProvenance {
            issued: basis.issued,
            knowledge,
            first_version_used: first,
        });
        let upload = store.upload_as_of(reach_id, basis.issued, None).await?;
        Ok((reach, provenance, upload))
    }

    /// One run of a reach issued on `basis`, recorded whatever happens.
    #[tracing::instrument(skip(self), fields(run_id))]
    pub(super) async fn cycle_on(
        &self,
        reach_id: &str,
        basis: Basis,
    ) -> Result<RunSummary, CycleError> {
        let store = &self.inner.store;
        let (reach, mut provenance, upload) = self.starting_point(reach_id, basis).await?;
        let now = basis.issued;
        let rules = self.rules();
        let observed = self.observed(&reach.spec, basis, &rules).await?;
        let upload_input = upload.as_ref().map(|u| assemble::Upload {
            version: u.version,
            issued_at: u.uploaded_at,
            issued_by: u.uploaded_by.clone(),
            series: u.series.clone(),
        });
        let upload_id = upload.as_ref().map(|u| u.id);
        let gauge_rated = matches!(&observed, Ok((_, GaugeBasis::Stage(_))));
        let no_traces = Traces::NONE;
        let traces = upload.as_ref().map_or(&no_traces, |u| &u.traces);
        let assembled = observed.and_then(|(readings, basis)| {
            let main = assemble::assemble(now, &readings, &basis, upload_input.as_ref(), &rules)
                .map_err(|e| format!("inflow: {e}"))?;
            let inputs = ensemble::TraceInputs {
                now,
                readings: &readings,
                basis: &basis,
                upload: upload_input.as_ref(),
                rules: &rules,
            };
            let traces = ensemble::assemble_traces(&inputs, &main.provenance, traces);
            Ok((main, traces))
        });
        let (assembled, trace_inflows) = match assembled {
            Ok(a) => a,
            Err(e) => {
                let run_id = store
                    .start_run(reach_id, reach.version, upload_id, &provenance)
                    .await?;
                return self.failed(reach_id, run_id, e, &provenance, 0.0).await;
            }
        };
        // Gauged tributaries: their hydrographs from their gauges.
        let reach = match self.gauged_laterals(&reach, basis, &rules).await? {
            Ok((filled, laterals)) => {
                provenance.laterals = laterals;
                filled
            }
            Err(e) => {
                let run_id = store
                    .start_run(reach_id, reach.version, upload_id, &provenance)
                    .await?;
                return self.failed(reach_id, run_id, e, &provenance, 0.0).await;
            }
        };
        // The traces are the scenarios only when the main series' join
        // used the upload (the one rule, in `assemble_traces`).
        let trace_names = match &trace_inflows {
            Ok(t) if t.is_empty() => Vec::new(),
            _ => traces.names(),
        };
        let rated = ensemble::rated_part(gauge_rated, &assembled.provenance);
        provenance.inflow = Some(assembled.provenance);
        let run_id = store
            .start_run(reach_id, reach.version, upload_id, &provenance)
            .await?;
        tracing::Span::current().record("run_id", run_id);
        // Hindcasts are deterministic: they exist to be verified.
        provenance.ensemble = EnsembleProvenance::of(
            &reach.spec.ensemble,
            self.inner.config.max_ensemble_members,
            run_id.unsigned_abs(),
            trace_names,
        )
        .filter(|_| basis.hindcast.is_none());
        let (this, job_reach, series) = (self.clone(), reach.clone(), assembled.series.clone());
        let joined = tokio::task::spawn_blocking(move || {
            let started = Instant::now();
            let out = this.prepared(&job_reach).and_then(|prepared| {
                run::run_prepared(&job_reach.spec, &prepared, &series, None, Adjust::NONE)
                    .map(|o| (o, prepared))
            });
            (out, started.elapsed().as_secs_f64())
        })
        .await;
        let (outcome, wall) = match joined {
            Ok((out, wall)) => (out.map_err(|e| e.to_string()), wall),
            Err(e) => (Err(format!("routing task failed: {e}")), 0.0),
        };
        provenance.wall_time_s = Some(wall);
        match outcome {
            Ok((mut out, prepared)) => {
                out.diagnostics.wall_time_s = Some(wall);
                provenance.diagnostics = Some(RunDiagnostics::of(&out));
                let results = StoredResults::of(out, now);
                let job = provenance.ensemble.clone().map(|ens| EnsembleJob {
                    reach: reach.clone(),
                    prepared,
                    inflow: assembled.series,
                    traces: trace_inflows,
                    issued: now,
                    rated,
                    provenance: ens,
                    det: results.points.clone(),
                });
                self.succeeded(&reach, run_id, &results, &provenance, wall, job)
                    .await
            }
            Err(e) => self.failed(reach_id, run_id, e, &provenance, wall).await,
        }
    }

    /// Stores and serves the deterministic results at once, then the
    /// ensemble (if on) when it is done, then issues the CAP messages due,
    /// planned on the probabilities when there are any.
    async fn succeeded(
        &self,
        reach: &ReachVersion,
        run_id: i64,
        results: &StoredResults,
        provenance: &RunProvenance,
        wall: f64,
        job: Option<EnsembleJob>,
    ) -> Result<RunSummary, CycleError> {
        let store = &self.inner.store;
        let finished = store.finish_run(run_id, Ok(results), provenance).await?;
        if provenance.hindcast.is_some() {
            // Never the current forecast: no board, no CAP, no run metrics.
            return Ok(RunSummary {
                run_id,
                status: RunStatus::Ok,
                error: None,
            });
        }
        // The board is built from what was just stored, held in memory: no
        // read-back of the run's results.
        let good = GoodRun {
            id: run_id,
            finished,
            provenance,
            results,
            ensemble: None,
        };
        let mut situations = self.refresh_board(reach, good);
        let attached = match job {
            Some(job) => self.ensemble(run_id, job).await,
            None => None,
        };
        match &attached {
            Some(EnsembleRecord::Ready {
                summary,
                wall_time_s,
            }) => {
                tracing::info!(
                    run_id,
                    members = summary.members,
                    wall_ms = wall_time_s * 1e3,
                    "ensemble attached"
                );
                let with = GoodRun {
                    ensemble: Some(summary),
                    ..good
                };
                situations = self.refresh_board(reach, with);
            }
            Some(EnsembleRecord::Failed { error, .. }) => {
                tracing::warn!(run_id, error = %error, "ensemble failed; the deterministic forecast stands alone");
            }
            None => {}
        }
        let issued = self
            .inner
            .alerts
            .after_run(store, reach, run_id, &situations)
            .await;
        let m = &self.inner.metrics;
        m.run(&reach.reach_id, true, wall);
        issued.into_iter().for_each(|t| m.cap_issued(t));
        tracing::info!(
            reach = %reach.reach_id,
            run_id,
            wall_ms = wall * 1e3,
            "forecast run ok"
        );
        Ok(RunSummary {
            run_id,
            status: RunStatus::Ok,
            error: None,
        })
    }

    async fn failed(
        &self,
        reach_id: &str,
        run_id: i64,
        error: String,
        provenance: &RunProvenance,
        wall: f64,
    ) -> Result<RunSummary, CycleError> {
        if provenance.hindcast.is_none() {
            self.inner.metrics.run(reach_id, false, wall);
        }
        self.inner
            .store
            .finish_run(run_id, Err(&error), provenance)
            .await?;
        tracing::warn!(run_id, error = %error, "forecast run failed; the last good forecast stays served");
        Ok(RunSummary {
            run_id,
            status: RunStatus::Failed,
            error: Some(error),
        })
    }

    /// Observed readings of the upstream gauge and how to turn them into
    /// discharge; `Err` says why the gauge cannot be used.
    pub(super) async fn observed(
        &self,
        spec: &ReachSpec,
        on: Basis,
        rules: &Rules,
    ) -> Result<Observed, StoreError> {
        let Some(gauge_id) = spec.service.upstream_gauge.as_deref() else {
            return Ok(Ok((Vec::new(), GaugeBasis::Discharge)));
        };
        self.observed_gauge(gauge_id, on, rules).await
    }

    /// Observed readings of one gauge and how to turn them into discharge,
    /// with what counted as known on `on`; `Err` says why the gauge cannot
    /// be used.
    pub(super) async fn observed_gauge(
        &self,
        gauge_id: &str,
        on: Basis,
        rules: &Rules,
    ) -> Result<Observed, StoreError> {
        let now = on.issued;
        let Some(gauge) = self.inner.store.gauge(gauge_id).await? else {
            return Ok(Err(format!("upstream gauge `{gauge_id}` does not exist")));
        };
        // The gauge's own curve and its versions and shifts; each reading
        // is converted with the one valid at its time.
        let ratings = self
            .inner
            .store
            .ratings(gauge_id, gauge.spec.rating_curve.clone())
            .await?;
        let rating = (!ratings.is_empty()).then(|| ratings.validate().map(|()| ratings));
        let basis = match (gauge.spec.measures, rating) {
            (Measures::Discharge, _) | (Measures::Both, None) => GaugeBasis::Discharge,
            (_, Some(Ok(r))) => GaugeBasis::Stage(r),
            (_, Some(Err(e))) => {
                return Ok(Err(format!(
                    "rating curve of gauge `{gauge_id}` is invalid: {e}"
                )));
            }
            (Measures::Stage, None) => {
                return Ok(Err(format!(
                    "gauge `{gauge_id}` reports stage but has no rating curve"
                )));
            }
        };
        let from = now - rules.lookback - rules.max_gap;
        let (from, to) = (from.timestamp_millis(), now.timestamp_millis());
        let store = &self.inner.store;
        let rows = match on.hindcast {
            Some(Knowledge::AsReceived) => store.readings_known_at(gauge_id, from, to, to).await?,
            None | Some(Knowledge::AsTimed) => {
                store.readings_for_forecast(gauge_id, from, to).await?
            }
        };
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
        Ok(Ok((readings, basis)))
    }
}

//! The ensemble step of a forecast run, after its deterministic results
//! are stored and served: route the members off the async runtime, attach
//! the summary to the run, and rebuild the board with probabilities. Also
//! the per-reach-version cache of prepared tables that every run and
//! member shares.

use std::{sync::Arc, time::Instant};

use chrono::{DateTime, Utc};

use super::Forecaster;
use crate::{
    forecast::{
        assemble::{self, Source},
        ensemble::{EnsembleInput, perturb::RatedInflow, run_ensemble},
        hydrograph::Hydrograph,
        record::{EnsembleProvenance, EnsembleRecord},
        run::{PointForecast, Prepared, RunError},
        traces::Traces,
    },
    store::ReachVersion,
};

/// What the ensemble of one run is made from.
pub(super) struct EnsembleJob {
    pub reach: ReachVersion,
    pub prepared: Arc<Prepared>,
    pub inflow: Hydrograph,
    /// The upload's extra traces, each assembled as `inflow` was, or why
    /// one could not be.
    pub traces: Result<Vec<Hydrograph>, String>,
    pub issued: DateTime<Utc>,
    pub rated: RatedInflow,
    pub provenance: EnsembleProvenance,
    pub det: Vec<PointForecast>,
}

/// Which part of an assembled inflow came through the upstream gauge's
/// rating (`gauge_rated`: the gauge reports stage).
pub(super) fn rated_part(gauge_rated: bool, p: &assemble::Provenance) -> RatedInflow {
    match (gauge_rated, p.observed_to) {
        (false, _) | (true, None) => RatedInflow::None,
        (true, Some(until)) if p.source_beyond_now == Source::Upload => {
            RatedInflow::Observed { until }
        }
        (true, Some(_)) => RatedInflow::Whole,
    }
}

/// The upload's extra traces, each joined to the observations as its main
/// series was; none unless the main series' assembly used the upload (a
/// run that extrapolates past an ended upload perturbs that instead).
pub(super) fn assemble_traces(
    inputs: &TraceInputs<'_>,
    main: &assemble::Provenance,
    traces: &Traces,
) -> Result<Vec<Hydrograph>, String> {
    let Some(upload) = inputs
        .upload
        .filter(|_| main.source_beyond_now == Source::Upload)
    else {
        return Ok(Vec::new());
    };
    traces
        .iter()
        .map(|t| {
            let one = assemble::Upload {
                series: t.series.clone(),
                ..upload.clone()
            };
            assemble::assemble(
                inputs.now,
                inputs.readings,
                inputs.basis,
                Some(&one),
                inputs.rules,
            )
            .map(|a| a.series)
            .map_err(|e| format!("inflow trace `{}`: {e}", t.name))
        })
        .collect()
}

/// What the main series was assembled from.
pub(super) struct TraceInputs<'a> {
    pub now: DateTime<Utc>,
    pub readings: &'a [assemble::Reading],
    pub basis: &'a assemble::GaugeBasis,
    pub upload: Option<&'a assemble::Upload>,
    pub rules: &'a assemble::Rules,
}

impl Forecaster {
    /// The prepared tables of a reach version: built once (on the calling
    /// thread, which is a blocking one) and kept while it is the newest.
    pub(super) fn prepared(&self, reach: &ReachVersion) -> Result<Arc<Prepared>, RunError> {
        let cache = &self.inner.prepared;
        if let Ok(c) = cache.lock()
            && let Some((v, p)) = c.get(&reach.reach_id)
            && *v == reach.version
        {
            return Ok(p.clone());
        }
        let built = Arc::new(Prepared::new(&reach.spec)?);
        if let Ok(mut c) = cache.lock() {
            c.insert(reach.reach_id.clone(), (reach.version, built.clone()));
        }
        Ok(built)
    }

    /// Routes the ensemble of run `run_id` and attaches it. `None` when it
    /// could not be stored; a failed ensemble is stored as failed.
    pub(super) async fn ensemble(&self, run_id: i64, job: EnsembleJob) -> Option<EnsembleRecord> {
        let joined = tokio::task::spawn_blocking(move || {
            let started = Instant::now();
            let traces = match &job.traces {
                Ok(t) => t.as_slice(),
                Err(e) => return (Err(RunError::Routing(e.clone())), 0.0),
            };
            let input = EnsembleInput {
                spec: &job.reach.spec,
                settings: &job.provenance.settings,
                prepared: &job.prepared,
                inflow: &job.inflow,
                traces,
                issued: job.issued,
                rated: job.rated,
                seed: job.provenance.seed,
                method: None,
            };
            let out = run_ensemble(&input, &job.det);
            (out, started.elapsed().as_secs_f64())
        })
        .await;
        let record = match joined {
            Ok((Ok(Some(summary)), wall_time_s)) => EnsembleRecord::Ready {
                summary,
                wall_time_s,
            },
            Ok((Ok(None), _)) => return None,
            Ok((Err(e), wall_time_s)) => EnsembleRecord::Failed {
                error: e.to_string(),
                wall_time_s,
            },
            Err(e) => EnsembleRecord::Failed {
                error: format!("ensemble task failed: {e}"),
                wall_time_s: 0.0,
            },
        };
        match self.inner.store.attach_ensemble(run_id, &record).await {
            Ok(true) => Some(record),
            Ok(false) => None,
            Err(e) => {
                tracing::warn!(run_id, error = %e, "cannot store the run's ensemble; its deterministic forecast stays served");
                None
            }
        }
    }
}

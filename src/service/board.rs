//! The exceedance board: the situation of every (point, level) at the
//! latest good run of each reach, rebuilt when a run lands. Alerting
//! clients poll it often; it changes only when a run lands, so the API
//! serves it from a cache keyed by the board's version.

use std::collections::HashMap;

use chrono::{DateTime, Utc};

use super::Forecaster;
use crate::{
    forecast::{
        cap::{RunContext, Situation},
        ensemble::summary::EnsembleSummary,
        record::{EnsembleRecord, RunProvenance, RunRecord, StoredResults},
    },
    store::ReachVersion,
};

/// The current situations of every reach.
#[derive(Debug, Default)]
pub struct Board {
    by_reach: HashMap<String, Vec<Situation>>,
}

impl Board {
    /// Every situation, by reach id, points in the run's (chainage) order.
    pub fn situations(&self) -> Vec<Situation> {
        let mut keys: Vec<&String> = self.by_reach.keys().collect();
        keys.sort();
        keys.into_iter()
            .flat_map(|k| self.by_reach[k].iter().cloned())
            .collect()
    }
}

/// A good run as the board needs it.
#[derive(Debug, Clone, Copy)]
pub struct GoodRun<'a> {
    pub id: i64,
    pub finished: DateTime<Utc>,
    pub provenance: &'a RunProvenance,
    pub results: &'a StoredResults,
    /// The run's ensemble, once attached.
    pub ensemble: Option<&'a EnsembleSummary>,
}

impl<'a> GoodRun<'a> {
    /// A stored run, if it has results.
    pub fn of(run: &'a RunRecord) -> Option<Self> {
        Some(GoodRun {
            id: run.id,
            finished: run.finished_at.unwrap_or_else(Utc::now),
            provenance: &run.provenance,
            results: run.results.as_ref()?,
            ensemble: run.ensemble.as_ref().and_then(EnsembleRecord::summary),
        })
    }
}

/// The situations of a good run, seen from the time it finished: one per
/// point and level (a point whose forecast cannot be read gives none).
pub fn situations_of(reach: &ReachVersion, run: GoodRun<'_>) -> Vec<Situation> {
    let (results, finished) = (run.results, run.finished);
    let ctx = RunContext {
        reach_id: reach.reach_id.clone(),
        reach_name: reach.spec.name.clone(),
        run_id: run.id,
        run_finished: finished,
        stale: run.provenance.inflow_stale(),
    };
    let floor = run
        .provenance
        .ensemble
        .as_ref()
        .map(|e| e.settings.alert_probability_floor);
    results
        .points
        .iter()
        .flat_map(|p| {
            p.levels
                .iter()
                .filter_map(|t| {
                    let mut s = Situation::from_forecast(&ctx, p, t, finished).ok()?;
                    s.chance = run.ensemble.and_then(|e| e.chance(&p.id, &t.id));
                    s.alert_floor = s.chance.and(floor);
                    Some(s)
                })
                .collect::<Vec<_>>()
        })
        .collect()
}

impl Forecaster {
    /// Rebuilds the board of `reach` from `run` and returns the run's
    /// situations, which CAP planning uses.
    pub(super) fn refresh_board(&self, reach: &ReachVersion, run: GoodRun<'_>) -> Vec<Situation> {
        let situations = situations_of(reach, run);
        if let Ok(mut board) = self.inner.board.write() {
            board
                .by_reach
                .insert(reach.reach_id.clone(), situations.clone());
        }
        self.inner.board_version.send_modify(|v| *v += 1);
        situations
    }
}

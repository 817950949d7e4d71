//! Ensemble forecasts: many runs of one reach with perturbed inputs, and
//! what they say together at each point (percentile traces, the crest
//! range, the chance of each level).
//!
//! A member is the deterministic run with its inflow's rise scaled and
//! shifted in time ([`perturb`]), every Manning's n scaled and the rated
//! discharges scaled ([`design::Member`]), the factors drawn by Latin
//! hypercube sampling from the run's seed ([`design`]) with the spreads of
//! the reach's `ensemble` section ([`spec`]). Members route on the reach's
//! prepared tables ([`crate::forecast::run::Prepared`]) in parallel
//! ([`rayon`]); the summary ([`summary`]) keeps only what is served.
//!
//! When the forecaster's upload carries extra inflow traces, the main
//! series and every trace are the inflow scenarios, equally likely, in
//! place of the inflow perturbation: member k routes scenario k mod S
//! with its own Manning's n and rating factors.
//!
//! Pure: no I/O, no clock. The caller runs it off the async runtime.

pub mod design;
pub mod perturb;
pub mod quantile;
pub mod rng;
pub mod spec;
pub mod summary;

use chrono::{DateTime, Utc};
use rayon::prelude::*;

use super::{
    hydrograph::Hydrograph,
    run::{Adjust, PointForecast, Prepared, RunError, run_prepared},
    spec::{Method, ReachSpec},
};
use design::{Member, design};
use perturb::{RatedInflow, member_inflow};
pub use spec::EnsembleSpec;
use summary::{EnsembleSummary, MemberSource, MemberTraces, node_crest_band, summarise};

/// More than this share of failed members and the ensemble is not served:
/// the rest would be a biased sample (the failures are the extreme ones).
pub const MAX_FAILED_SHARE: f64 = 0.1;

/// What an ensemble is run from.
#[derive(Debug, Clone, Copy)]
pub struct EnsembleInput<'a> {
    pub spec: &'a ReachSpec,
    /// The ensemble settings in force (the reach's, members possibly
    /// limited by the service).
    pub settings: &'a EnsembleSpec,
    pub prepared: &'a Prepared,
    /// The deterministic run's inflow.
    pub inflow: &'a Hydrograph,
    /// The upload's extra traces, each assembled as `inflow` was; empty
    /// to perturb `inflow` instead.
    pub traces: &'a [Hydrograph],
    /// Its issue time: the rise after it is perturbed, and probabilities
    /// are seen from it.
    pub issued: DateTime<Utc>,
    pub rated: RatedInflow,
    pub seed: u64,
    pub method: Option<Method>,
}

/// Routes the members of `input` and summarises them around the
/// deterministic run's points `det` (routed from the same input).
/// `Ok(None)` when the ensemble is off (no members).
pub fn run_ensemble(
    input: &EnsembleInput<'_>,
    det: &[PointForecast],
) -> Result<Option<EnsembleSummary>, RunError> {
    let spec = input.settings;
    if spec.members == 0 {
        return Ok(None);
    }
    let (settings, source) = if input.traces.is_empty() {
        (spec.clone(), MemberSource::Perturbed)
    } else {
        (spec.for_traces(), MemberSource::Traces)
    };
    let members = design(&settings, input.seed);
    let routed: Vec<Result<MemberTraces, RunError>> = members
        .par_iter()
        .enumerate()
        .map(|(k, m)| member_traces(input, scenario(input, k), m))
        .collect();
    let total = routed.len();
    let ok: Vec<MemberTraces> = routed.into_iter().filter_map(Result::ok).collect();
    let failed = total - ok.len();
    if ok.is_empty() || failed as f64 > MAX_FAILED_SHARE * total as f64 {
        return Err(RunError::Routing(format!(
            "{failed} of {total} ensemble members failed to route"
        )));
    }
    Ok(Some(EnsembleSummary {
        members: ok.len(),
        failed_members: failed,
        source,
        seed: input.seed,
        issued: input.issued,
        percentiles: spec.percentiles.clone(),
        points: summarise(det, &ok, input.issued, &spec.percentiles),
        node_crest: node_crest_band(&ok, &spec.percentiles),
    }))
}

/// The inflow scenario of member `k`: the main series, then each trace in
/// turn.
fn scenario<'a>(input: &EnsembleInput<'a>, k: usize) -> &'a Hydrograph {
    match k % (1 + input.traces.len()) {
        0 => input.inflow,
        s => &input.traces[s - 1],
    }
}

/// One member's stage traces at the points (the rest of its output is
/// dropped at once, so a large ensemble does not hold every node's trace).
fn member_traces(
    input: &EnsembleInput<'_>,
    scenario: &Hydrograph,
    m: &Member,
) -> Result<MemberTraces, RunError> {
    let inflow = member_inflow(scenario, input.issued, m, input.rated);
    let adjust = Adjust {
        manning: m.manning,
        rating: m.rating,
    };
    let out = run_prepared(input.spec, input.prepared, &inflow, input.method, adjust)?;
    let rows = &out.node_rows;
    // From the last output instant at or before the issue time on, as the
    // profile's envelope is read.
    let from = rows
        .times
        .partition_point(|t| *t <= input.issued)
        .saturating_sub(1);
    let node_crest = (0..rows.chainage.len())
        .map(|j| {
            rows.stage[from..]
                .iter()
                .map(|row| row[j])
                .fold(f64::NEG_INFINITY, f64::max)
        })
        .collect();
    Ok(MemberTraces {
        points: out.points.into_iter().map(|p| p.stage).collect(),
        node_crest,
    })
}

#[cfg(test)]
mod tests;

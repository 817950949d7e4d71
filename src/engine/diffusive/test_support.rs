//! Inputs shared by the diffusive solver's unit tests.

use super::{DownstreamBoundary, InitialState, Options, Problem, Reach, RoutingResult};
use crate::engine::props::Hydraulics;
use crate::engine::series::Series;

/// A gamma-shaped flood from `base` to `peak` at `t_peak`, sampled over
/// `dur` seconds.
pub(super) fn hydrograph(base: f64, peak: f64, t_peak: f64, dur: f64) -> Series {
    let t: Vec<f64> = (0..=40).map(|i| i as f64 * dur / 40.0).collect();
    let v = t
        .iter()
        .map(|&ti| {
            let r = (ti / t_peak).max(1e-12);
            // Gamma-shaped hydrograph: (r e^{1−r})^4.
            base + (peak - base) * (r * (1.0 - r).exp()).powi(4)
        })
        .collect();
    Series::new(t, v).expect("valid")
}

/// A run from a steady start at t = 0 with default options and no laterals.
pub(super) fn problem<'a, H: Hydraulics>(
    reach: Reach<'a, H>,
    upstream: Series,
    downstream: DownstreamBoundary,
    out: Vec<f64>,
) -> Problem<'a, H> {
    Problem {
        reach,
        upstream,
        downstream,
        laterals: vec![],
        initial: InitialState::Steady,
        start_time: 0.0,
        output_times: out,
        options: Options::default(),
    }
}

/// [`problem`] with a normal-depth outlet at `friction_slope` and output
/// every hour for `hours` hours.
pub(super) fn normal_depth_problem<'a, H: Hydraulics>(
    reach: Reach<'a, H>,
    upstream: Series,
    friction_slope: f64,
    hours: usize,
) -> Problem<'a, H> {
    problem(
        reach,
        upstream,
        DownstreamBoundary::NormalDepth { friction_slope },
        hourly(hours),
    )
}

/// Output every hour for `hours` hours, the start included.
pub(super) fn hourly(hours: usize) -> Vec<f64> {
    (0..=hours).map(|h| h as f64 * 3600.0).collect()
}

/// No NaN or infinity anywhere in the stages, discharges and final state.
pub(super) fn all_finite(r: &RoutingResult) -> bool {
    r.stage
        .iter()
        .chain(r.discharge.iter())
        .flatten()
        .all(|v| v.is_finite())
        && r.final_state.iter().all(|v| v.is_finite())
}

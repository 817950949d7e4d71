//! Calibration: the Manning's n multipliers of a reach that make its
//! modelled stage at one point of interest best match what that point's
//! gauge observed, for a given upstream inflow.
//!
//! The objective is the sum of squared stage errors over a fit window
//! (the same minimum as the RMSE's). With surveyed overbanks whose n the
//! fit window's stages depend on, the channel and floodplain multipliers
//! are fitted together by bounded Nelder–Mead; otherwise the channel
//! multiplier alone by golden-section search, and the result says why.
//! RMSE and Nash–Sutcliffe efficiency are reported before and after, on
//! the fit window and on a held-out window the fit never saw.
//!
//! Pure: the offline `calibrate` command reads the files, and applying the
//! proposal is a forecaster's reach edit (a new, audited reach version).

pub mod objective;
pub mod observed;
pub mod optimise;
pub mod report;
pub mod window;

#[cfg(test)]
mod tests;

use chrono::{DateTime, Utc};
use serde::Serialize;

use crate::engine::section::SectionGeometry;

use super::{
    hydrograph::Hydrograph,
    multipliers::{LIMITS, RoughnessMultipliers},
    run::RunError,
    spec::ReachSpec,
    verify::scores,
};
use objective::{Modelled, modelled, sse};
use optimise::{Bounds2, Stop, golden_section, nelder_mead};
use window::Window;

/// A stage change (m) at the point below which the floodplain's n is
/// taken as not seen by the fit window: under a typical gauge's
/// resolution and noise (common practice: stage is read to the
/// centimetre).
pub const SENSITIVITY_M: f64 = 0.01;

/// How finely the multipliers are fitted; the proposal is rounded to it.
pub const TOLERANCE: f64 = 1e-3;

/// At most this many routings in a two-parameter fit.
const MAX_EVALUATIONS: usize = 80;

/// What to calibrate against.
#[derive(Debug, Clone, Copy)]
pub struct Problem<'a> {
    pub spec: &'a ReachSpec,
    /// The upstream inflow over both windows (and a warm-up before them).
    pub inflow: &'a Hydrograph,
    /// Observed stage at the point, oldest first.
    pub observed: &'a [(DateTime<Utc>, f64)],
    /// The point of interest's id.
    pub point: &'a str,
    pub fit: Window,
    pub held_out: Window,
    /// Smallest and largest multiplier tried.
    pub bounds: (f64, f64),
}

/// Which multipliers were fitted.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Fitted {
    /// Channel and floodplain, each its own.
    Separately,
    /// The channel's alone; the floodplain's kept as it was, for `reason`.
    ChannelOnly { reason: String },
}

/// Scores of one set of multipliers on one window.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Skill {
    pub pairs: usize,
    pub rmse: Option<f64>,
    pub nse: Option<f64>,
}

/// One set of multipliers and its scores on both windows.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Scored {
    pub multipliers: RoughnessMultipliers,
    pub fit: Skill,
    pub held_out: Skill,
}

/// A calibration's result: a proposal for a forecaster to review.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Calibration {
    pub point: String,
    pub fit_window: Window,
    pub held_out_window: Window,
    pub fitted: Fitted,
    /// The reach's own multipliers.
    pub before: Scored,
    /// The fitted ones, rounded to [`TOLERANCE`].
    pub after: Scored,
    /// Routing runs made.
    pub evaluations: usize,
    /// The reach description with the fitted multipliers.
    pub proposed: ReachSpec,
}

/// Why a calibration could not be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CalibrateError {
    #[error("the reach has no point of interest with id `{0}`")]
    NoPoint(String),
    #[error("{0}")]
    Setup(String),
    #[error("no observation in the {0} window falls inside the routed period")]
    NoPairs(&'static str),
    #[error(transparent)]
    Run(#[from] RunError),
}

/// Fits the multipliers and scores them against the reach's own.
pub fn calibrate(p: &Problem<'_>) -> Result<Calibration, CalibrateError> {
    check_setup(p)?;
    let start = p.spec.roughness;
    let base = trace(p, start)?;
    let before = score(p, start, &base)?;
    let (fitted, trial_runs) = separability(p, start, &base)?;
    // The base run, the separability trial, then the minimiser's.
    let mut evaluations = 1 + trial_runs;
    let mut objective = |m: RoughnessMultipliers| {
        evaluations += 1;
        match modelled(p.spec, p.inflow, m, p.point) {
            Ok(Some(t)) => sse(&t.pairs(p.observed, p.fit)),
            // A candidate the solver cannot route is no candidate.
            _ => f64::INFINITY,
        }
    };
    let best = fit(p, start, &fitted, &mut objective);
    let after_m = rounded(best);
    let after = score(p, after_m, &trace(p, after_m)?)?;
    Ok(Calibration {
        point: p.point.to_owned(),
        fit_window: p.fit,
        held_out_window: p.held_out,
        fitted,
        before,
        after,
        evaluations: evaluations + 1,
        proposed: ReachSpec {
            roughness: after_m,
            ..p.spec.clone()
        },
    })
}

fn check_setup(p: &Problem<'_>) -> Result<(), CalibrateError> {
    let (lo, hi) = p.bounds;
    if !(lo.is_finite() && hi.is_finite() && LIMITS.0 <= lo && lo < hi && hi <= LIMITS.1) {
        return Err(CalibrateError::Setup(format!(
            "the bounds must satisfy {} ≤ lower < upper ≤ {}, got {lo} and {hi}",
            LIMITS.0, LIMITS.1
        )));
    }
    if p.fit.overlaps(&p.held_out) {
        return Err(CalibrateError::Setup(
            "the fit and held-out windows overlap: a held-out score must come from \
             observations the fit never saw"
                .to_owned(),
        ));
    }
    Ok(())
}

fn trace(p: &Problem<'_>, m: RoughnessMultipliers) -> Result<Modelled, CalibrateError> {
    modelled(p.spec, p.inflow, m, p.point)?
        .ok_or_else(|| CalibrateError::NoPoint(p.point.to_owned()))
}

fn skill(pairs: &[(f64, f64)]) -> Skill {
    Skill {
        pairs: pairs.len(),
        rmse: scores::rmse(pairs),
        nse: scores::nse(pairs),
    }
}

fn score(p: &Problem<'_>, m: RoughnessMultipliers, t: &Modelled) -> Result<Scored, CalibrateError> {
    let fit = t.pairs(p.observed, p.fit);
    let held = t.pairs(p.observed, p.held_out);
    if fit.is_empty() {
        return Err(CalibrateError::NoPairs("fit"));
    }
    if held.is_empty() {
        return Err(CalibrateError::NoPairs("held-out"));
    }
    Ok(Scored {
        multipliers: m,
        fit: skill(&fit),
        held_out: skill(&held),
    })
}

/// Whether the data can tell the floodplain's n from the channel's: the
/// sections must have overbanks, and the fit window's modelled stage must
/// move by [`SENSITIVITY_M`] when the floodplain's n changes by half.
fn separability(
    p: &Problem<'_>,
    start: RoughnessMultipliers,
    base: &Modelled,
) -> Result<(Fitted, usize), CalibrateError> {
    let surveyed = p
        .spec
        .all_sections()
        .any(|s| matches!(s.geometry, SectionGeometry::StationElevation { .. }));
    if !surveyed {
        let reason = "every section is a trapezoid with one n, all channel".to_owned();
        return Ok((Fitted::ChannelOnly { reason }, 0));
    }
    let f = start.floodplain;
    let moved = if f * 1.5 <= p.bounds.1 {
        f * 1.5
    } else {
        f / 1.5
    };
    let trial = trace(
        p,
        RoughnessMultipliers {
            floodplain: moved,
            ..start
        },
    )?;
    let change = base
        .pairs(p.observed, p.fit)
        .iter()
        .zip(trial.pairs(p.observed, p.fit))
        .map(|(a, b)| (a.0 - b.0).abs())
        .fold(0.0, f64::max);
    let fitted = if change < SENSITIVITY_M {
        Fitted::ChannelOnly {
            reason: format!(
                "in the fit window the stage at the point moves by at most {change:.3} m when \
                 the floodplain's n changes by half: the water stays in the channel, so the \
                 data cannot tell the floodplain's n"
            ),
        }
    } else {
        Fitted::Separately
    };
    Ok((fitted, 1))
}

/// The minimiser's answer, starting from the reach's own multipliers.
fn fit(
    p: &Problem<'_>,
    start: RoughnessMultipliers,
    fitted: &Fitted,
    objective: &mut impl FnMut(RoughnessMultipliers) -> f64,
) -> RoughnessMultipliers {
    let (lo, hi) = p.bounds;
    match fitted {
        Fitted::ChannelOnly { .. } => {
            let found = golden_section(
                |c| {
                    objective(RoughnessMultipliers {
                        channel: c,
                        ..start
                    })
                },
                lo,
                hi,
                TOLERANCE,
            );
            RoughnessMultipliers {
                channel: found.x,
                ..start
            }
        }
        Fitted::Separately => {
            let found = nelder_mead(
                |[c, f]| {
                    objective(RoughnessMultipliers {
                        channel: c,
                        floodplain: f,
                    })
                },
                [start.channel, start.floodplain],
                0.1,
                Bounds2 {
                    lo: [lo; 2],
                    hi: [hi; 2],
                },
                Stop {
                    size: TOLERANCE,
                    max_evaluations: MAX_EVALUATIONS,
                },
            );
            RoughnessMultipliers {
                channel: found.x[0],
                floodplain: found.x[1],
            }
        }
    }
}

fn rounded(m: RoughnessMultipliers) -> RoughnessMultipliers {
    // Divided, not multiplied by TOLERANCE, so 0.83 prints as 0.83.
    let r = |x: f64| (x / TOLERANCE).round() / TOLERANCE.recip();
    RoughnessMultipliers {
        channel: r(m.channel),
        floodplain: r(m.floodplain),
    }
}

//! One θ-step of the whole network by Newton's method: all channels and
//! junctions in one system, solved by bordered elimination, with the
//! single-channel solver's safeguards (update capped at 2 m, stages kept
//! at least `MIN_DEPTH` above the bed).

use super::layout::Layout;
use super::topology::Channel;
use super::work::{Work, assemble, evaluate};
use crate::engine::diffusive::newton::{NEWTON_STEP_CAP, StepFailure};
use crate::engine::diffusive::{DownstreamBoundary, FailureReason, Options};
use crate::engine::props::Hydraulics;

/// What one step solves for besides the stages: its length, time
/// weighting and the imposed outlet stage (stage boundaries only). The
/// inflows and laterals at the new level are already in `w.q_in`, `w.lat`.
#[derive(Debug, Clone, Copy)]
pub(super) struct Level {
    pub(super) dt: f64,
    pub(super) theta: f64,
    pub(super) stage: Option<f64>,
}

/// The global node with the largest share in unknown `u` (for error
/// reports): the first node mapped to it.
fn node_of(lay: &Layout, u: usize) -> usize {
    lay.unknown.iter().position(|&v| v == u).unwrap_or(0)
}

/// One θ-step from the old level in `w`. On success `w.x` holds the new
/// stages, `w` is evaluated there (face derivatives stale) and the
/// iteration count is returned.
pub(super) fn newton_step<H: Hydraulics>(
    channels: &[Channel<'_, H>],
    lay: &Layout,
    b: &DownstreamBoundary,
    o: &Options,
    lvl: Level,
    w: &mut Work,
) -> Result<usize, StepFailure> {
    let nonfinite = |node| StepFailure {
        node,
        reason: FailureReason::NonFinite,
    };
    let u_out = lay.unknown[lay.outlet_node];
    for u in 0..lay.unknowns() {
        w.x[u] = (w.x_old[u] + lvl.dt * w.rate[u]).max(lay.floor[u]);
    }
    if let Some(s) = lvl.stage {
        w.x[u_out] = s;
    }
    let mut worst = 0;
    for iter in 1..=o.max_newton_iter {
        evaluate::<_, true>(channels, lay, o.slope_regularisation, w).map_err(nonfinite)?;
        assemble(b, lay, (lvl.dt, lvl.theta), lvl.stage.is_some(), w);
        if let Some(s) = lvl.stage {
            impose_stage(lay, w, s);
        }
        w.sys.solve(&mut w.rhs).map_err(|u| StepFailure {
            node: node_of(lay, u),
            reason: FailureReason::SingularJacobian,
        })?;
        let mut max_dz = 0.0_f64;
        for (u, &d) in w.rhs.iter().enumerate() {
            if !d.is_finite() {
                return Err(nonfinite(node_of(lay, u)));
            }
            if d.abs() > max_dz {
                max_dz = d.abs();
                worst = u;
            }
        }
        let scale = if max_dz > NEWTON_STEP_CAP {
            NEWTON_STEP_CAP / max_dz
        } else {
            1.0
        };
        for u in 0..lay.unknowns() {
            w.x[u] = (w.x[u] + scale * w.rhs[u]).max(lay.floor[u]);
        }
        if max_dz <= o.newton_tol {
            evaluate::<_, false>(channels, lay, o.slope_regularisation, w).map_err(nonfinite)?;
            return Ok(iter);
        }
    }
    Err(StepFailure {
        node: node_of(lay, worst),
        reason: FailureReason::NewtonNotConverged,
    })
}

/// Replace the outlet node's equation by `z = s` (the outlet is always an
/// own node, never a junction).
fn impose_stage(lay: &Layout, w: &mut Work, s: f64) {
    let u = lay.unknown[lay.outlet_node];
    let sys = &mut w.sys;
    sys.lower[u] = 0.0;
    sys.upper[u] = 0.0;
    sys.diag[u] = 1.0;
    if let Some((c, _)) = sys
        .blocks()
        .iter()
        .enumerate()
        .find(|(_, bl)| bl.len > 0 && bl.start == u && bl.up.is_some())
    {
        sys.c_up[c] = 0.0;
    }
    w.rhs[u] = s - w.x[u];
}

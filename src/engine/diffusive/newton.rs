//! One θ-step by Newton's method: the residuals of every control volume's
//! continuity equation, their tridiagonal Jacobian, and the damped update
//! of the stages.

use super::MIN_DEPTH;
use super::flux::boundary_outflow;
use super::problem::{DownstreamBoundary, Options};
use super::state::{Geometry, Work, evaluate, net_inflow};
use super::tridiagonal::solve_tridiagonal;
use crate::engine::props::Hydraulics;
use crate::engine::routing::FailureReason;

/// Lower bound on the storage width used in the Jacobian only (m), so a
/// dry node with a zero-width bed keeps a non-singular Newton matrix. It does
/// not change the converged solution.
const JACOBIAN_WIDTH_FLOOR: f64 = 0.01;
/// Largest stage change one Newton iteration may make (m); larger updates
/// are scaled down, which keeps the first iterations of a big step from
/// overshooting into dry or absurd states.
const NEWTON_STEP_CAP: f64 = 2.0;

/// Why and where a step failed.
pub(super) struct StepFailure {
    pub(super) node: usize,
    pub(super) reason: FailureReason,
}

/// Boundary values at the new time level.
pub(super) struct NewLevel {
    pub(super) dt: f64,
    pub(super) q_up: f64,
    /// Imposed downstream stage, for stage boundaries.
    pub(super) stage: Option<f64>,
}

/// One θ-step by Newton. On success `w.z` holds the new state and the
/// return value is the number of iterations; `w.props`/`w.q_face` are then
/// evaluated at the new state.
pub(super) fn newton_step<H: Hydraulics>(
    nodes: &[H],
    g: &Geometry,
    b: &DownstreamBoundary,
    o: &Options,
    lvl: &NewLevel,
    w: &mut Work,
) -> Result<usize, StepFailure> {
    let n = nodes.len();
    let (theta, dt) = (o.theta, lvl.dt);
    let dtt = dt * theta;
    // Start from the old state extrapolated with the last step's rate (a
    // linear predictor saves about one Newton iteration per step on a
    // smooth flood), with the imposed stage already in place.
    for i in 0..n {
        w.z[i] = (w.z_old[i] + dt * w.rate[i]).max(g.bed[i] + MIN_DEPTH);
    }
    if let Some(s) = lvl.stage {
        w.z[n - 1] = s;
    }
    let mut worst = 0;
    for iter in 1..=o.max_newton_iter {
        evaluate(nodes, g, o.slope_regularisation, w).map_err(|node| StepFailure {
            node,
            reason: FailureReason::NonFinite,
        })?;
        for i in 0..n {
            let p = w.props[i];
            let mut net = net_inflow(w, i, lvl.q_up);
            let mut d_self = 0.0;
            w.lower[i] = 0.0;
            w.upper[i] = 0.0;
            if i > 0 {
                d_self += w.dq_b[i - 1];
                w.lower[i] = -dtt * w.dq_a[i - 1];
            }
            if i + 1 < n {
                d_self -= w.dq_a[i];
                w.upper[i] = dtt * w.dq_b[i];
            } else if lvl.stage.is_none() {
                let (qo, dqo) = boundary_outflow(b, &p, g.bed[i]);
                net -= qo;
                d_self -= dqo;
            }
            let residual = p.storage_area * g.length[i]
                - w.v_old[i]
                - dt * (theta * net + (1.0 - theta) * w.f_old[i]);
            w.rhs[i] = -residual;
            w.diag[i] = p.storage_top_width.max(JACOBIAN_WIDTH_FLOOR) * g.length[i] - dtt * d_self;
        }
        if let Some(s) = lvl.stage {
            w.lower[n - 1] = 0.0;
            w.diag[n - 1] = 1.0;
            w.rhs[n - 1] = s - w.z[n - 1];
        }
        solve_tridiagonal(&w.lower, &w.diag, &w.upper, &mut w.rhs, &mut w.scratch).map_err(
            |node| StepFailure {
                node,
                reason: FailureReason::SingularJacobian,
            },
        )?;
        let mut max_dz = 0.0_f64;
        for (i, &d) in w.rhs.iter().enumerate() {
            if !d.is_finite() {
                return Err(StepFailure {
                    node: i,
                    reason: FailureReason::NonFinite,
                });
            }
            if d.abs() > max_dz {
                max_dz = d.abs();
                worst = i;
            }
        }
        let scale = if max_dz > NEWTON_STEP_CAP {
            NEWTON_STEP_CAP / max_dz
        } else {
            1.0
        };
        for i in 0..n {
            w.z[i] = (w.z[i] + scale * w.rhs[i]).max(g.bed[i] + MIN_DEPTH);
        }
        if max_dz <= o.newton_tol {
            evaluate(nodes, g, o.slope_regularisation, w).map_err(|node| StepFailure {
                node,
                reason: FailureReason::NonFinite,
            })?;
            return Ok(iter);
        }
    }
    Err(StepFailure {
        node: worst,
        reason: FailureReason::NewtonNotConverged,
    })
}

#[cfg(test)]
mod tests {
    use crate::engine::diffusive::test_support::{hydrograph, normal_depth_problem};
    use crate::engine::diffusive::{FailureReason, Reach, RoutingError, route};
    use crate::engine::props::{Hydraulics, Props};
    use crate::engine::test_sections::Rect;

    /// A section that returns NaN above a certain stage, as a corrupt table
    /// might.
    struct Broken {
        inner: Rect,
        ceiling: f64,
    }

    impl Hydraulics for Broken {
        fn bed_elevation(&self) -> f64 {
            self.inner.bed
        }
        fn props(&self, z: f64) -> Props {
            let mut p = self.inner.props(z);
            if z > self.ceiling {
                p.conveyance = f64::NAN;
            }
            p
        }
    }

    #[test]
    fn nan_from_a_section_is_reported_not_propagated() {
        let x: Vec<f64> = (0..8).map(|i| i as f64 * 100.0).collect();
        let nodes: Vec<Broken> = x
            .iter()
            .map(|&xi| Broken {
                inner: Rect {
                    bed: 10.0 - 1e-3 * xi,
                    width: 10.0,
                    n: 0.035,
                    bank: 5.0,
                },
                ceiling: 10.0 - 1e-3 * xi + 1.5,
            })
            .collect();
        let reach = Reach::new(&x, &nodes).expect("valid");
        // The flood must rise above the 1.5 m "ceiling".
        let p = normal_depth_problem(reach, hydrograph(2.0, 200.0, 3600.0, 7200.0), 1e-3, 2);
        match route(&p) {
            Err(RoutingError::NoConvergence {
                reason: FailureReason::NonFinite,
                ..
            }) => {}
            other => panic!("expected a NonFinite failure, got {other:?}"),
        }
    }
}

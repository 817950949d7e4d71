//! One θ-step by Newton's method: the residuals of every control volume's
//! continuity equation, their tridiagonal Jacobian, and the damped update
//! of the stages.

use super::MIN_DEPTH;
use super::flux::boundary_outflow;
use super::problem::{DownstreamBoundary, Options};
use super::state::{Geometry, Work, evaluate};
use super::tridiagonal::solve_tridiagonal;
use crate::engine::props::Hydraulics;
use crate::engine::routing::FailureReason;

/// Lower bound on the storage width used in the Jacobian only (m), so a
/// dry node with a zero-width bed keeps a non-singular Newton matrix. It does
/// not change the converged solution.
pub(crate) const JACOBIAN_WIDTH_FLOOR: f64 = 0.01;
/// Largest stage change one Newton iteration may make (m); larger updates
/// are scaled down, which keeps the first iterations of a big step from
/// overshooting into dry or absurd states.
pub(crate) const NEWTON_STEP_CAP: f64 = 2.0;

/// Why and where a step failed.
pub(crate) struct StepFailure {
    pub(crate) node: usize,
    pub(crate) reason: FailureReason,
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
///
/// `theta` is the time weighting of this solve: [`Options::theta`] for the
/// θ-method, ½ and 1 for the two stages of TR-BDF2 (whose second stage
/// puts its history terms into `w.v_old`).
pub(super) fn newton_step<H: Hydraulics>(
    nodes: &[H],
    g: &Geometry,
    b: &DownstreamBoundary,
    o: &Options,
    theta: f64,
    lvl: &NewLevel,
    w: &mut Work,
) -> Result<usize, StepFailure> {
    let n = nodes.len();
    let dt = lvl.dt;
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
        evaluate::<_, true>(nodes, g, o.slope_regularisation, w).map_err(|node| StepFailure {
            node,
            reason: FailureReason::NonFinite,
        })?;
        assemble(g, b, lvl, theta, w);
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
            // Only the discharges and properties are needed from here on.
            evaluate::<_, false>(nodes, g, o.slope_regularisation, w).map_err(|node| {
                StepFailure {
                    node,
                    reason: FailureReason::NonFinite,
                }
            })?;
            return Ok(iter);
        }
    }
    Err(StepFailure {
        node: worst,
        reason: FailureReason::NewtonNotConverged,
    })
}

/// The Newton system at the current evaluation: `w.rhs` = −residual of
/// every control volume's θ-weighted continuity equation, and the
/// tridiagonal Jacobian in `w.lower`, `w.diag`, `w.upper`.
///
/// The end nodes are written out on their own so the interior loop has no
/// branch; every node's arithmetic is the same, in the same order, as a
/// single loop with the end cases inside would do (bench `engine` checks
/// the results bit for bit).
fn assemble(g: &Geometry, b: &DownstreamBoundary, lvl: &NewLevel, theta: f64, w: &mut Work) {
    let n = w.z.len();
    let dt = lvl.dt;
    let dtt = dt * theta;
    let explicit = 1.0 - theta;
    let row = |w: &mut Work, i: usize, net: f64, d_self: f64| {
        let p = &w.props[i];
        let residual =
            p.storage_area * g.length[i] - w.v_old[i] - dt * (theta * net + explicit * w.f_old[i]);
        w.rhs[i] = -residual;
        w.diag[i] = p.storage_top_width.max(JACOBIAN_WIDTH_FLOOR) * g.length[i] - dtt * d_self;
    };
    // First node: the inflow enters, face 0 leaves.
    w.lower[0] = 0.0;
    w.upper[0] = dtt * w.dq_b[0];
    let net = w.lat_new[0] + lvl.q_up - w.q_face[0];
    row(w, 0, net, -w.dq_a[0]);
    for i in 1..n - 1 {
        w.lower[i] = -dtt * w.dq_a[i - 1];
        w.upper[i] = dtt * w.dq_b[i];
        let net = w.lat_new[i] + w.q_face[i - 1] - w.q_face[i];
        row(w, i, net, w.dq_b[i - 1] - w.dq_a[i]);
    }
    // Last node: face n − 2 enters, the boundary releases (a stage
    // boundary's row is replaced by the caller).
    let last = n - 1;
    w.lower[last] = -dtt * w.dq_a[last - 1];
    w.upper[last] = 0.0;
    let mut net = w.lat_new[last] + w.q_face[last - 1];
    let mut d_self = w.dq_b[last - 1];
    if lvl.stage.is_none() {
        let (qo, dqo) = boundary_outflow(b, &w.props[last], g.bed[last]);
        net -= qo;
        d_self -= dqo;
    }
    row(w, last, net, d_self);
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

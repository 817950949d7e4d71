//! Step control. The implicit scheme is stable at any step, so the step is
//! chosen for Newton's sake and to meet the output times: halved and
//! retried when Newton fails, grown by 1.5 after easy convergences, within
//! [`Options::dt_min`] and [`Options::dt_max`].

use super::newton::StepFailure;
use super::problem::Options;
use crate::engine::routing::RoutingError;

/// The nominal step and the limits it moves within.
pub(crate) struct StepControl {
    /// Step the next attempt would take if no output time intervenes (s).
    dt: f64,
    dt_min: f64,
    dt_max: f64,
    /// Newton iterations at or below which a step counts as easy.
    easy: usize,
    attempts: usize,
    max_steps: usize,
}

impl StepControl {
    pub(crate) fn new(o: &Options) -> Self {
        Self {
            dt: o.dt_initial,
            dt_min: o.dt_min,
            dt_max: o.dt_max,
            easy: (o.max_newton_iter / 3).max(3),
            attempts: 0,
            max_steps: o.max_steps,
        }
    }

    /// Size and end time of the next attempt from `t`, with `pending` the
    /// output times not yet reached (not empty). Counts the attempt against
    /// [`Options::max_steps`].
    pub(crate) fn next(&mut self, t: f64, pending: &[f64]) -> Result<(f64, f64), RoutingError> {
        self.attempts += 1;
        if self.attempts > self.max_steps {
            return Err(RoutingError::TooManySteps {
                limit: self.max_steps,
                time: t,
            });
        }
        let dt_nominal = self.dt;
        let target = pending[0];
        let remaining = target - t;
        // Dense output (outputs closer together than the step the solver
        // would take): step on and interpolate the outputs inside the step
        // rather than shortening every step to land on each of them.
        let dense = pending.len() > 1 && pending[1] - target < dt_nominal;
        Ok(if remaining <= dt_nominal * (1.0 + 1e-9) && dense {
            let last = pending[pending.len() - 1];
            let dt = dt_nominal.min(last - t);
            (dt, if dt == last - t { last } else { t + dt })
        } else if remaining <= dt_nominal * (1.0 + 1e-9) {
            (remaining, target)
        } else if remaining < 2.0 * dt_nominal {
            // Two near-equal steps rather than a full one and a sliver.
            (0.5 * remaining, t + 0.5 * remaining)
        } else {
            (dt_nominal, t + dt_nominal)
        })
    }

    /// The attempt of `dt` from `t` failed: halve the step, or give up with
    /// the place of the failure once it would fall below `dt_min`.
    pub(crate) fn reject(
        &mut self,
        t: f64,
        dt: f64,
        fail: StepFailure,
        chainage: &[f64],
    ) -> Result<(), RoutingError> {
        self.dt = 0.5 * dt;
        if self.dt < self.dt_min {
            return Err(RoutingError::NoConvergence {
                time: t,
                dt,
                node: fail.node,
                chainage: chainage[fail.node.min(chainage.len() - 1)],
                reason: fail.reason,
            });
        }
        Ok(())
    }

    /// Whether `dt` is the smallest step allowed.
    pub(crate) fn at_min(&self, dt: f64) -> bool {
        dt <= self.dt_min * (1.0 + 1e-9)
    }

    /// TR-BDF2: the attempt of `dt` was estimated too inaccurate; retry with
    /// `dt × factor` (factor < 1), not below `dt_min`.
    pub(crate) fn shrink(&mut self, dt: f64, factor: f64) {
        self.dt = (dt * factor).max(self.dt_min);
    }

    /// TR-BDF2: the attempt of `dt` was accepted with the error estimate
    /// asking for `dt × factor` next. A step that was cut short to land on
    /// an output time does not shrink the nominal step when it was easy.
    pub(crate) fn resize(&mut self, dt: f64, factor: f64) {
        let next = if factor >= 1.0 {
            self.dt.max(dt * factor)
        } else {
            dt * factor
        };
        self.dt = next.clamp(self.dt_min, self.dt_max);
    }

    /// The attempt converged in `iterations`: grow the step if that was easy.
    pub(crate) fn accept(&mut self, iterations: usize) {
        if iterations <= self.easy {
            self.dt = (self.dt * 1.5).min(self.dt_max);
        }
    }
}

#[cfg(test)]
mod tests {
    use crate::engine::diffusive::test_support::{hydrograph, normal_depth_problem};
    use crate::engine::diffusive::{FailureReason, Reach, RoutingError, route};
    use crate::engine::test_sections::uniform_rect;

    #[test]
    fn non_convergence_is_a_typed_error_with_location() {
        let (x, nodes) = uniform_rect(11, 100.0, 1e-3, 10.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let mut p = normal_depth_problem(reach, hydrograph(1.0, 300.0, 1800.0, 7200.0), 1e-3, 2);
        // One Newton iteration can never reach 1e-12 m on a rising flood.
        p.options.max_newton_iter = 1;
        p.options.newton_tol = 1e-12;
        p.options.dt_min = 30.0;
        p.options.dt_initial = 60.0;
        match route(&p) {
            Err(RoutingError::NoConvergence {
                node,
                chainage,
                time,
                reason: FailureReason::NewtonNotConverged,
                ..
            }) => {
                assert!(node < 11);
                assert_eq!(chainage, x[node]);
                assert!((0.0..7200.0).contains(&time));
            }
            other => panic!("expected NoConvergence, got {other:?}"),
        }
    }
}

//! One TR-BDF2 step (Bank et al. 1985, from memory): a trapezoid stage
//! from t to t + γΔt, then a BDF2 stage through t, t + γΔt and t + Δt,
//! γ = 2 − √2, on the storage form of continuity, dV/dt = F(z):
//!
//! ```text
//! stage 1:  V_γ − V_n − (γΔt/2)(F_n + F_γ) = 0
//! stage 2:  V_{n+1} − a V_γ + b V_n − c Δt F_{n+1} = 0,
//!           a = 1/(γ(2−γ)), b = (1−γ)²/(γ(2−γ)), c = (1−γ)/(2−γ)
//! ```
//!
//! Each stage is the θ-step's Newton solve: the first with θ = ½ over γΔt,
//! the second with θ = 1 over cΔt and `a V_γ − b V_n` as its old storage.
//! Since a − b = 1, the step moves V_{n+1} − V_n =
//! Δt (F_n + F_γ)/(2(2−γ)) + cΔt F_{n+1}, which is how the volume budget
//! weights the three levels' boundary flows (so it closes to rounding as
//! with the θ-method).
//!
//! Local error (Hosea and Shampine 1996, from memory): the step's error in
//! storage is C Δt³ V''' with |C| = (2 − 4γ + 3γ²)/(12(2−γ)) ≈ 0.0404,
//! and V''' Δt² ≈ 2 F[t, t+γΔt, t+Δt] (the second divided difference of F
//! on the unit-scaled nodes 0, γ, 1), so
//! `e_V = 2 |C| Δt (F_n/γ − F_γ/(γ(1−γ)) + F_{n+1}/(1−γ))`. Divided by the
//! node's storage width times its length it is a stage error (m), checked
//! here against the constant (C = 0.0404 by expanding y = t³/6 through
//! both stages).

use super::forcing::Forcing;
use super::newton::{NewLevel, StepFailure, newton_step};
use super::problem::{DownstreamBoundary, Options};
use super::state::{self, Geometry, Work};
use crate::engine::budget::{Budget, Flows};
use crate::engine::props::Hydraulics;

/// γ = 2 − √2: both stages then share one Jacobian structure and the
/// scheme is L-stable (Bank et al. 1985).
pub(super) const GAMMA: f64 = 2.0 - std::f64::consts::SQRT_2;
/// Weight of V_γ in the BDF2 stage.
const A: f64 = 1.0 / (GAMMA * (2.0 - GAMMA));
/// Weight of V_n in the BDF2 stage.
const B: f64 = (1.0 - GAMMA) * (1.0 - GAMMA) / (GAMMA * (2.0 - GAMMA));
/// Fraction of Δt the BDF2 stage weights F_{n+1} with.
const C: f64 = (1.0 - GAMMA) / (2.0 - GAMMA);
/// |C| of the local error C Δt³ V'''.
const ERROR_CONSTANT: f64 = (2.0 - 4.0 * GAMMA + 3.0 * GAMMA * GAMMA) / (12.0 * (2.0 - GAMMA));
/// Storage width below which the error estimate uses this width (m), as the
/// Jacobian does, so a nearly dry node cannot blow the estimate up.
const WIDTH_FLOOR: f64 = 0.01;

/// What an accepted TR-BDF2 step produced.
pub(super) struct Accepted {
    /// Boundary flows at t + γΔt and at t + Δt.
    pub(super) mid: Flows,
    pub(super) new: Flows,
    /// Newton iterations of both stages.
    pub(super) iterations: usize,
    /// Its estimated stage error (m).
    pub(super) error: f64,
}

/// A step's outcome: accepted, or its estimated error (m) too large (the
/// old level restored in `w`).
pub(super) enum Outcome {
    Accepted(Accepted),
    TooLarge(f64),
}

/// The largest estimated stage error of the step just taken (m), over the
/// nodes whose stage is solved for (not an imposed downstream stage).
fn stage_error(w: &Work, g: &Geometry, dt: f64, imposed: bool) -> f64 {
    let n = w.z.len() - usize::from(imposed);
    let s = &w.saved;
    (0..n)
        .map(|i| {
            let dd =
                s.f[i] / GAMMA - s.f_mid[i] / (GAMMA * (1.0 - GAMMA)) + w.f_old[i] / (1.0 - GAMMA);
            let e_v = 2.0 * ERROR_CONSTANT * dt * dd;
            let width = w.props[i].storage_top_width.max(WIDTH_FLOOR);
            (e_v / (width * g.length[i])).abs()
        })
        .fold(0.0, f64::max)
}

/// Put the old level saved at the start of the step back.
fn restore(w: &mut Work) {
    let s = &w.saved;
    w.z_old.copy_from_slice(&s.z);
    w.v_old.copy_from_slice(&s.v);
    w.f_old.copy_from_slice(&s.f);
    w.rate.copy_from_slice(&s.rate);
    w.lat_old.copy_from_slice(&s.lat);
}

/// Everything one step reads besides the work arrays.
pub(super) struct Context<'a, 'f, H> {
    pub(super) nodes: &'a [H],
    pub(super) g: &'a Geometry,
    pub(super) b: &'a DownstreamBoundary,
    pub(super) o: &'a Options,
    pub(super) forcing: &'a mut Forcing<'f>,
}

/// One TR-BDF2 step of `dt` from `t`. On acceptance `w` holds the new
/// level as after a θ-step (old level rolled forward, properties and
/// discharges at the new stages); otherwise the old level is as it was.
/// At the smallest step (`at_min`) the step is accepted whatever its
/// estimated error, as there is no shorter one to try.
pub(super) fn trbdf2_step<H: Hydraulics>(
    cx: &mut Context<'_, '_, H>,
    (t, dt, at_min): (f64, f64, bool),
    w: &mut Work,
) -> Result<Outcome, StepFailure> {
    let s = &mut w.saved;
    s.z.copy_from_slice(&w.z_old);
    s.v.copy_from_slice(&w.v_old);
    s.f.copy_from_slice(&w.f_old);
    s.rate.copy_from_slice(&w.rate);
    s.lat.copy_from_slice(&w.lat_old);

    // Stage 1: trapezoid to t + γΔt.
    let t_mid = t + GAMMA * dt;
    let mid_level = NewLevel {
        dt: GAMMA * dt,
        q_up: cx.forcing.upstream(t_mid),
        stage: cx.forcing.stage(t_mid),
    };
    cx.forcing.laterals(t_mid, &mut w.lat_new);
    let first = newton_step(cx.nodes, cx.g, cx.b, cx.o, 0.5, &mid_level, w).inspect_err(|_| {
        restore(w);
    })?;
    let mid = state::advance(w, cx.g, cx.b, 0.5, &mid_level);
    w.saved.f_mid.copy_from_slice(&w.f_old);

    // Stage 2: BDF2 to t + Δt, its history a V_γ − b V_n as old storage
    // (θ = 1, so the old net inflow does not enter).
    for (v, &vn) in w.v_old.iter_mut().zip(&w.saved.v) {
        *v = A * *v - B * vn;
    }
    // The predictor extrapolates the first stage's rate to t + Δt.
    let stretch = (1.0 - GAMMA) / C;
    for r in &mut w.rate {
        *r *= stretch;
    }
    let new_level = NewLevel {
        dt: C * dt,
        q_up: cx.forcing.upstream(t + dt),
        stage: cx.forcing.stage(t + dt),
    };
    cx.forcing.laterals(t + dt, &mut w.lat_new);
    let second = newton_step(cx.nodes, cx.g, cx.b, cx.o, 1.0, &new_level, w).inspect_err(|_| {
        restore(w);
    })?;
    let new = state::advance(w, cx.g, cx.b, 1.0, &new_level);
    // The next step's predictor: the whole step's rate.
    for ((r, &z), &z0) in w.rate.iter_mut().zip(&w.z).zip(&w.saved.z) {
        *r = (z - z0) / dt;
    }

    let error = stage_error(w, cx.g, dt, new_level.stage.is_some());
    if error > cx.o.local_error_tol && !at_min {
        restore(w);
        return Ok(Outcome::TooLarge(error));
    }
    Ok(Outcome::Accepted(Accepted {
        mid,
        new,
        iterations: first + second,
        error,
    }))
}

/// Add an accepted step from `old` to the budget with the scheme's weights.
pub(super) fn budget_step(budget: &mut Budget, dt: f64, old: &Flows, a: &Accepted) {
    let w_end = 1.0 / (2.0 * (2.0 - GAMMA));
    budget.step_weighted(dt, &[(w_end, old), (w_end, &a.mid), (C, &a.new)]);
}

/// Factor on the step after an error estimate `error` against `tol`: the
/// error scales as Δt³, with a safety factor of 0.9, and the change kept
/// within [0.2, 2] (common practice).
pub(super) fn step_factor(error: f64, tol: f64) -> f64 {
    if error <= 0.0 {
        return 2.0;
    }
    (0.9 * (tol / error).cbrt()).clamp(0.2, 2.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Both stages on y' = t²/2 (y = t³/6, y''' = 1) from y(0) = 0: the
    /// step's error is C h³ with |C| = ERROR_CONSTANT, and the estimate
    /// 2 |C| h (f0/γ − f_γ/(γ(1−γ)) + f1/(1−γ)) reproduces it (Taylor
    /// expansion; the right-hand side does not depend on y, so each stage is
    /// a quadrature).
    #[test]
    fn error_constant_and_estimate_match_a_cubic() {
        let h = 0.7_f64;
        let f = |t: f64| 0.5 * t * t;
        let y_mid = 0.5 * GAMMA * h * (f(0.0) + f(GAMMA * h));
        let y1 = A * y_mid - B * 0.0 + C * h * f(h);
        let error = (y1 - h.powi(3) / 6.0).abs();
        assert!((error / (ERROR_CONSTANT * h.powi(3)) - 1.0).abs() < 1e-12);
        let dd = f(0.0) / GAMMA - f(GAMMA * h) / (GAMMA * (1.0 - GAMMA)) + f(h) / (1.0 - GAMMA);
        let estimate = 2.0 * ERROR_CONSTANT * h * dd;
        assert!((estimate / error - 1.0).abs() < 1e-12);
        // The BDF2 history weights satisfy a − b = 1 (consistency), and the
        // budget's weights sum to one.
        assert!((A - B - 1.0).abs() < 1e-15);
        assert!((2.0 / (2.0 * (2.0 - GAMMA)) + C - 1.0).abs() < 1e-15);
    }

    #[test]
    fn step_factor_follows_the_third_power_within_limits() {
        assert_eq!(step_factor(0.0, 1e-3), 2.0);
        assert!((step_factor(1e-3, 1e-3) - 0.9).abs() < 1e-12);
        assert!((step_factor(8e-3, 1e-3) - 0.45).abs() < 1e-12);
        assert_eq!(step_factor(1.0, 1e-3), 0.2);
    }
}

//! Implicit diffusive-wave routing: the default forecasting method.
//!
//! # Model
//!
//! The diffusive-wave form of the Saint-Venant equations drops the inertia
//! terms of the momentum equation and keeps the pressure (water-surface
//! slope) and friction terms, so the momentum balance becomes Manning's law
//! with the friction slope equal to the water-surface slope:
//!
//! ```text
//! continuity:  ∂A_s/∂t + ∂Q/∂x = q_lat
//! momentum:    Q = K(z) · sign(S) · √|S|,   S = −∂z/∂x
//! ```
//!
//! Unlike the kinematic wave it carries backwater (a downstream stage
//! boundary is felt upstream) and physical attenuation, and unlike the full
//! dynamic equations it stays well behaved on steep, shallow and drying
//! reaches. It is acceptable when inertia is small, which the Ponce–Li–Simons
//! applicability number in [`Diagnostics`] checks.
//!
//! # Discretisation
//!
//! * Unknowns are water-surface elevations `z_i` at the nodes.
//! * Each node owns a control volume reaching half-way to its neighbours (the
//!   end nodes own half a segment). Its storage is `A_s(z_i) · L_i`: the
//!   section's total wetted area (storage-only zones included) times the
//!   control-volume length.
//! * Between nodes `i` and `i+1` a face carries
//!   `Q = φ · K_f · S / (S² + ε²)^¼` with `S = (z_i − z_{i+1}) / Δx`.
//!   - `K_f = min(½ (K(z_i) + K(z_{i+1})), 2 K_donor)`: the arithmetic mean
//!     of the node conveyances, capped at twice the conveyance of the donor
//!     node (the one with the higher stage; [`DONOR_CAP`]). For a steady
//!     profile the mean makes the face relation a second-order
//!     (trapezoid-like) approximation of `dz/dx = −Q²/K²`, and a face next to
//!     a dry node still conveys water into it (wetting). The cap only acts
//!     where neighbouring conveyances differ more than about twofold (it is
//!     entered through a C¹ blend from 0.8 × cap, and the donor is blended
//!     across S = 0 over |S| < 10 ε, so Newton does not cycle between
//!     branches), typically a thin node at the top of a steep drop (a
//!     riffle): without it that node could pass any discharge on the
//!     strength of its deep neighbour's conveyance while staying nearly dry,
//!     with absurd velocities.
//!   - The `(S² + ε²)^¼` form equals `√|S|` for `|S| ≫ ε` and turns linear
//!     for `|S| ≪ ε`, so `dQ/dz` stays finite at zero slope (where `√|S|`
//!     has an infinite derivative and Newton's method would stall). ε is
//!     [`Options::slope_regularisation`]; the relative change is
//!     `1 − (1 + ε²/S²)^(−¼)`, so at the default 1e-7 the discharge differs
//!     from `√|S|` by under 0.01 % for slopes above 5e-6 and 0.25 % at 1e-6.
//!   - `φ` is a smooth ramp (0 → 1 over [`DRY_RAMP_DEPTH`] above
//!     [`MIN_DEPTH`]) on the depth of the *donor* node (the one with the
//!     higher stage). It stops a nearly dry node from being drained below its
//!     bed, which is what makes wetting and drying work without negative
//!     depths. It is exactly 1 once the donor is a centimetre deep, so it does
//!     not touch normal flows.
//! * Time stepping is the θ-method (θ ∈ [0.55, 1]) by default, or TR-BDF2
//!   ([`TimeScheme::TrBdf2`], module `trbdf2`: two such solves per step and
//!   an error-controlled step); the nonlinear system of
//!   each step is solved by Newton's method whose Jacobian is tridiagonal
//!   (each residual involves a node and its two neighbours), solved by the
//!   Thomas algorithm in O(N). Newton starts from the previous state
//!   extrapolated with the previous step's rate, updates are scaled to at
//!   most 2 m per iteration, and stages are clipped to `bed + MIN_DEPTH`
//!   after each iteration (with the donor ramp the clip is rarely active;
//!   when it is, it shows in the mass balance).
//! * The upstream node receives the inflow hydrograph. The downstream node
//!   either releases a discharge set by its stage (normal depth or a rating)
//!   or has its stage imposed (fixed or series); in the latter case its
//!   outflow is whatever closes that node's continuity equation, so the mass
//!   balance stays exact.
//! * Lateral inflows are point sources into the control volume that contains
//!   their chainage (the upstream one at a tie).
//!
//! # Time step
//!
//! The implicit scheme is stable at any step, so the step is chosen for
//! Newton convergence: it is halved and the step retried when Newton fails or
//! produces a non-finite state, and grown by 1.5 after easy convergences,
//! within [`Options::dt_min`], [`Options::dt_max`]. Steps land exactly on
//! output times that are at least a step apart; outputs closer together than
//! the step are interpolated linearly in time inside it (dense output), so
//! minute-by-minute output does not force minute-long steps. Accuracy is
//! set by `dt_max` (numerical diffusion of the θ-scheme is about
//! (θ − ½) c² Δt, common practice) and the Newton tolerance. With TR-BDF2
//! the step also follows its local error estimate
//! ([`Options::local_error_tol`]): shortened and retried above it, grown
//! (at most twofold, up to `dt_max`) below it.
//!
//! # Inputs outside their range
//!
//! Series are held at their end values outside their sampled range, so output
//! times beyond the end of the inflow forecast are allowed (the last inflow is
//! held). Output times before `start_time` are rejected.
//!
//! # Where things are
//!
//! [`route`] below is the time loop. Its parts: `problem` (the inputs and
//! their checks), `forcing` (boundary values in time), `initial` (steady or
//! hot start, [`steady_profile`]), `flux` (face and boundary discharges),
//! `state` (the solver's arrays and rolling the time level forward),
//! `newton` and `tridiagonal` (one θ-step), `step` (step control) and
//! `output` (dense output). What the kinematic method shares with this one
//! lives outside: the reach, laterals, results and errors in
//! [`crate::engine::routing`], the volume budget in `engine::budget`
//! and the diagnostics and warnings in [`crate::engine::diagnostics`].

pub(crate) mod flux;
mod forcing;
mod initial;
pub(crate) mod newton;
pub(crate) mod output;
pub(crate) mod problem;
mod state;
pub(crate) mod step;
#[cfg(test)]
mod test_support;
#[cfg(test)]
mod tests;
mod trbdf2;
pub(crate) mod tridiagonal;

use crate::engine::budget::Budget;
use crate::engine::diagnostics::{self, MeanState, Method, StepStats, Watch, wave_duration};
use crate::engine::props::Hydraulics;
use crate::engine::routing::check_run_inputs;

pub use crate::engine::diagnostics::{
    DIFFUSION_APPLICABILITY_THRESHOLD, DRY_DEPTH, Diagnostics, FROUDE_STRONG, FROUDE_WARN,
    MASS_BALANCE_WARN_PCT, Warning,
};
pub use crate::engine::routing::{FailureReason, Lateral, Reach, RoutingError, RoutingResult};
pub use initial::steady_profile;
pub use problem::{DownstreamBoundary, InitialState, Options, Problem, TimeScheme};

use forcing::Forcing;
use newton::{NewLevel, newton_step};
use output::DenseOutput;
use problem::{check_boundary, check_options};
use state::{Geometry, Work};
use step::StepControl;
use trbdf2::{Context, Outcome, trbdf2_step};

/// Smallest depth a node is allowed to have (m). Stages are clipped to
/// `bed + MIN_DEPTH` so that no node ever sits below its bed.
pub const MIN_DEPTH: f64 = 1e-4;
/// Depth over which a donor node's outflow ramps from zero to full (m).
pub const DRY_RAMP_DEPTH: f64 = 0.01;
/// The face conveyance is at most this multiple of the donor node's own
/// conveyance: a nearly dry node below a steep drop must not pass a large
/// discharge on the strength of its neighbour's conveyance.
pub const DONOR_CAP: f64 = 2.0;

/// Route the inflow hydrograph through the reach with the implicit
/// diffusive-wave scheme described in the module documentation.
pub fn route<H: Hydraulics>(p: &Problem<'_, H>) -> Result<RoutingResult, RoutingError> {
    let o = &p.options;
    check_options(o)?;
    check_run_inputs(p.start_time, &p.output_times, &p.upstream)?;
    check_boundary(&p.downstream)?;
    let mut forcing = Forcing::new(p)?;
    let (nodes, x) = (p.reach.nodes(), p.reach.chainage());
    let n = nodes.len();
    let g = Geometry::new(&p.reach);
    let b = &p.downstream;
    let t0 = p.start_time;

    let mut w = Work::new(n, o.scheme == TimeScheme::TrBdf2);
    let q_up0 = forcing.upstream(t0);
    forcing.laterals(t0, &mut w.lat_new);
    let z0 = initial::initial_stages(p, &mut forcing, q_up0, &w.lat_new)?;
    w.z.copy_from_slice(&z0);
    state::evaluate::<_, false>(nodes, &g, o.slope_regularisation, &mut w).map_err(|node| {
        RoutingError::NonFinite {
            what: "section properties at the initial stage",
            index: node,
        }
    })?;
    let mut old = state::begin(&mut w, &g, b, q_up0);
    let mut budget = Budget::new(o.theta, state::storage(&w));
    // Froude numbers of films thinner than the drying ramp say nothing
    // about inertia and are left out.
    let mut watch = Watch::new(n, x[0], t0, MIN_DEPTH + DRY_RAMP_DEPTH);
    state::observe(&w, &g, x, &old, t0, &mut watch);
    state::fill_discharges(&mut w, &old);
    let start = MeanState::of(w.props.iter().copied().zip(w.q_node.iter().copied()));
    let mut out = DenseOutput::new(&p.output_times, t0, &w.z, &w.q_node);
    let mut control = StepControl::new(o);
    let mut stats = StepStats::new();

    // TR-BDF2's error estimate differences the net inflows of three levels,
    // so Newton must solve each stage well inside the error tolerance or
    // its residue drives the step size.
    let tr_options = Options {
        newton_tol: o.newton_tol.min(0.1 * o.local_error_tol),
        ..o.clone()
    };
    let mut t = t0;
    while !out.pending().is_empty() {
        let (dt, t_new) = control.next(t, out.pending())?;
        if o.scheme == TimeScheme::TrBdf2 {
            let mut cx = Context {
                nodes,
                g: &g,
                b,
                o: &tr_options,
                forcing: &mut forcing,
            };
            match trbdf2_step(&mut cx, (t, dt, control.at_min(dt)), &mut w) {
                Err(fail) => {
                    stats.reject();
                    control.reject(t, dt, fail, x)?;
                }
                Ok(Outcome::TooLarge(error)) => {
                    stats.reject();
                    control.shrink(dt, trbdf2::step_factor(error, o.local_error_tol));
                }
                Ok(Outcome::Accepted(a)) => {
                    stats.accept(dt, a.iterations);
                    trbdf2::budget_step(&mut budget, dt, &old, &a);
                    old = a.new;
                    let t_prev = t;
                    t = t_new;
                    state::observe(&w, &g, x, &old, t, &mut watch);
                    state::fill_discharges(&mut w, &old);
                    out.step(t_prev, t_new, &w.z, &w.q_node);
                    control.resize(dt, trbdf2::step_factor(a.error, o.local_error_tol));
                }
            }
            continue;
        }
        let lvl = NewLevel {
            dt,
            q_up: forcing.upstream(t_new),
            stage: forcing.stage(t_new),
        };
        forcing.laterals(t_new, &mut w.lat_new);
        match newton_step(nodes, &g, b, o, o.theta, &lvl, &mut w) {
            Err(fail) => {
                stats.reject();
                control.reject(t, dt, fail, x)?;
                // w.z is rebuilt from w.z_old at the next attempt.
            }
            Ok(iters) => {
                stats.accept(dt, iters);
                let new = state::advance(&mut w, &g, b, o.theta, &lvl);
                budget.step(dt, &old, &new);
                old = new;
                let t_prev = t;
                t = t_new;
                state::observe(&w, &g, x, &old, t, &mut watch);
                state::fill_discharges(&mut w, &old);
                out.step(t_prev, t_new, &w.z, &w.q_node);
                control.accept(iters);
            }
        }
    }

    let t_end = p.output_times[p.output_times.len() - 1];
    let method = Method::DiffusiveWave;
    let duration = wave_duration(&p.upstream, t0, t_end);
    let applicability = method.applicability(duration, p.reach.mean_bed_slope(), start);
    let balance = budget.close(state::storage(&w));
    let (stage, discharge) = out.finish();
    Ok(RoutingResult {
        output_times: p.output_times.clone(),
        stage,
        discharge,
        final_state: w.z.clone(),
        diagnostics: diagnostics::summarise(method, balance, watch, stats, applicability, x),
    })
}

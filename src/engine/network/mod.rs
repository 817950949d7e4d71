//! Implicit diffusive-wave routing through a network of channels joined at
//! junctions: confluences (trees) and loops (a path that splits from the
//! channel and rejoins it, such as a floodplain flow path).
//!
//! # Model
//!
//! Every channel is discretised exactly as the single-channel solver
//! ([`crate::engine::diffusive`]) does it: stages at nodes, control volumes
//! half-way to the neighbours, the same face law (regularised Manning with
//! the donor cap and the drying ramp; the functions themselves are
//! shared), the same boundary outflow laws and the same θ-method.
//!
//! Junctions follow the zero-inertia junction treatment (Cunge, Holly and
//! Verwey 1980, *Practical Aspects of Computational River Hydraulics*, the
//! chapter on networks; from memory): every channel end meeting a junction
//! has the junction's one water level, and the junction's storage obeys
//! continuity. Here the junction's storage is the sum of the half-segment
//! control volumes of the channel ends meeting it, so its continuity
//! equation is the sum of theirs: whatever flows in through one end's face
//! flows out through the others' or is stored. A channel split in two at a
//! junction is therefore the same discrete system as the unsplit channel.
//!
//! A side channel whose ends lie above the junction's water (a path that
//! only flows above bankfull) needs nothing special: its end nodes see a
//! stage below their bed, so their conveyance and storage are zero and the
//! drying ramp of the donor node keeps its faces shut until the junction
//! rises above them.
//!
//! # Solver
//!
//! Each step is one Newton solve of every channel and junction together.
//! The Jacobian is tridiagonal within each channel, bordered by the
//! junction unknowns; it is solved by block (Schur complement) elimination
//! in [`bordered`]: three Thomas solves per channel and a dense solve on
//! the junction levels, so an iteration stays O(N) (the `engine` bench's
//! `network` part measures it against the single-channel solver and
//! against a dense LU of the same matrix). Step control, dense output and
//! the volume budget are the single-channel solver's.
//!
//! Only the θ-method is offered for networks; TR-BDF2 is refused.
//!
//! # Where things are
//!
//! `topology` (channels, ends, junctions and their checks), `layout`
//! (which unknown each node's stage is), `work` (arrays, balances, the
//! Newton system), `bordered` (its solve), `newton` (one step), `problem`
//! (inputs and forcing), `initial` (hot or steady start), `result`.
//! The serde form of a network is REACH.json's `channels`
//! (`crate::forecast::channels`), outside the engine.

pub mod bordered;
mod initial;
mod layout;
mod newton;
mod problem;
mod result;
#[cfg(test)]
mod tests;
mod topology;
mod work;

pub use problem::{NetworkInitial, NetworkProblem};
pub use result::{ChannelOutput, JunctionEnd, NetworkBalance, NetworkResult};
pub use topology::{Channel, DownstreamEnd, Ends, Network, NetworkError, UpstreamEnd, check_ends};

use crate::engine::budget::Budget;
use crate::engine::diagnostics::{self, Method, StepStats, Watch};
use crate::engine::diffusive::output::DenseOutput;
use crate::engine::diffusive::problem::{check_boundary, check_options};
use crate::engine::diffusive::step::StepControl;
use crate::engine::diffusive::{DRY_RAMP_DEPTH, MIN_DEPTH};
use crate::engine::diffusive::{RoutingError, TimeScheme};
use crate::engine::props::Hydraulics;
use crate::engine::routing::validate_output_times;
use layout::{Layout, Slot};
use newton::{Level, newton_step};
use problem::Forcing;
use work::{Work, advance, begin, evaluate, fill_discharges};

/// Route the inflows through the network (see the module docs).
pub fn route_network<H: Hydraulics>(
    p: &NetworkProblem<'_, H>,
) -> Result<NetworkResult, NetworkError> {
    let o = &p.options;
    check_options(o)?;
    if o.scheme != TimeScheme::Theta {
        return Err(RoutingError::InvalidOption {
            name: "scheme",
            value: 1.0,
            reason: "networks are solved with the θ-method only",
        }
        .into());
    }
    check_boundary(&p.downstream)?;
    validate_output_times(p.start_time, &p.output_times)?;
    let channels = p.network.channels();
    let lay = Layout::new(&p.network);
    let mut w = Work::new(channels, &lay);
    let mut forcing = Forcing::new(p, &lay, &w)?;
    let b = &p.downstream;
    let t0 = p.start_time;
    forcing.fill(t0, &lay, &mut w);
    let stage0 = forcing.stage(t0);
    initial::initial_state(channels, &lay, b, (&p.initial, o), stage0, &mut w)?;
    // The start's own inputs again (the steady search leaves them as they
    // were, but a hot start's flows must be those of t0).
    forcing.fill(t0, &lay, &mut w);
    evaluate::<_, false>(channels, &lay, o.slope_regularisation, &mut w).map_err(|g| {
        RoutingError::NonFinite {
            what: "section properties at the initial stage",
            index: g,
        }
    })?;
    w.rate.fill(0.0);
    let mut old = begin(b, &lay, &mut w);
    let mut budget = Budget::new(o.theta, w.v_old.iter().sum());
    fill_discharges(channels, &lay, old.outflow, &mut w);
    let mut out = DenseOutput::new(&p.output_times, t0, &w.z, &w.q_node);
    let mut control = StepControl::new(o);
    let (mut steps, mut rejected, mut iterations) = (0, 0, 0);
    let mut stats = StepStats::new();
    // As for one channel: films thinner than the drying ramp say nothing
    // about inertia and are left out of the Froude maximum.
    let mut watch = Watch::new(w.z.len(), w.chainage[0], t0, MIN_DEPTH + DRY_RAMP_DEPTH);
    observe(&w, t0, &mut watch);
    let mut t = t0;
    while !out.pending().is_empty() {
        let (dt, t_new) = control.next(t, out.pending())?;
        forcing.fill(t_new, &lay, &mut w);
        let lvl = Level {
            dt,
            theta: o.theta,
            stage: forcing.stage(t_new),
        };
        match newton_step(channels, &lay, b, o, lvl, &mut w) {
            Err(fail) => {
                rejected += 1;
                stats.reject();
                control.reject(t, dt, fail, &w.chainage)?;
            }
            Ok(iters) => {
                steps += 1;
                iterations += iters;
                stats.accept(dt, iters);
                let new = advance(b, &lay, (dt, o.theta), &mut w);
                budget.step(dt, &old, &new);
                old = new;
                let t_prev = t;
                t = t_new;
                fill_discharges(channels, &lay, old.outflow, &mut w);
                observe(&w, t, &mut watch);
                out.step(t_prev, t_new, &w.z, &w.q_node);
                control.accept(iters);
            }
        }
    }
    let m = budget.close(w.v_old.iter().sum());
    let (stage, discharge) = out.finish();
    // No applicability number: its one upstream hydrograph and one bed
    // slope have no single meaning in a network.
    let diagnostics =
        diagnostics::summarise(Method::DiffusiveWave, m, watch, stats, None, &w.chainage);
    Ok(NetworkResult {
        output_times: p.output_times.clone(),
        channels: channels
            .iter()
            .enumerate()
            .map(|(ci, c)| ChannelOutput {
                name: c.name.clone(),
                stage: stage.iter().map(|r| r[lay.nodes_of(ci)].to_vec()).collect(),
                discharge: discharge
                    .iter()
                    .map(|r| r[lay.nodes_of(ci)].to_vec())
                    .collect(),
            })
            .collect(),
        junction_stage: stage.iter().map(|r| junction_row(&lay, r)).collect(),
        final_state: (0..channels.len())
            .map(|ci| w.z[lay.nodes_of(ci)].to_vec())
            .collect(),
        balance: NetworkBalance {
            inflow_volume: m.inflow_volume,
            lateral_volume: m.lateral_volume,
            outflow_volume: m.outflow_volume,
            storage_change: m.storage_change,
            error_pct: m.error_pct,
        },
        steps,
        rejected_steps: rejected,
        newton_iterations: iterations,
        diagnostics,
    })
}

/// Show the watch every node of the evaluated state at time `t`.
fn observe(w: &Work, t: f64, watch: &mut Watch) {
    for g in 0..w.z.len() {
        let depth = w.z[g] - w.bed[g];
        watch.observe(g, &w.props[g], w.q_node[g], depth, w.chainage[g], t);
    }
}

/// Junction stages from a row of node stages.
fn junction_row(lay: &Layout, row: &[f64]) -> Vec<f64> {
    let mut z = vec![f64::NAN; lay.n_junctions];
    for (g, s) in lay.slot.iter().enumerate() {
        if let Slot::Up(j) | Slot::Down(j) = *s {
            z[j] = row[g];
        }
    }
    z
}

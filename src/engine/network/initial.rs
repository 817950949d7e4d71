//! Where a network run starts: saved stages, or the steady state of the
//! start time's inflows.
//!
//! A network's steady state cannot be marched upstream channel by channel
//! as the single-channel profile is, because the split at a junction is
//! unknown until both paths' levels are. It is found instead by implicit
//! Euler steps (θ = 1) of the same discrete equations with the inputs held
//! at their start values and a step doubling to 10⁷ s (pseudo-transient
//! continuation, common practice): once the storage a step that long
//! changes, summed over the network, amounts to less than 1e-7 of the
//! inflow, the state is steady (each step solved to 1e-10 m).

use super::layout::Layout;
use super::newton::{Level, newton_step};
use super::problem::NetworkInitial;
use super::topology::{Channel, NetworkError};
use super::work::{Work, advance, begin, evaluate};
use crate::engine::diffusive::{DownstreamBoundary, MIN_DEPTH, Options};
use crate::engine::props::Hydraulics;
use crate::engine::roots::solve_increasing;
use crate::engine::routing::RoutingError;

/// Longest pseudo-time step (s).
const DT_STEADY_MAX: f64 = 1e7;
/// Largest storage change rate of a longest step, summed over all
/// unknowns, as a fraction of the inflow, at which the state counts as
/// steady. Stages alone would not do: a drained side channel's film
/// keeps seeping for ever at ever smaller rates through the drying ramp.
const STEADY_IMBALANCE: f64 = 1e-7;
/// Pseudo-time steps before giving up.
const STEADY_MAX_STEPS: usize = 5_000;

/// Fill `w.x` with the start stages (`w.q_in`, `w.lat` hold the start
/// time's inputs, `stage` the imposed outlet stage if any).
pub(super) fn initial_state<H: Hydraulics>(
    channels: &[Channel<'_, H>],
    lay: &Layout,
    b: &DownstreamBoundary,
    (initial, o): (&NetworkInitial, &Options),
    stage: Option<f64>,
    w: &mut Work,
) -> Result<(), NetworkError> {
    match initial {
        NetworkInitial::Hot(z) => hot(channels, lay, z, w),
        NetworkInitial::Steady => {
            guess(channels, lay, w);
            if let Some(s) = stage {
                w.x[lay.unknown[lay.outlet_node]] = s;
            }
            steady(channels, lay, b, o, stage, w)
        }
    }
}

fn hot<H: Hydraulics>(
    channels: &[Channel<'_, H>],
    lay: &Layout,
    z: &[Vec<f64>],
    w: &mut Work,
) -> Result<(), NetworkError> {
    if z.len() != channels.len() {
        return Err(RoutingError::LengthMismatch {
            what: "hot-start channels",
            expected: channels.len(),
            got: z.len(),
        }
        .into());
    }
    let mut set = vec![false; lay.unknowns()];
    for (ci, (c, zc)) in channels.iter().zip(z).enumerate() {
        let wrap = |source| NetworkError::Channel {
            channel: ci,
            source,
        };
        if zc.len() != c.reach.len() {
            return Err(wrap(RoutingError::LengthMismatch {
                what: "hot-start stages",
                expected: c.reach.len(),
                got: zc.len(),
            }));
        }
        for (i, &v) in zc.iter().enumerate() {
            if !v.is_finite() {
                return Err(wrap(RoutingError::NonFinite {
                    what: "hot-start stage",
                    index: i,
                }));
            }
            let u = lay.unknown[lay.node_offset[ci] + i];
            if !set[u] {
                w.x[u] = v.max(lay.floor[u]);
                set[u] = true;
            }
        }
    }
    Ok(())
}

/// A first guess: every node at the normal depth of the whole inflow for
/// its channel's mean bed slope (at least 1e-4), a junction at the lowest
/// guess of the ends meeting it. Only a start for the pseudo-time steps.
fn guess<H: Hydraulics>(channels: &[Channel<'_, H>], lay: &Layout, w: &mut Work) {
    let q: f64 = w.q_in.iter().sum::<f64>() + w.lat.iter().sum::<f64>();
    w.x.fill(f64::INFINITY);
    for (ci, c) in channels.iter().enumerate() {
        let rs = c.reach.mean_bed_slope().max(1e-4).sqrt();
        for (i, node) in c.reach.nodes().iter().enumerate() {
            let bed = node.bed_elevation();
            let z = solve_increasing(|z| node.props(z).conveyance * rs, bed + MIN_DEPTH, q)
                .unwrap_or(bed + 1.0);
            let u = lay.unknown[lay.node_offset[ci] + i];
            w.x[u] = w.x[u].min(z);
        }
    }
    for (x, &f) in w.x.iter_mut().zip(&lay.floor) {
        *x = x.max(f);
    }
}

fn steady<H: Hydraulics>(
    channels: &[Channel<'_, H>],
    lay: &Layout,
    b: &DownstreamBoundary,
    o: &Options,
    stage: Option<f64>,
    w: &mut Work,
) -> Result<(), NetworkError> {
    let so = Options {
        newton_tol: 1e-10,
        max_newton_iter: 30,
        ..o.clone()
    };
    let discharge = w.q_in.iter().sum::<f64>() + w.lat.iter().sum::<f64>();
    let chainage = w.chainage.clone();
    let fail = |node: usize| RoutingError::SteadyProfile {
        node,
        chainage: chainage[node],
        discharge,
    };
    evaluate::<_, false>(channels, lay, o.slope_regularisation, w).map_err(fail)?;
    begin(b, lay, w);
    w.rate.fill(0.0);
    let mut dt = o.dt_initial;
    for _ in 0..STEADY_MAX_STEPS {
        let lvl = Level {
            dt,
            theta: 1.0,
            stage,
        };
        match newton_step(channels, lay, b, &so, lvl, w) {
            Ok(_) => {
                // The old storage, kept in the solve's scratch to measure
                // how much the step still moved.
                w.rhs.copy_from_slice(&w.v_old);
                advance(b, lay, (dt, 1.0), w);
                w.rate.fill(0.0);
                let moved: f64 = w.v_old.iter().zip(&w.rhs).map(|(a, b)| (a - b).abs()).sum();
                if dt >= DT_STEADY_MAX && moved / dt <= STEADY_IMBALANCE * discharge.max(1e-3) {
                    return Ok(());
                }
                dt = (2.0 * dt).min(DT_STEADY_MAX);
            }
            Err(f) => {
                dt *= 0.5;
                if dt < o.dt_min {
                    return Err(fail(f.node).into());
                }
            }
        }
    }
    Err(fail(0).into())
}

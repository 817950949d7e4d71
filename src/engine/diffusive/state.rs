//! The solver's state: per-node and per-face arrays at the current trial
//! stages and at the old time level, how they are evaluated, and how the
//! old level is rolled forward after an accepted step.

use super::flux::{boundary_outflow, face_flow_inv};
use super::newton::NewLevel;
use super::problem::DownstreamBoundary;
use crate::engine::budget::Flows;
use crate::engine::diagnostics::Watch;
use crate::engine::props::{Hydraulics, Props};
use crate::engine::routing::Reach;

/// Preallocated per-node and per-face arrays, so a step allocates nothing.
pub(super) struct Work {
    pub(super) z: Vec<f64>,
    pub(super) z_old: Vec<f64>,
    /// dz/dt of the last accepted step: the Newton predictor.
    pub(super) rate: Vec<f64>,
    pub(super) props: Vec<Props>,
    pub(super) q_face: Vec<f64>,
    pub(super) dq_a: Vec<f64>,
    pub(super) dq_b: Vec<f64>,
    /// Net inflow to each control volume at the old time (incl. outflow).
    pub(super) f_old: Vec<f64>,
    /// Storage of each control volume at the old time (m³).
    pub(super) v_old: Vec<f64>,
    pub(super) lat_old: Vec<f64>,
    pub(super) lat_new: Vec<f64>,
    pub(super) lower: Vec<f64>,
    pub(super) diag: Vec<f64>,
    pub(super) upper: Vec<f64>,
    pub(super) rhs: Vec<f64>,
    pub(super) scratch: Vec<f64>,
    /// Node discharges of the last accepted level, handed to the dense
    /// output (filled in place rather than collected anew every step).
    pub(super) q_node: Vec<f64>,
    /// TR-BDF2: the old level kept while the two stages overwrite it
    /// (stages, storage, net inflow, predictor rate, laterals), and the
    /// net inflow at the intermediate stage, for the error estimate.
    pub(super) saved: Saved,
}

/// The old time level as TR-BDF2 keeps it across its two stages.
pub(super) struct Saved {
    pub(super) z: Vec<f64>,
    pub(super) v: Vec<f64>,
    pub(super) f: Vec<f64>,
    pub(super) rate: Vec<f64>,
    pub(super) lat: Vec<f64>,
    pub(super) f_mid: Vec<f64>,
}

impl Work {
    /// Arrays for `n` nodes; TR-BDF2's saved level only when `two_stage`.
    pub(super) fn new(n: usize, two_stage: bool) -> Self {
        let saved_len = if two_stage { n } else { 0 };
        Self {
            z: vec![0.0; n],
            z_old: vec![0.0; n],
            rate: vec![0.0; n],
            props: vec![Props::default(); n],
            q_face: vec![0.0; n - 1],
            dq_a: vec![0.0; n - 1],
            dq_b: vec![0.0; n - 1],
            f_old: vec![0.0; n],
            v_old: vec![0.0; n],
            lat_old: vec![0.0; n],
            lat_new: vec![0.0; n],
            lower: vec![0.0; n],
            diag: vec![0.0; n],
            upper: vec![0.0; n],
            rhs: vec![0.0; n],
            scratch: vec![0.0; n],
            q_node: vec![0.0; n],
            saved: Saved {
                z: vec![0.0; saved_len],
                v: vec![0.0; saved_len],
                f: vec![0.0; saved_len],
                rate: vec![0.0; saved_len],
                lat: vec![0.0; saved_len],
                f_mid: vec![0.0; saved_len],
            },
        }
    }
}

/// Fixed geometry derived once from the reach.
pub(super) struct Geometry {
    /// 1 / (x_{j+1} − x_j) per face: the face law multiplies by it.
    pub(super) inv_dx: Vec<f64>,
    pub(super) length: Vec<f64>,
    pub(super) bed: Vec<f64>,
}

impl Geometry {
    pub(super) fn new<H: Hydraulics>(reach: &Reach<'_, H>) -> Self {
        let x = reach.chainage();
        Self {
            inv_dx: x.windows(2).map(|w| 1.0 / (w[1] - w[0])).collect(),
            length: reach.control_lengths(),
            bed: reach.nodes().iter().map(|h| h.bed_elevation()).collect(),
        }
    }
}

fn props_finite(p: &Props) -> bool {
    p.flow_area.is_finite()
        && p.storage_area.is_finite()
        && p.flow_top_width.is_finite()
        && p.storage_top_width.is_finite()
        && p.conveyance.is_finite()
        && p.dconveyance_dz.is_finite()
}

/// Evaluate node properties and face flows at `w.z`. Returns the first node
/// with non-finite properties on failure.
///
/// Two passes on purpose: the lookups of the first are independent of one
/// another, so the processor overlaps their table reads (each node has its
/// own table, and a lookup that misses the cache is the slowest part of
/// an iteration); the face laws then read the properties back from one
/// small array.
///
/// `JACOBIAN` says whether the face derivatives are wanted: the evaluation
/// at converged stages (which only rolls the time level forward) skips
/// them, and `w.dq_a`/`w.dq_b` are then stale until the next Newton
/// iteration. The discharges are the same bits either way.
// Kept out of line: inlined into its callers it measured slower (bench
// `engine`), the larger caller's code crowding the loop.
#[inline(never)]
pub(super) fn evaluate<H: Hydraulics, const JACOBIAN: bool>(
    nodes: &[H],
    g: &Geometry,
    eps: f64,
    w: &mut Work,
) -> Result<(), usize> {
    for ((node, &z), slot) in nodes.iter().zip(&w.z).zip(&mut w.props) {
        node.props_into(z, slot);
    }
    if let Some(i) = w.props.iter().position(|p| !props_finite(p)) {
        return Err(i);
    }
    for j in 0..nodes.len() - 1 {
        let (q, a, b) = face_flow_inv(
            &w.props[j],
            &w.props[j + 1],
            g.bed[j],
            g.bed[j + 1],
            g.inv_dx[j],
            eps,
        );
        w.q_face[j] = q;
        if JACOBIAN {
            w.dq_a[j] = a;
            w.dq_b[j] = b;
        }
    }
    Ok(())
}

/// Net inflow to control volume `i` at the current evaluation, excluding
/// the downstream boundary outflow.
#[inline]
pub(super) fn net_inflow(w: &Work, i: usize, q_up: f64) -> f64 {
    let n = w.z.len();
    let mut net = w.lat_new[i];
    if i == 0 {
        net += q_up;
    } else {
        net += w.q_face[i - 1];
    }
    if i + 1 < n {
        net -= w.q_face[i];
    }
    net
}

/// Discharge reported at node `i` (see
/// [`crate::engine::routing::RoutingResult::discharge`]).
#[inline]
pub(super) fn node_discharge(w: &Work, i: usize, q_up: f64, q_out: f64) -> f64 {
    let n = w.z.len();
    if i == 0 {
        q_up
    } else if i + 1 == n {
        q_out
    } else {
        0.5 * (w.q_face[i - 1] + w.q_face[i])
    }
}

/// Discharge at every node, as [`node_discharge`] reports it, into
/// `w.q_node` (reused, so a step allocates nothing).
pub(super) fn fill_discharges(w: &mut Work, flows: &Flows) {
    for i in 0..w.z.len() {
        w.q_node[i] = node_discharge(w, i, flows.upstream, flows.outflow);
    }
}

/// Storage in the reach at the old time level (m³).
pub(super) fn storage(w: &Work) -> f64 {
    w.v_old.iter().sum()
}

/// Make the evaluated start state the old time level and return the
/// boundary flows there. A stage boundary's outflow is what the last face
/// and the last node's laterals bring.
pub(super) fn begin(w: &mut Work, g: &Geometry, b: &DownstreamBoundary, q_up: f64) -> Flows {
    let n = w.z.len();
    let q_out = if b.is_stage() {
        w.q_face[n - 2] + w.lat_new[n - 1]
    } else {
        boundary_outflow(b, &w.props[n - 1], g.bed[n - 1]).0
    };
    for i in 0..n {
        w.f_old[i] = net_inflow(w, i, q_up);
        w.v_old[i] = w.props[i].storage_area * g.length[i];
    }
    w.f_old[n - 1] -= q_out;
    w.lat_old.copy_from_slice(&w.lat_new);
    w.z_old.copy_from_slice(&w.z);
    Flows {
        upstream: q_up,
        lateral: w.lat_old.iter().sum(),
        outflow: q_out,
    }
}

/// After an accepted step to `lvl` (`w` evaluated at the new stages), make
/// the new level the old one and return its boundary flows. With a stage
/// boundary the outflow is whatever closes the last node's continuity
/// equation, so the volume budget stays exact.
pub(super) fn advance(
    w: &mut Work,
    g: &Geometry,
    b: &DownstreamBoundary,
    theta: f64,
    lvl: &NewLevel,
) -> Flows {
    let n = w.z.len();
    let dt = lvl.dt;
    // New-level storage and net inflows.
    let mut v_new_last = 0.0;
    for i in 0..n {
        let v = w.props[i].storage_area * g.length[i];
        if i + 1 == n {
            v_new_last = v;
        }
        w.scratch[i] = v;
    }
    let f_in_last = net_inflow(w, n - 1, lvl.q_up);
    let q_out = if lvl.stage.is_some() {
        // Outflow that closes the last node's continuity equation.
        (theta * f_in_last + (1.0 - theta) * w.f_old[n - 1] - (v_new_last - w.v_old[n - 1]) / dt)
            / theta
    } else {
        boundary_outflow(b, &w.props[n - 1], g.bed[n - 1]).0
    };
    for i in 0..n {
        w.f_old[i] = net_inflow(w, i, lvl.q_up);
        w.v_old[i] = w.scratch[i];
    }
    w.f_old[n - 1] -= q_out;
    for i in 0..n {
        w.rate[i] = (w.z[i] - w.z_old[i]) / dt;
    }
    w.z_old.copy_from_slice(&w.z);
    w.lat_old.copy_from_slice(&w.lat_new);
    Flows {
        upstream: lvl.q_up,
        lateral: w.lat_new.iter().sum(),
        outflow: q_out,
    }
}

/// Show the watch every node of the evaluated state at time `t`.
pub(super) fn observe(
    w: &Work,
    g: &Geometry,
    chainage: &[f64],
    flows: &Flows,
    t: f64,
    watch: &mut Watch,
) {
    for (i, &x) in chainage.iter().enumerate() {
        let q = node_discharge(w, i, flows.upstream, flows.outflow);
        watch.observe(i, &w.props[i], q, w.z[i] - g.bed[i], x, t);
    }
}

//! The network solver's arrays and what is computed from them: node
//! properties and face flows (the single-channel solver's flow laws,
//! unchanged), every unknown's continuity balance (a junction's is the sum
//! of the balances of the channel ends meeting it), the Newton system, and
//! rolling the time level forward.

use super::bordered::Bordered;
use super::layout::{Layout, Slot};
use super::topology::{Channel, UpstreamEnd};
use crate::engine::budget::Flows;
use crate::engine::diffusive::DownstreamBoundary;
use crate::engine::diffusive::flux::{boundary_outflow, face_flow_inv};
use crate::engine::diffusive::newton::JACOBIAN_WIDTH_FLOOR;
use crate::engine::props::{Hydraulics, Props};

/// Per-node, per-face and per-unknown arrays, allocated once.
pub(super) struct Work {
    // Per global node.
    pub(super) z: Vec<f64>,
    pub(super) props: Vec<Props>,
    pub(super) bed: Vec<f64>,
    pub(super) length: Vec<f64>,
    pub(super) lat: Vec<f64>,
    /// Chainage within its own channel (m), for error reports.
    pub(super) chainage: Vec<f64>,
    pub(super) q_node: Vec<f64>,
    // Per global face.
    pub(super) q_face: Vec<f64>,
    pub(super) dq_a: Vec<f64>,
    pub(super) dq_b: Vec<f64>,
    pub(super) inv_dx: Vec<f64>,
    // Per unknown.
    pub(super) x: Vec<f64>,
    pub(super) x_old: Vec<f64>,
    pub(super) rate: Vec<f64>,
    pub(super) v_old: Vec<f64>,
    pub(super) f_old: Vec<f64>,
    pub(super) storage: Vec<f64>,
    pub(super) net: Vec<f64>,
    pub(super) rhs: Vec<f64>,
    // Per channel: inflow at its first node (zero at a junction).
    pub(super) q_in: Vec<f64>,
    pub(super) sys: Bordered,
}

impl Work {
    pub(super) fn new<H: Hydraulics>(channels: &[Channel<'_, H>], lay: &Layout) -> Self {
        let (n, u) = (lay.nodes(), lay.unknowns());
        let f = lay.face_offset[channels.len()];
        let mut bed = Vec::with_capacity(n);
        let mut length = Vec::with_capacity(n);
        let mut inv_dx = Vec::with_capacity(f);
        let mut chainage = Vec::with_capacity(n);
        for c in channels {
            chainage.extend_from_slice(c.reach.chainage());
            bed.extend(c.reach.nodes().iter().map(|h| h.bed_elevation()));
            length.extend(c.reach.control_lengths());
            inv_dx.extend(c.reach.chainage().windows(2).map(|w| 1.0 / (w[1] - w[0])));
        }
        Self {
            z: vec![0.0; n],
            props: vec![Props::default(); n],
            bed,
            length,
            lat: vec![0.0; n],
            chainage,
            q_node: vec![0.0; n],
            q_face: vec![0.0; f],
            dq_a: vec![0.0; f],
            dq_b: vec![0.0; f],
            inv_dx,
            x: vec![0.0; u],
            x_old: vec![0.0; u],
            rate: vec![0.0; u],
            v_old: vec![0.0; u],
            f_old: vec![0.0; u],
            storage: vec![0.0; u],
            net: vec![0.0; u],
            rhs: vec![0.0; u],
            q_in: vec![0.0; channels.len()],
            sys: Bordered::new(lay.blocks.clone(), lay.n_junctions),
        }
    }
}

fn props_finite(p: &Props) -> bool {
    p.flow_area.is_finite()
        && p.storage_area.is_finite()
        && p.storage_top_width.is_finite()
        && p.conveyance.is_finite()
        && p.dconveyance_dz.is_finite()
}

/// Node stages from the unknowns, node properties and face flows (with
/// their derivatives when `JACOBIAN`). Returns the first global node with
/// non-finite properties on failure.
pub(super) fn evaluate<H: Hydraulics, const JACOBIAN: bool>(
    channels: &[Channel<'_, H>],
    lay: &Layout,
    eps: f64,
    w: &mut Work,
) -> Result<(), usize> {
    for (z, &u) in w.z.iter_mut().zip(&lay.unknown) {
        *z = w.x[u];
    }
    for (ci, c) in channels.iter().enumerate() {
        let g0 = lay.node_offset[ci];
        for (i, node) in c.reach.nodes().iter().enumerate() {
            node.props_into(w.z[g0 + i], &mut w.props[g0 + i]);
        }
    }
    if let Some(g) = w.props.iter().position(|p| !props_finite(p)) {
        return Err(g);
    }
    for ci in 0..channels.len() {
        let (g0, f0) = (lay.node_offset[ci], lay.face_offset[ci]);
        for f in f0..lay.face_offset[ci + 1] {
            let g = g0 + (f - f0);
            let (q, a, b) = face_flow_inv(
                &w.props[g],
                &w.props[g + 1],
                w.bed[g],
                w.bed[g + 1],
                w.inv_dx[f],
                eps,
            );
            w.q_face[f] = q;
            if JACOBIAN {
                w.dq_a[f] = a;
                w.dq_b[f] = b;
            }
        }
    }
    Ok(())
}

/// Storage (m³) and net inflow (m³/s, the outlet's outflow left out) of
/// every unknown at the evaluated state, into `w.storage` and `w.net`.
pub(super) fn balance(lay: &Layout, w: &mut Work) {
    w.storage.fill(0.0);
    w.net.fill(0.0);
    for (g, &u) in lay.unknown.iter().enumerate() {
        w.storage[u] += w.props[g].storage_area * w.length[g];
        w.net[u] += w.lat[g];
    }
    for (ci, &q) in w.q_in.iter().enumerate() {
        w.net[lay.unknown[lay.node_offset[ci]]] += q;
    }
    for ci in 0..w.q_in.len() {
        let (g0, f0) = (lay.node_offset[ci], lay.face_offset[ci]);
        for f in f0..lay.face_offset[ci + 1] {
            let g = g0 + (f - f0);
            let q = w.q_face[f];
            w.net[lay.unknown[g]] -= q;
            w.net[lay.unknown[g + 1]] += q;
        }
    }
}

/// Add `v` to the Newton matrix at (row of node `row`, column of node
/// `col`), both nodes of channel `c`.
#[inline]
fn add(sys: &mut Bordered, lay: &Layout, c: usize, row: usize, col: usize, v: f64) {
    let nj = lay.n_junctions;
    match (lay.slot[row], lay.slot[col]) {
        (Slot::Own(k), Slot::Own(k2)) => {
            if k == k2 {
                sys.diag[k] += v;
            } else if k2 < k {
                sys.lower[k] += v;
            } else {
                sys.upper[k] += v;
            }
        }
        (Slot::Own(_), Slot::Up(_)) => sys.c_up[c] += v,
        (Slot::Own(_), Slot::Down(_)) => sys.c_down[c] += v,
        (Slot::Up(_), Slot::Own(_)) => sys.b_up[c] += v,
        (Slot::Down(_), Slot::Own(_)) => sys.b_down[c] += v,
        (Slot::Up(a) | Slot::Down(a), Slot::Up(b) | Slot::Down(b)) => sys.d[a * nj + b] += v,
    }
}

/// The Newton system of one θ-step of `dt`: `w.rhs` = −residual of every
/// unknown's continuity equation, the Jacobian in `w.sys`.
pub(super) fn assemble(
    b: &DownstreamBoundary,
    lay: &Layout,
    (dt, theta): (f64, f64),
    imposed: bool,
    w: &mut Work,
) {
    let dtt = dt * theta;
    balance(lay, w);
    w.sys.clear();
    let nc = w.q_in.len();
    for ci in 0..nc {
        let (g0, f0) = (lay.node_offset[ci], lay.face_offset[ci]);
        for g in lay.nodes_of(ci) {
            let width = w.props[g].storage_top_width.max(JACOBIAN_WIDTH_FLOOR);
            add(&mut w.sys, lay, ci, g, g, width * w.length[g]);
        }
        for f in f0..lay.face_offset[ci + 1] {
            let g = g0 + (f - f0);
            let (da, db) = (dtt * w.dq_a[f], dtt * w.dq_b[f]);
            // Most faces join two own nodes: their four entries go
            // straight into the tridiagonal block.
            if let (Slot::Own(k), Slot::Own(_)) = (lay.slot[g], lay.slot[g + 1]) {
                let sys = &mut w.sys;
                sys.diag[k] += da;
                sys.upper[k] += db;
                sys.lower[k + 1] -= da;
                sys.diag[k + 1] -= db;
                continue;
            }
            add(&mut w.sys, lay, ci, g, g, da);
            add(&mut w.sys, lay, ci, g, g + 1, db);
            add(&mut w.sys, lay, ci, g + 1, g, -da);
            add(&mut w.sys, lay, ci, g + 1, g + 1, -db);
        }
    }
    let on = lay.outlet_node;
    let u_out = lay.unknown[on];
    if !imposed {
        let (qo, dqo) = boundary_outflow(b, &w.props[on], w.bed[on]);
        w.net[u_out] -= qo;
        w.sys.diag[u_out] += dtt * dqo;
    }
    let explicit = 1.0 - theta;
    for u in 0..lay.unknowns() {
        let residual = w.storage[u] - w.v_old[u] - dt * (theta * w.net[u] + explicit * w.f_old[u]);
        w.rhs[u] = -residual;
    }
}

/// Make the evaluated state the old time level; returns its boundary
/// flows. `q_out` is the outlet's outflow there.
fn roll(lay: &Layout, w: &mut Work, q_out: f64) -> Flows {
    let u_out = lay.unknown[lay.outlet_node];
    w.f_old.copy_from_slice(&w.net);
    w.f_old[u_out] -= q_out;
    w.v_old.copy_from_slice(&w.storage);
    w.x_old.copy_from_slice(&w.x);
    Flows {
        upstream: w.q_in.iter().sum(),
        lateral: w.lat.iter().sum(),
        outflow: q_out,
    }
}

/// The start state as the old level. A stage outlet's outflow is what
/// reaches the outlet node.
pub(super) fn begin(b: &DownstreamBoundary, lay: &Layout, w: &mut Work) -> Flows {
    balance(lay, w);
    let on = lay.outlet_node;
    let q_out = if b.is_stage() {
        w.net[lay.unknown[on]]
    } else {
        boundary_outflow(b, &w.props[on], w.bed[on]).0
    };
    roll(lay, w, q_out)
}

/// After an accepted step of `dt` (`w` evaluated at the new stages): the
/// new level becomes the old one. A stage outlet releases whatever closes
/// the outlet node's continuity equation, so the budget stays exact.
pub(super) fn advance(
    b: &DownstreamBoundary,
    lay: &Layout,
    (dt, theta): (f64, f64),
    w: &mut Work,
) -> Flows {
    balance(lay, w);
    let on = lay.outlet_node;
    let u = lay.unknown[on];
    let q_out = if b.is_stage() {
        (theta * w.net[u] + (1.0 - theta) * w.f_old[u] - (w.storage[u] - w.v_old[u]) / dt) / theta
    } else {
        boundary_outflow(b, &w.props[on], w.bed[on]).0
    };
    for ((r, &x), &x0) in w.rate.iter_mut().zip(&w.x).zip(&w.x_old) {
        *r = (x - x0) / dt;
    }
    roll(lay, w, q_out)
}

/// Discharge at every node into `w.q_node`: at a channel's first node the
/// inflow, or the first face's flow when it starts at a junction; at its
/// last node the outflow, or the last face's flow when it ends at a
/// junction; the mean of the two faces elsewhere. At a junction these are
/// the flows of each channel end into or out of it (the flow split).
pub(super) fn fill_discharges<H>(
    channels: &[Channel<'_, H>],
    lay: &Layout,
    q_out: f64,
    w: &mut Work,
) {
    for (ci, c) in channels.iter().enumerate() {
        let (g0, f0, f1) = (
            lay.node_offset[ci],
            lay.face_offset[ci],
            lay.face_offset[ci + 1],
        );
        let n = f1 - f0 + 1;
        w.q_node[g0] = match c.upstream {
            UpstreamEnd::Inflow(_) => w.q_in[ci],
            UpstreamEnd::Junction(_) => w.q_face[f0],
        };
        for i in 1..n - 1 {
            w.q_node[g0 + i] = 0.5 * (w.q_face[f0 + i - 1] + w.q_face[f0 + i]);
        }
        w.q_node[g0 + n - 1] = if lay.outlet_node == g0 + n - 1 {
            q_out
        } else {
            w.q_face[f1 - 1]
        };
    }
}

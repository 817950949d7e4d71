//! Where each channel node's stage lives in the network's unknown vector.
//!
//! Channel nodes are numbered globally, channel after channel. A node at a
//! junction end shares the junction's unknown; every other node is an own
//! unknown of its channel. Own unknowns come first, channel by channel,
//! then the junctions (the order [`super::bordered::Bordered`] expects).

use super::bordered::Block;
use super::topology::{Network, down_junction, up_junction};
use crate::engine::diffusive::MIN_DEPTH;
use crate::engine::props::Hydraulics;

/// What unknown a channel node's stage is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Slot {
    /// An own node: unknown index.
    Own(usize),
    /// The junction at the channel's upstream end.
    Up(usize),
    /// The junction at the channel's downstream end.
    Down(usize),
}

/// Index maps of a network.
pub(super) struct Layout {
    /// First global node of each channel, and the total at the end.
    pub(super) node_offset: Vec<usize>,
    /// First global face of each channel, and the total at the end.
    pub(super) face_offset: Vec<usize>,
    pub(super) blocks: Vec<Block>,
    /// Unknown of every global node.
    pub(super) unknown: Vec<usize>,
    /// Slot of every global node.
    pub(super) slot: Vec<Slot>,
    pub(super) n_own: usize,
    pub(super) n_junctions: usize,
    /// Lowest stage each unknown may take: its bed (the lowest bed of the
    /// channel ends at a junction) plus [`MIN_DEPTH`].
    pub(super) floor: Vec<f64>,
    /// Global node of the outlet (last node of the outlet channel).
    pub(super) outlet_node: usize,
}

impl Layout {
    pub(super) fn new<H: Hydraulics>(net: &Network<'_, H>) -> Self {
        let channels = net.channels();
        let nj = net.junctions();
        let mut node_offset = vec![0];
        let mut face_offset = vec![0];
        let mut blocks = Vec::with_capacity(channels.len());
        let mut own = 0;
        for c in channels {
            let n = c.reach.len();
            node_offset.push(node_offset[node_offset.len() - 1] + n);
            face_offset.push(face_offset[face_offset.len() - 1] + n - 1);
            let (up, down) = (up_junction(c), down_junction(c));
            let len = n - usize::from(up.is_some()) - usize::from(down.is_some());
            blocks.push(Block {
                start: own,
                len,
                up,
                down,
            });
            own += len;
        }
        let total = node_offset[channels.len()];
        let mut unknown = vec![0; total];
        let mut slot = vec![Slot::Own(0); total];
        let mut floor = vec![f64::INFINITY; own + nj];
        for (ci, c) in channels.iter().enumerate() {
            let b = blocks[ci];
            let n = c.reach.len();
            for (i, node) in c.reach.nodes().iter().enumerate() {
                let g = node_offset[ci] + i;
                let s = match (b.up, b.down) {
                    (Some(j), _) if i == 0 => Slot::Up(j),
                    (_, Some(j)) if i == n - 1 => Slot::Down(j),
                    _ => Slot::Own(b.start + i - usize::from(b.up.is_some())),
                };
                let u = match s {
                    Slot::Own(k) => k,
                    Slot::Up(j) | Slot::Down(j) => own + j,
                };
                slot[g] = s;
                unknown[g] = u;
                floor[u] = floor[u].min(node.bed_elevation() + MIN_DEPTH);
            }
        }
        let outlet = net.outlet();
        Self {
            outlet_node: node_offset[outlet + 1] - 1,
            node_offset,
            face_offset,
            blocks,
            unknown,
            slot,
            n_own: own,
            n_junctions: nj,
            floor,
        }
    }

    /// Number of unknowns.
    pub(super) fn unknowns(&self) -> usize {
        self.n_own + self.n_junctions
    }

    /// Total number of channel nodes.
    pub(super) fn nodes(&self) -> usize {
        self.unknown.len()
    }

    /// Global nodes of channel `c`.
    pub(super) fn nodes_of(&self, c: usize) -> std::ops::Range<usize> {
        self.node_offset[c]..self.node_offset[c + 1]
    }
}

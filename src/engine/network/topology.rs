//! What a network is: channels, what each end of a channel meets (an
//! inflow boundary, a junction or the outlet), and the checks that make a
//! set of channels a network the solver can take: one outlet, every
//! junction met by at least two channel ends, no channel with both ends at
//! one junction, everything connected. Trees (confluences) and loops (a
//! path that splits and rejoins) are both allowed.

use thiserror::Error;

use crate::engine::props::Hydraulics;
use crate::engine::routing::{Lateral, Reach, RoutingError};
use crate::engine::series::Series;

/// What the upstream end (first node) of a channel meets.
#[derive(Debug, Clone, PartialEq)]
pub enum UpstreamEnd {
    /// An inflow hydrograph (m³/s, non-negative) enters the first node.
    Inflow(Series),
    /// The first node is junction `id` (its stage is the junction's).
    Junction(usize),
}

/// What the downstream end (last node) of a channel meets.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DownstreamEnd {
    /// The last node is junction `id`.
    Junction(usize),
    /// The network's outlet: the problem's downstream boundary applies.
    Outlet,
}

/// One channel: its nodes (own chainage, own sections), its ends and the
/// point inflows along it (chainage in the channel's own chainage).
#[derive(Debug)]
pub struct Channel<'a, H> {
    /// Name used in reports.
    pub name: String,
    /// Nodes and their hydraulics, chainage increasing downstream.
    pub reach: Reach<'a, H>,
    /// What the first node meets.
    pub upstream: UpstreamEnd,
    /// What the last node meets.
    pub downstream: DownstreamEnd,
    /// Point inflows along the channel.
    pub laterals: Vec<Lateral>,
}

impl<H> Clone for Channel<'_, H> {
    fn clone(&self) -> Self {
        Self {
            name: self.name.clone(),
            reach: self.reach,
            upstream: self.upstream.clone(),
            downstream: self.downstream,
            laterals: self.laterals.clone(),
        }
    }
}

/// Why a set of channels is not a network the solver can take.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum NetworkError {
    /// No channels at all.
    #[error("a network needs at least one channel")]
    Empty,
    /// No channel ends at the outlet.
    #[error("no channel ends at the outlet")]
    NoOutlet,
    /// More than one channel ends at the outlet.
    #[error("channels {first} and {second} both end at the outlet; a network has one")]
    SeveralOutlets {
        /// The first channel ending at the outlet.
        first: usize,
        /// Another one.
        second: usize,
    },
    /// A junction met by fewer than two channel ends (a dangling end or an
    /// unused junction number).
    #[error("junction {junction} is met by {ends} channel end(s); at least 2 are needed")]
    LonelyJunction {
        /// Junction id.
        junction: usize,
        /// Channel ends meeting it.
        ends: usize,
    },
    /// A channel whose two ends are the same junction.
    #[error("channel {channel} starts and ends at junction {junction}")]
    SelfLoop {
        /// Channel index.
        channel: usize,
        /// The junction.
        junction: usize,
    },
    /// Part of the network cannot be reached from the outlet.
    #[error("channel {channel} is not connected to the outlet")]
    Disconnected {
        /// A channel that cannot be reached.
        channel: usize,
    },
    /// A channel's inputs are invalid (its laterals or its inflow).
    #[error("channel {channel}: {source}")]
    Channel {
        /// Channel index.
        channel: usize,
        /// What is wrong.
        source: RoutingError,
    },
    /// The run itself failed or its options are invalid.
    #[error(transparent)]
    Routing(#[from] RoutingError),
}

/// A checked network: its channels and the number of junctions (ids run
/// from 0 to `junctions − 1`).
#[derive(Debug)]
pub struct Network<'a, H> {
    channels: Vec<Channel<'a, H>>,
    junctions: usize,
    outlet: usize,
}

impl<H> Clone for Network<'_, H> {
    fn clone(&self) -> Self {
        Self {
            channels: self.channels.clone(),
            junctions: self.junctions,
            outlet: self.outlet,
        }
    }
}

impl<'a, H: Hydraulics> Network<'a, H> {
    /// Check the channels and wrap them (see the module docs for the
    /// rules).
    pub fn new(channels: Vec<Channel<'a, H>>) -> Result<Self, NetworkError> {
        let ends: Vec<Ends> = channels
            .iter()
            .map(|c| (up_junction(c), down_junction(c)))
            .collect();
        let (junctions, outlet) = check_ends(&ends)?;
        Ok(Self {
            channels,
            junctions,
            outlet,
        })
    }
}

impl<'a, H> Network<'a, H> {
    /// The channels, in the order given.
    pub fn channels(&self) -> &[Channel<'a, H>] {
        &self.channels
    }

    /// Number of junctions.
    pub fn junctions(&self) -> usize {
        self.junctions
    }

    /// Index of the channel that ends at the outlet.
    pub fn outlet(&self) -> usize {
        self.outlet
    }

    /// Total number of channel nodes (a junction counts once per channel
    /// end meeting it).
    pub fn node_count(&self) -> usize
    where
        H: Hydraulics,
    {
        self.channels.iter().map(|c| c.reach.len()).sum()
    }
}

/// The junction a channel's upstream end meets, if any.
pub(super) fn up_junction<H>(c: &Channel<'_, H>) -> Option<usize> {
    match c.upstream {
        UpstreamEnd::Junction(j) => Some(j),
        UpstreamEnd::Inflow(_) => None,
    }
}

/// The junction a channel's downstream end meets, if any.
pub(super) fn down_junction<H>(c: &Channel<'_, H>) -> Option<usize> {
    match c.downstream {
        DownstreamEnd::Junction(j) => Some(j),
        DownstreamEnd::Outlet => None,
    }
}

/// Each channel's ends as junction ids: `(upstream, downstream)`, `None`
/// for an inflow boundary upstream and for the outlet downstream.
pub type Ends = (Option<usize>, Option<usize>);

/// The topology checks of [`Network::new`] on the channels' ends alone
/// (so a caller can check a description before building its nodes):
/// the number of junctions and the outlet channel.
pub fn check_ends(ends: &[Ends]) -> Result<(usize, usize), NetworkError> {
    if ends.is_empty() {
        return Err(NetworkError::Empty);
    }
    let outlet = single_outlet(ends)?;
    let junctions = count_junctions(ends)?;
    check_connected(ends, junctions, outlet)?;
    Ok((junctions, outlet))
}

fn single_outlet(ends: &[Ends]) -> Result<usize, NetworkError> {
    let mut outlets = ends
        .iter()
        .enumerate()
        .filter(|(_, e)| e.1.is_none())
        .map(|(i, _)| i);
    let first = outlets.next().ok_or(NetworkError::NoOutlet)?;
    if let Some(second) = outlets.next() {
        return Err(NetworkError::SeveralOutlets { first, second });
    }
    Ok(first)
}

/// Junction ids must be 0..count, each met by at least two ends.
fn count_junctions(ends: &[Ends]) -> Result<usize, NetworkError> {
    let mut met: Vec<usize> = Vec::new();
    for (i, &(up, down)) in ends.iter().enumerate() {
        if let (Some(a), Some(b)) = (up, down)
            && a == b
        {
            return Err(NetworkError::SelfLoop {
                channel: i,
                junction: a,
            });
        }
        for j in up.into_iter().chain(down) {
            if j >= met.len() {
                met.resize(j + 1, 0);
            }
            met[j] += 1;
        }
    }
    if let Some((junction, &n)) = met.iter().enumerate().find(|&(_, &n)| n < 2) {
        return Err(NetworkError::LonelyJunction { junction, ends: n });
    }
    Ok(met.len())
}

/// Every channel reachable from the outlet channel through junctions.
fn check_connected(ends: &[Ends], junctions: usize, outlet: usize) -> Result<(), NetworkError> {
    let mut seen_channel = vec![false; ends.len()];
    let mut seen_junction = vec![false; junctions];
    let mut stack = vec![outlet];
    seen_channel[outlet] = true;
    while let Some(c) = stack.pop() {
        let (up, down) = ends[c];
        for j in up.into_iter().chain(down) {
            if seen_junction[j] {
                continue;
            }
            seen_junction[j] = true;
            for (k, &(u, d)) in ends.iter().enumerate() {
                let meets = u == Some(j) || d == Some(j);
                if meets && !seen_channel[k] {
                    seen_channel[k] = true;
                    stack.push(k);
                }
            }
        }
    }
    match seen_channel.iter().position(|&s| !s) {
        Some(channel) => Err(NetworkError::Disconnected { channel }),
        None => Ok(()),
    }
}

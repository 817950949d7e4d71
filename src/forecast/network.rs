//! One run of a reach of several channels ([`super::channels`]): the
//! nodes of every channel built once per reach version, the engine's
//! network built for a run from them (or a member's roughened view of
//! them) with each boundary's hydrograph, and the run's results in the
//! single-channel shape — points on their channels, every node's rows
//! channel after channel for the profile, and the flow of every channel
//! end at every junction (the flow split).

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::channels::{ChannelStart, junction_ids};
use super::run::RunError;
use super::spec::{ReachSpec, SpecError};
use crate::engine::diffusive::{DownstreamBoundary, Options};
use crate::engine::network::{
    Channel, DownstreamEnd, Ends, Network, NetworkInitial, NetworkProblem, NetworkResult,
    UpstreamEnd, route_network,
};
use crate::engine::props::Hydraulics;
use crate::engine::routing::{Lateral, Reach};
use crate::engine::section::{Node, build_nodes};
use crate::engine::series::Series;

/// One channel's nodes.
#[derive(Debug)]
pub struct PreparedChannel {
    pub name: String,
    pub nodes: Vec<Node>,
    pub chainage: Vec<f64>,
}

/// What every run of a network reach version shares.
#[derive(Debug)]
pub struct PreparedNetwork {
    pub channels: Vec<PreparedChannel>,
    /// Junction names; junction `j` of the engine is `junctions[j]`.
    pub junctions: Vec<String>,
    ends: Vec<Ends>,
}

impl PreparedNetwork {
    /// Builds every channel's nodes (with the reach's roughness
    /// multipliers) of a validated `spec`.
    pub fn new(spec: &ReachSpec) -> Result<Self, RunError> {
        let mut channels = Vec::with_capacity(spec.channels.len());
        for (i, c) in spec.channels.iter().enumerate() {
            let spacing = c.max_node_spacing.unwrap_or(spec.max_node_spacing);
            let nodes = build_nodes(&spec.roughness.apply(&c.sections), spacing).map_err(|e| {
                RunError::Spec(SpecError::new(
                    format!("channels[{i}].sections"),
                    e.to_string(),
                ))
            })?;
            channels.push(PreparedChannel {
                name: c.name.clone(),
                chainage: nodes.iter().map(|n| n.chainage).collect(),
                nodes,
            });
        }
        let (junctions, ends) = junction_ids(&spec.channels);
        Ok(Self {
            channels,
            junctions,
            ends,
        })
    }

    /// Total number of nodes.
    pub fn node_count(&self) -> usize {
        self.channels.iter().map(|c| c.nodes.len()).sum()
    }
}

/// The flow of one channel end at a junction over the run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EndFlow {
    /// The channel's name.
    pub channel: String,
    /// True when the channel starts at the junction (its flow leaves the
    /// junction), false when it ends there (its flow arrives).
    pub leaves: bool,
    /// Discharge along the channel (m³/s), one per output time of the run;
    /// negative when it flows back up the channel.
    pub discharge: Vec<f64>,
}

/// Every channel end meeting one junction: the flow split there.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct JunctionFlow {
    pub junction: String,
    /// The run's output instants (the points' times).
    #[serde(with = "crate::wire_time::vec")]
    pub times: Vec<DateTime<Utc>>,
    pub ends: Vec<EndFlow>,
}

/// What a network run gives back, per channel.
pub struct Routed {
    pub result: NetworkResult,
    /// The output instants.
    pub times: Vec<DateTime<Utc>>,
    pub junctions: Vec<JunctionFlow>,
}

/// Reads the hydrograph at a JSON path (`laterals[2]`,
/// `channels[1].upstream`) in seconds from the run's start.
pub type SeriesAt<'a> = &'a dyn Fn(&str, &[super::spec::FlowPoint]) -> Result<Series, RunError>;

/// The inputs of one network run besides the nodes.
pub struct Inputs<'a> {
    /// The run's start, which the seconds count from.
    pub start: DateTime<Utc>,
    /// The reach's inflow (seconds from the run's start).
    pub upstream: &'a Series,
    pub downstream: DownstreamBoundary,
    pub options: Options,
    pub output_times: Vec<f64>,
    /// Hydrograph of a tributary channel or a lateral (seconds from the
    /// start) by its JSON path, as [`super::run`] reads them.
    pub series: SeriesAt<'a>,
}

/// Routes one run through the network on `views` (each channel's nodes,
/// or a view of them).
pub fn route<H: Hydraulics>(
    spec: &ReachSpec,
    net: &PreparedNetwork,
    views: &[&[H]],
    inputs: Inputs<'_>,
) -> Result<Routed, RunError> {
    let network = network_of(spec, net, views, &inputs)?;
    let problem = NetworkProblem {
        network,
        downstream: inputs.downstream,
        initial: NetworkInitial::Steady,
        start_time: 0.0,
        output_times: inputs.output_times,
        options: inputs.options,
    };
    let result = route_network(&problem).map_err(|e| RunError::Routing(e.to_string()))?;
    let times = super::run::instants(inputs.start, &result.output_times);
    let junctions = (0..net.junctions.len())
        .map(|j| JunctionFlow {
            junction: net.junctions[j].clone(),
            times: times.clone(),
            ends: result
                .junction_flows(&problem.network, j)
                .into_iter()
                .map(|e| EndFlow {
                    channel: net.channels[e.channel].name.clone(),
                    leaves: e.leaves,
                    discharge: e.discharge,
                })
                .collect(),
        })
        .collect();
    Ok(Routed {
        result,
        times,
        junctions,
    })
}

/// The engine's network for one run.
fn network_of<'a, H: Hydraulics>(
    spec: &ReachSpec,
    net: &'a PreparedNetwork,
    views: &[&'a [H]],
    inputs: &Inputs<'_>,
) -> Result<Network<'a, H>, RunError> {
    let mut channels = Vec::with_capacity(net.channels.len());
    for (ci, (c, cs)) in net.channels.iter().zip(&spec.channels).enumerate() {
        let reach =
            Reach::new(&c.chainage, views[ci]).map_err(|e| RunError::Routing(e.to_string()))?;
        let (up, down) = net.ends[ci];
        let upstream = match (&cs.upstream, up) {
            (_, Some(j)) => UpstreamEnd::Junction(j),
            (ChannelStart::Tributary { inflow, .. }, None) => UpstreamEnd::Inflow((inputs.series)(
                &format!("channels[{ci}].upstream"),
                inflow,
            )?),
            (_, None) => UpstreamEnd::Inflow(inputs.upstream.clone()),
        };
        let laterals = spec
            .laterals
            .iter()
            .enumerate()
            .filter(|(_, l)| l.channel.as_deref() == Some(c.name.as_str()))
            .map(|(i, l)| {
                Ok(Lateral {
                    chainage: l.chainage,
                    inflow: (inputs.series)(&format!("laterals[{i}]"), &l.inflow)?,
                })
            })
            .collect::<Result<Vec<_>, RunError>>()?;
        channels.push(Channel {
            name: c.name.clone(),
            reach,
            upstream,
            downstream: down.map_or(DownstreamEnd::Outlet, DownstreamEnd::Junction),
            laterals,
        });
    }
    Network::new(channels).map_err(|e| RunError::Routing(e.to_string()))
}

#[cfg(test)]
#[path = "network_tests.rs"]
mod tests;

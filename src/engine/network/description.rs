//! A network as data: channels with their surveyed sections and what each
//! end meets, junctions named by strings, inflow boundaries named so the
//! caller can supply their hydrographs. [`NetworkDescription::build`]
//! turns the sections into nodes and checks the topology; the built
//! network then lends a [`Network`] for a run.
//!
//! Not yet part of REACH.json or the service: the format for them to
//! adopt (README, "Networks").

use serde::{Deserialize, Serialize};
use thiserror::Error;

use super::topology::{Channel, DownstreamEnd, Network, NetworkError, UpstreamEnd};
use crate::engine::routing::Reach;
use crate::engine::section::{CrossSection, GeometryError, Node, build_nodes};
use crate::engine::series::Series;

/// What a channel's upstream end meets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum UpstreamDescription {
    /// An inflow boundary, named so its hydrograph can be supplied.
    Inflow {
        /// Boundary name.
        boundary: String,
    },
    /// A junction, by name.
    Junction {
        /// Junction name.
        junction: String,
    },
}

/// What a channel's downstream end meets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum DownstreamDescription {
    /// A junction, by name.
    Junction {
        /// Junction name.
        junction: String,
    },
    /// The network's outlet (exactly one channel).
    Outlet,
}

/// One channel as data.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChannelDescription {
    /// Unique name.
    pub name: String,
    /// Surveyed sections, chainage (the channel's own) increasing
    /// downstream; at least two.
    pub sections: Vec<CrossSection>,
    /// Largest distance between computational nodes (m).
    pub max_node_spacing: f64,
    /// What the first section meets.
    pub upstream: UpstreamDescription,
    /// What the last section meets.
    pub downstream: DownstreamDescription,
}

/// A network as data.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct NetworkDescription {
    /// The channels.
    pub channels: Vec<ChannelDescription>,
}

/// Why a description cannot be built or run.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum DescriptionError {
    /// Two channels share a name.
    #[error("two channels are named `{0}`")]
    DuplicateChannel(String),
    /// A channel's sections are invalid.
    #[error("channel `{channel}`: {source}")]
    Geometry {
        /// Channel name.
        channel: String,
        /// What is wrong.
        source: GeometryError,
    },
    /// No hydrograph was supplied for an inflow boundary.
    #[error("channel `{channel}`: no inflow for boundary `{boundary}`")]
    MissingInflow {
        /// Channel name.
        channel: String,
        /// Boundary name.
        boundary: String,
    },
    /// The channels do not form a network (junction numbers follow the
    /// order junction names first appear in).
    #[error("{0}")]
    Network(NetworkError),
}

/// A channel's nodes, built once and lent to every run.
#[derive(Debug, Clone)]
pub struct BuiltChannel {
    /// Channel name.
    pub name: String,
    /// Node chainages (m).
    pub chainage: Vec<f64>,
    /// Nodes with their property tables.
    pub nodes: Vec<Node>,
    up: UpEnd,
    down: Option<usize>,
}

/// A built channel's upstream end: a boundary name or a junction id.
#[derive(Debug, Clone)]
enum UpEnd {
    Inflow(String),
    Junction(usize),
}

impl BuiltChannel {
    /// The inflow boundary's name, when the upstream end is one.
    pub fn inflow(&self) -> Option<&str> {
        match &self.up {
            UpEnd::Inflow(b) => Some(b),
            UpEnd::Junction(_) => None,
        }
    }
}

/// A description turned into nodes, its topology checked.
#[derive(Debug, Clone)]
pub struct BuiltNetwork {
    /// Channels in the description's order.
    pub channels: Vec<BuiltChannel>,
    /// Junction names; junction `j` of the runs is `junctions[j]`.
    pub junctions: Vec<String>,
}

impl NetworkDescription {
    /// Parse from JSON text.
    pub fn from_json(text: &str) -> Result<Self, serde_json::Error> {
        serde_json::from_str(text)
    }

    /// Build every channel's nodes and check the topology.
    pub fn build(&self) -> Result<BuiltNetwork, DescriptionError> {
        let mut junctions: Vec<String> = Vec::new();
        let mut id = |name: &str| match junctions.iter().position(|j| j == name) {
            Some(i) => i,
            None => {
                junctions.push(name.to_owned());
                junctions.len() - 1
            }
        };
        let mut channels = Vec::with_capacity(self.channels.len());
        for (i, c) in self.channels.iter().enumerate() {
            if self.channels[..i].iter().any(|o| o.name == c.name) {
                return Err(DescriptionError::DuplicateChannel(c.name.clone()));
            }
            let nodes = build_nodes(&c.sections, c.max_node_spacing).map_err(|source| {
                DescriptionError::Geometry {
                    channel: c.name.clone(),
                    source,
                }
            })?;
            let up = match &c.upstream {
                UpstreamDescription::Inflow { boundary } => UpEnd::Inflow(boundary.clone()),
                UpstreamDescription::Junction { junction } => UpEnd::Junction(id(junction)),
            };
            let down = match &c.downstream {
                DownstreamDescription::Junction { junction } => Some(id(junction)),
                DownstreamDescription::Outlet => None,
            };
            channels.push(BuiltChannel {
                name: c.name.clone(),
                chainage: nodes.iter().map(|n| n.chainage).collect(),
                nodes,
                up,
                down,
            });
        }
        let built = BuiltNetwork {
            channels,
            junctions,
        };
        // Check the topology now, with placeholder inflows.
        if let Ok(zero) = Series::constant(0.0) {
            built.network(|_| Some(zero.clone()))?;
        }
        Ok(built)
    }
}

impl BuiltNetwork {
    /// The network for one run, each inflow boundary's hydrograph from
    /// `inflow(name)`.
    pub fn network(
        &self,
        inflow: impl Fn(&str) -> Option<Series>,
    ) -> Result<Network<'_, Node>, DescriptionError> {
        let mut channels = Vec::with_capacity(self.channels.len());
        for c in &self.channels {
            let reach = Reach::new(&c.chainage, &c.nodes).map_err(|e| {
                DescriptionError::Network(NetworkError::Channel {
                    channel: channels.len(),
                    source: e,
                })
            })?;
            let upstream = match &c.up {
                UpEnd::Inflow(b) => UpstreamEnd::Inflow(inflow(b).ok_or_else(|| {
                    DescriptionError::MissingInflow {
                        channel: c.name.clone(),
                        boundary: b.clone(),
                    }
                })?),
                UpEnd::Junction(j) => UpstreamEnd::Junction(*j),
            };
            channels.push(Channel {
                name: c.name.clone(),
                reach,
                upstream,
                downstream: c
                    .down
                    .map_or(DownstreamEnd::Outlet, DownstreamEnd::Junction),
                laterals: Vec::new(),
            });
        }
        Network::new(channels).map_err(DescriptionError::Network)
    }
}

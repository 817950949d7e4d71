//! What a network run returns: stages and discharges per channel, junction
//! stages, the flow of every channel end at each junction (the flow
//! split), the volume budget and step counts.

use serde::Serialize;

use crate::engine::diagnostics::Diagnostics;

use super::topology::{DownstreamEnd, Network, UpstreamEnd};

/// One channel's results.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelOutput {
    /// The channel's name.
    pub name: String,
    /// Water-surface elevation (m), `[output time][node]`. At a junction
    /// end it is the junction's stage, which may lie below that end's bed
    /// when the channel is dry there (a side channel above bankfull).
    pub stage: Vec<Vec<f64>>,
    /// Discharge (m³/s), `[output time][node]`: at an end meeting a
    /// junction, the flow through the face next to it (into the channel
    /// at its upstream end, out of it at its downstream end); the inflow
    /// or the outflow at a boundary end; the mean of the two faces at an
    /// interior node.
    pub discharge: Vec<Vec<f64>>,
}

/// The volume budget of a network run (m³), as for a single channel.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct NetworkBalance {
    /// Inflow volume through every inflow boundary.
    pub inflow_volume: f64,
    /// Lateral inflow volume.
    pub lateral_volume: f64,
    /// Outflow volume at the outlet.
    pub outflow_volume: f64,
    /// Final minus initial storage of the whole network.
    pub storage_change: f64,
    /// (inflow + lateral − outflow − Δstorage) as % of inflow + lateral
    /// volume (of the initial storage when nothing flowed in).
    pub error_pct: f64,
}

/// A channel end at a junction and the discharge it carries over time.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct JunctionEnd {
    /// Channel index.
    pub channel: usize,
    /// True when the channel starts at the junction (flow leaves it), false
    /// when it ends there (flow arrives).
    pub leaves: bool,
    /// Discharge of that end, positive downstream along the channel
    /// (m³/s), one per output time.
    pub discharge: Vec<f64>,
}

/// Result of a network run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct NetworkResult {
    /// The requested output times (s).
    pub output_times: Vec<f64>,
    /// Per channel, in the network's order.
    pub channels: Vec<ChannelOutput>,
    /// Junction stages (m), `[output time][junction]`.
    pub junction_stage: Vec<Vec<f64>>,
    /// Stages at the last output time, per channel, for a hot start.
    pub final_state: Vec<Vec<f64>>,
    /// Volume budget.
    pub balance: NetworkBalance,
    /// Accepted steps.
    pub steps: usize,
    /// Rejected (halved) steps.
    pub rejected_steps: usize,
    /// Newton iterations of the accepted steps.
    pub newton_iterations: usize,
    /// What the single-channel solver reports, over every node of every
    /// channel (node `i` numbered channel after channel; chainages are
    /// each channel's own), without the applicability number.
    pub diagnostics: Diagnostics,
}

impl NetworkResult {
    /// The flow split at junction `j`: every channel end meeting it with
    /// its discharge over time. Arriving minus leaving discharges is the
    /// junction's storage change (small: half a segment of each end).
    pub fn junction_flows<H>(&self, net: &Network<'_, H>, j: usize) -> Vec<JunctionEnd> {
        let mut ends = Vec::new();
        for (ci, c) in net.channels().iter().enumerate() {
            let out = &self.channels[ci];
            if c.upstream == UpstreamEnd::Junction(j) {
                ends.push(JunctionEnd {
                    channel: ci,
                    leaves: true,
                    discharge: out.discharge.iter().map(|row| row[0]).collect(),
                });
            }
            if c.downstream == DownstreamEnd::Junction(j) {
                ends.push(JunctionEnd {
                    channel: ci,
                    leaves: false,
                    discharge: out.discharge.iter().map(|row| row[row.len() - 1]).collect(),
                });
            }
        }
        ends
    }
}

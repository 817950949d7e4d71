//! What a network run is given, and its boundary values in time.

use super::layout::Layout;
use super::topology::{Network, NetworkError, UpstreamEnd};
use super::work::Work;
use crate::engine::diffusive::{DownstreamBoundary, MIN_DEPTH, Options};
use crate::engine::props::Hydraulics;
use crate::engine::routing::LateralInflows;
use crate::engine::series::Cursor;

/// Where a network run starts from.
#[derive(Debug, Clone, PartialEq)]
pub enum NetworkInitial {
    /// The steady state for the inflows and laterals at the start time
    /// (found by implicit pseudo-time stepping of the same discrete
    /// equations, so a run whose inputs do not change stays put).
    Steady,
    /// Saved stages, one vector per channel, one value per node (m). A
    /// junction takes the value of the first channel end meeting it, in
    /// channel order; values below a bed are raised to bed + `MIN_DEPTH`.
    Hot(Vec<Vec<f64>>),
}

/// Everything one network run needs.
#[derive(Debug)]
pub struct NetworkProblem<'a, H> {
    /// The checked network.
    pub network: Network<'a, H>,
    /// The boundary at the outlet (the last node of the outlet channel).
    pub downstream: DownstreamBoundary,
    /// Initial water surface.
    pub initial: NetworkInitial,
    /// Time of the initial state (s).
    pub start_time: f64,
    /// Report times (s), strictly increasing, none before the start.
    pub output_times: Vec<f64>,
    /// Numerical options (the θ-method; see the module docs).
    pub options: Options,
}

impl<H> Clone for NetworkProblem<'_, H> {
    fn clone(&self) -> Self {
        Self {
            network: self.network.clone(),
            downstream: self.downstream.clone(),
            initial: self.initial.clone(),
            start_time: self.start_time,
            output_times: self.output_times.clone(),
            options: self.options.clone(),
        }
    }
}

/// The run's inputs read forward in time.
pub(super) struct Forcing<'a> {
    inflow: Vec<Option<Cursor<'a>>>,
    laterals: Vec<LateralInflows<'a>>,
    downstream: &'a DownstreamBoundary,
    stage_floor: f64,
}

impl<'a> Forcing<'a> {
    /// Check every channel's inflow and laterals and set up the cursors.
    pub(super) fn new<H: Hydraulics>(
        p: &'a NetworkProblem<'_, H>,
        lay: &Layout,
        w: &Work,
    ) -> Result<Self, NetworkError> {
        let channels = p.network.channels();
        let mut inflow = Vec::with_capacity(channels.len());
        let mut laterals = Vec::with_capacity(channels.len());
        for (ci, c) in channels.iter().enumerate() {
            let wrap = |source| NetworkError::Channel {
                channel: ci,
                source,
            };
            inflow.push(match &c.upstream {
                UpstreamEnd::Inflow(s) => {
                    crate::engine::routing::validate_inflow(s, || "upstream".into())
                        .map_err(wrap)?;
                    Some(s.cursor())
                }
                UpstreamEnd::Junction(_) => None,
            });
            laterals.push(LateralInflows::new(&c.reach, &c.laterals).map_err(wrap)?);
        }
        Ok(Self {
            inflow,
            laterals,
            downstream: &p.downstream,
            stage_floor: w.bed[lay.outlet_node] + MIN_DEPTH,
        })
    }

    /// Inflows and laterals at time `t` into `w.q_in` and `w.lat`.
    pub(super) fn fill(&mut self, t: f64, lay: &Layout, w: &mut Work) {
        for (q, c) in w.q_in.iter_mut().zip(&mut self.inflow) {
            *q = c.as_mut().map_or(0.0, |c| c.at(t));
        }
        for (ci, l) in self.laterals.iter_mut().enumerate() {
            l.fill(t, &mut w.lat[lay.nodes_of(ci)]);
        }
    }

    /// The imposed outlet stage at `t`, raised to the outlet bed plus
    /// `MIN_DEPTH`; `None` for a discharge boundary.
    pub(super) fn stage(&self, t: f64) -> Option<f64> {
        let s = match self.downstream {
            DownstreamBoundary::FixedStage { stage } => *stage,
            DownstreamBoundary::StageSeries(s) => s.at(t),
            _ => return None,
        };
        Some(s.max(self.stage_floor))
    }
}

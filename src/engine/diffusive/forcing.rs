//! The boundary values of a run in time: the upstream inflow, the laterals
//! and, for a stage boundary, the imposed downstream stage.

use super::MIN_DEPTH;
use super::problem::{DownstreamBoundary, Problem};
use crate::engine::props::Hydraulics;
use crate::engine::routing::{LateralInflows, RoutingError};
use crate::engine::series::Cursor;

/// The downstream stage a boundary imposes, if it imposes one.
enum ImposedStage<'a> {
    None,
    Fixed(f64),
    Series(Cursor<'a>),
}

/// The run's inputs read forward in time (cursors, so a run of many steps
/// does not search its series from the start each time).
pub(super) struct Forcing<'a> {
    upstream: Cursor<'a>,
    laterals: LateralInflows<'a>,
    stage: ImposedStage<'a>,
    /// Lowest stage the last node may be given (m).
    stage_floor: f64,
}

impl<'a> Forcing<'a> {
    /// Check the laterals and set up the cursors.
    pub(super) fn new<H: Hydraulics>(p: &'a Problem<'_, H>) -> Result<Self, RoutingError> {
        let nodes = p.reach.nodes();
        let stage = match &p.downstream {
            DownstreamBoundary::FixedStage { stage } => ImposedStage::Fixed(*stage),
            DownstreamBoundary::StageSeries(s) => ImposedStage::Series(s.cursor()),
            _ => ImposedStage::None,
        };
        Ok(Self {
            upstream: p.upstream.cursor(),
            laterals: LateralInflows::new(&p.reach, &p.laterals)?,
            stage,
            stage_floor: nodes[nodes.len() - 1].bed_elevation() + MIN_DEPTH,
        })
    }

    /// Inflow at the first node at time `t` (m³/s).
    pub(super) fn upstream(&mut self, t: f64) -> f64 {
        self.upstream.at(t)
    }

    /// Lateral inflow into each node at time `t` (m³/s).
    pub(super) fn laterals(&mut self, t: f64, out: &mut [f64]) {
        self.laterals.fill(t, out);
    }

    /// The imposed downstream stage at time `t`, raised to the last node's
    /// bed plus [`MIN_DEPTH`]; `None` for a discharge boundary.
    pub(super) fn stage(&mut self, t: f64) -> Option<f64> {
        let s = match &mut self.stage {
            ImposedStage::None => return None,
            ImposedStage::Fixed(s) => *s,
            ImposedStage::Series(c) => c.at(t),
        };
        Some(s.max(self.stage_floor))
    }
}

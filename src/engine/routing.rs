//! What both routing methods share: the reach they route through, point
//! inflows, the result of a run, its errors and the input checks.
//!
//! The diffusive-wave solver ([`crate::engine::diffusive`]) and the
//! Muskingum–Cunge cross-check ([`crate::engine::kinematic`]) take the same
//! [`Reach`] and [`Lateral`]s and return the same [`RoutingResult`], so a
//! caller switches methods without reshaping its data, and both reject the
//! same bad inputs with the same [`RoutingError`]s.

use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::engine::diagnostics::Diagnostics;
use crate::engine::props::Hydraulics;
use crate::engine::series::{Cursor, Series};

/// The computational nodes of a reach: chainage (m, increasing downstream)
/// and one [`Hydraulics`] per node. Borrowed, because property tables are
/// large and are shared between runs.
#[derive(Debug)]
pub struct Reach<'a, H> {
    chainage: &'a [f64],
    nodes: &'a [H],
}

impl<H> Clone for Reach<'_, H> {
    fn clone(&self) -> Self {
        *self
    }
}
impl<H> Copy for Reach<'_, H> {}

impl<'a, H: Hydraulics> Reach<'a, H> {
    /// Check and wrap: at least two nodes, equal lengths, finite strictly
    /// increasing chainages, finite bed elevations.
    pub fn new(chainage: &'a [f64], nodes: &'a [H]) -> Result<Self, RoutingError> {
        if chainage.len() != nodes.len() {
            return Err(RoutingError::LengthMismatch {
                what: "reach nodes",
                expected: chainage.len(),
                got: nodes.len(),
            });
        }
        if chainage.len() < 2 {
            return Err(RoutingError::TooFewNodes(chainage.len()));
        }
        for (i, &x) in chainage.iter().enumerate() {
            if !x.is_finite() {
                return Err(RoutingError::NonFinite {
                    what: "chainage",
                    index: i,
                });
            }
            if i > 0 && x <= chainage[i - 1] {
                return Err(RoutingError::ChainageNotIncreasing {
                    index: i,
                    chainage: x,
                });
            }
            if !nodes[i].bed_elevation().is_finite() {
                return Err(RoutingError::NonFinite {
                    what: "bed elevation",
                    index: i,
                });
            }
        }
        Ok(Self { chainage, nodes })
    }

    /// Number of nodes (≥ 2).
    pub fn len(&self) -> usize {
        self.chainage.len()
    }

    /// Always false (a reach has at least two nodes).
    pub fn is_empty(&self) -> bool {
        self.chainage.is_empty()
    }

    /// Node chainages (m).
    pub fn chainage(&self) -> &'a [f64] {
        self.chainage
    }

    /// Node hydraulics.
    pub fn nodes(&self) -> &'a [H] {
        self.nodes
    }

    /// Mean bed slope between the first and last node (positive downhill).
    pub fn mean_bed_slope(&self) -> f64 {
        let n = self.len();
        (self.nodes[0].bed_elevation() - self.nodes[n - 1].bed_elevation())
            / (self.chainage[n - 1] - self.chainage[0])
    }

    /// Control-volume length of each node: half-way to each neighbour.
    pub fn control_lengths(&self) -> Vec<f64> {
        let x = self.chainage;
        let n = x.len();
        (0..n)
            .map(|i| {
                let left = if i > 0 { x[i] - x[i - 1] } else { 0.0 };
                let right = if i + 1 < n { x[i + 1] - x[i] } else { 0.0 };
                0.5 * (left + right)
            })
            .collect()
    }

    /// Index of the node whose control volume contains chainage `x` (the
    /// upstream one on a boundary); `None` outside the reach.
    pub fn node_containing(&self, x: f64) -> Option<usize> {
        let c = self.chainage;
        let n = c.len();
        if !(x >= c[0] && x <= c[n - 1]) {
            return None;
        }
        // Number of faces (midpoints) strictly upstream of x.
        let mut i = 0;
        while i + 1 < n && x > 0.5 * (c[i] + c[i + 1]) {
            i += 1;
        }
        Some(i)
    }
}

/// A tributary or other point inflow (m³/s, non-negative) at a chainage.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Lateral {
    /// Chainage of the inflow (m); must lie within the reach.
    pub chainage: f64,
    /// Inflow hydrograph (m³/s).
    pub inflow: Series,
}

/// Result of a routing run (diffusive or kinematic).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RoutingResult {
    /// The requested output times (s).
    pub output_times: Vec<f64>,
    /// Water-surface elevation (m), `[output time][node]`.
    pub stage: Vec<Vec<f64>>,
    /// Discharge (m³/s), `[output time][node]`: the inflow at the first node,
    /// the mean of the two adjacent faces at interior nodes and the outflow
    /// at the last node.
    pub discharge: Vec<Vec<f64>>,
    /// Water-surface elevations at the last output time, for a hot start.
    pub final_state: Vec<f64>,
    /// How the run went.
    pub diagnostics: Diagnostics,
}

/// Why a step could not be solved.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum FailureReason {
    /// Newton did not reach the tolerance in the allowed iterations.
    NewtonNotConverged,
    /// A section returned non-finite properties or the state became
    /// non-finite.
    NonFinite,
    /// A zero pivot in the tridiagonal solve.
    SingularJacobian,
}

/// Errors of the routing solvers.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum RoutingError {
    /// Fewer than two nodes.
    #[error("a reach needs at least 2 nodes, got {0}")]
    TooFewNodes(usize),
    /// Two inputs that must have the same length do not.
    #[error("{what}: expected {expected} values, got {got}")]
    LengthMismatch {
        /// Which input.
        what: &'static str,
        /// Expected length.
        expected: usize,
        /// Actual length.
        got: usize,
    },
    /// Chainages must increase strictly downstream.
    #[error("chainage must increase strictly: node {index} at {chainage} m")]
    ChainageNotIncreasing {
        /// Node index.
        index: usize,
        /// Its chainage (m).
        chainage: f64,
    },
    /// A NaN or infinite input.
    #[error("{what} at index {index} is not finite")]
    NonFinite {
        /// Which input.
        what: &'static str,
        /// Index within it.
        index: usize,
    },
    /// Inflows must be non-negative.
    #[error("{what} inflow is negative ({value} m³/s at t = {time} s)")]
    NegativeInflow {
        /// `"upstream"` or `"lateral N"`.
        what: String,
        /// Time of the sample (s).
        time: f64,
        /// Its value (m³/s).
        value: f64,
    },
    /// A lateral inflow outside the reach.
    #[error("lateral {index} at chainage {chainage} m is outside the reach")]
    LateralOutsideReach {
        /// Lateral index.
        index: usize,
        /// Its chainage (m).
        chainage: f64,
    },
    /// An option is out of range.
    #[error("option {name} = {value} is invalid: {reason}")]
    InvalidOption {
        /// Option name.
        name: &'static str,
        /// Its value.
        value: f64,
        /// The allowed range.
        reason: &'static str,
    },
    /// No output times were requested.
    #[error("no output times requested")]
    NoOutputTimes,
    /// Output times not increasing or before the start.
    #[error(
        "output time {index} ({time} s) must be after the previous one and not before the start ({start} s)"
    )]
    BadOutputTime {
        /// Index.
        index: usize,
        /// Its value (s).
        time: f64,
        /// Start time (s).
        start: f64,
    },
    /// A malformed downstream boundary.
    #[error("invalid downstream boundary: {0}")]
    InvalidBoundary(String),
    /// The steady initial profile could not be found at a node.
    #[error(
        "no steady water level found at node {node} (chainage {chainage} m) for {discharge} m³/s"
    )]
    SteadyProfile {
        /// Node index.
        node: usize,
        /// Its chainage (m).
        chainage: f64,
        /// The discharge that could not be conveyed (m³/s).
        discharge: f64,
    },
    /// The time step fell below `dt_min` without convergence.
    #[error(
        "no convergence at t = {time} s with dt = {dt} s (below dt_min) at node {node} \
         (chainage {chainage} m): {reason:?}"
    )]
    NoConvergence {
        /// Start of the failed step (s).
        time: f64,
        /// Last step size tried (s).
        dt: f64,
        /// Node with the largest Newton update, or the first non-finite one.
        node: usize,
        /// Its chainage (m).
        chainage: f64,
        /// What went wrong.
        reason: FailureReason,
    },
    /// `Options::max_steps` was exhausted.
    #[error("step limit of {limit} reached at t = {time} s")]
    TooManySteps {
        /// The limit.
        limit: usize,
        /// Simulation time reached (s).
        time: f64,
    },
}

/// Check what every run needs whatever the method: output times after the
/// start and strictly increasing, and a non-negative upstream inflow.
pub(crate) fn check_run_inputs(
    start: f64,
    output_times: &[f64],
    upstream: &Series,
) -> Result<(), RoutingError> {
    validate_output_times(start, output_times)?;
    validate_inflow(upstream, || "upstream".to_string())
}

/// Check the output times against the start time.
pub(crate) fn validate_output_times(start: f64, times: &[f64]) -> Result<(), RoutingError> {
    if !start.is_finite() {
        return Err(RoutingError::NonFinite {
            what: "start time",
            index: 0,
        });
    }
    if times.is_empty() {
        return Err(RoutingError::NoOutputTimes);
    }
    let mut previous = f64::NEG_INFINITY;
    for (index, &time) in times.iter().enumerate() {
        if !time.is_finite() {
            return Err(RoutingError::NonFinite {
                what: "output time",
                index,
            });
        }
        if time <= previous || time < start {
            return Err(RoutingError::BadOutputTime { index, time, start });
        }
        previous = time;
    }
    Ok(())
}

/// Reject negative inflow samples (a `Series` is already finite).
pub(crate) fn validate_inflow(
    series: &Series,
    what: impl Fn() -> String,
) -> Result<(), RoutingError> {
    for (&time, &value) in series.times().iter().zip(series.values()) {
        if value < 0.0 {
            return Err(RoutingError::NegativeInflow {
                what: what(),
                time,
                value,
            });
        }
    }
    Ok(())
}

/// The laterals of a run, each mapped to the node whose control volume
/// holds it, read forward in time.
pub(crate) struct LateralInflows<'a> {
    cursors: Vec<Cursor<'a>>,
    nodes: Vec<usize>,
}

impl<'a> LateralInflows<'a> {
    /// Check the laterals (non-negative, inside the reach) and map them to
    /// their nodes.
    pub(crate) fn new<H: Hydraulics>(
        reach: &Reach<'_, H>,
        laterals: &'a [Lateral],
    ) -> Result<Self, RoutingError> {
        let nodes = laterals
            .iter()
            .enumerate()
            .map(|(index, lat)| {
                validate_inflow(&lat.inflow, || format!("lateral {index}"))?;
                reach
                    .node_containing(lat.chainage)
                    .ok_or(RoutingError::LateralOutsideReach {
                        index,
                        chainage: lat.chainage,
                    })
            })
            .collect::<Result<_, _>>()?;
        Ok(Self {
            cursors: laterals.iter().map(|l| l.inflow.cursor()).collect(),
            nodes,
        })
    }

    /// Lateral inflow into each node at time `t` (m³/s); laterals sharing a
    /// node add up.
    pub(crate) fn fill(&mut self, t: f64, out: &mut [f64]) {
        out.fill(0.0);
        for (c, &node) in self.cursors.iter_mut().zip(&self.nodes) {
            out[node] += c.at(t);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::test_sections::uniform_rect;

    #[test]
    fn reach_rejects_too_few_mismatched_or_disordered_nodes() {
        let (x, nodes) = uniform_rect(5, 100.0, 1e-3, 10.0);
        assert!(matches!(
            Reach::new(&x[..1], &nodes[..1]),
            Err(RoutingError::TooFewNodes(1))
        ));
        assert!(matches!(
            Reach::new(&x, &nodes[..4]),
            Err(RoutingError::LengthMismatch { .. })
        ));
        let bad_x = [0.0, 100.0, 100.0, 300.0, 400.0];
        assert!(matches!(
            Reach::new(&bad_x, &nodes),
            Err(RoutingError::ChainageNotIncreasing { index: 2, .. })
        ));
        let nan_x = [0.0, f64::NAN, 200.0, 300.0, 400.0];
        assert!(matches!(
            Reach::new(&nan_x, &nodes),
            Err(RoutingError::NonFinite { .. })
        ));
    }

    #[test]
    fn lateral_goes_to_containing_control_volume() {
        let (x, nodes) = uniform_rect(4, 100.0, 1e-3, 10.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        assert_eq!(reach.node_containing(0.0), Some(0));
        assert_eq!(reach.node_containing(50.0), Some(0));
        assert_eq!(reach.node_containing(50.1), Some(1));
        assert_eq!(reach.node_containing(300.0), Some(3));
        assert_eq!(reach.node_containing(300.1), None);
        assert_eq!(reach.control_lengths(), vec![50.0, 100.0, 100.0, 50.0]);
    }

    #[test]
    fn error_messages_say_where() {
        let e = RoutingError::NoConvergence {
            time: 3600.0,
            dt: 0.25,
            node: 7,
            chainage: 700.0,
            reason: FailureReason::NewtonNotConverged,
        };
        let s = e.to_string();
        assert!(
            s.contains("node 7") && s.contains("700") && s.contains("3600"),
            "{s}"
        );
    }
}

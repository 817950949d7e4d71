//! Implicit diffusive-wave routing: the default forecasting method.
//!
//! # Model
//!
//! The diffusive-wave form of the Saint-Venant equations drops the inertia
//! terms of the momentum equation and keeps the pressure (water-surface
//! slope) and friction terms, so the momentum balance becomes Manning's law
//! with the friction slope equal to the water-surface slope:
//!
//! ```text
//! continuity:  ∂A_s/∂t + ∂Q/∂x = q_lat
//! momentum:    Q = K(z) · sign(S) · √|S|,   S = −∂z/∂x
//! ```
//!
//! Unlike the kinematic wave it carries backwater (a downstream stage
//! boundary is felt upstream) and physical attenuation, and unlike the full
//! dynamic equations it stays well behaved on steep, shallow and drying
//! reaches. It is acceptable when inertia is small, which the Ponce–Li–Simons
//! applicability number in [`Diagnostics`] checks.
//!
//! # Discretisation
//!
//! * Unknowns are water-surface elevations `z_i` at the nodes.
//! * Each node owns a control volume reaching half-way to its neighbours (the
//!   end nodes own half a segment). Its storage is `A_s(z_i) · L_i`: the
//!   section's total wetted area (storage-only zones included) times the
//!   control-volume length.
//! * Between nodes `i` and `i+1` a face carries
//!   `Q = φ · K_f · S / (S² + ε²)^¼` with `S = (z_i − z_{i+1}) / Δx`.
//!   - `K_f = min(½ (K(z_i) + K(z_{i+1})), 2 K_donor)`: the arithmetic mean
//!     of the node conveyances, capped at twice the conveyance of the donor
//!     node (the one with the higher stage; [`DONOR_CAP`]). For a steady
//!     profile the mean makes the face relation a second-order
//!     (trapezoid-like) approximation of `dz/dx = −Q²/K²`, and a face next to
//!     a dry node still conveys water into it (wetting). The cap only acts
//!     where neighbouring conveyances differ more than about twofold (it is
//!     entered through a C¹ blend from 0.8 × cap, and the donor is blended
//!     across S = 0 over |S| < 10 ε, so Newton does not cycle between
//!     branches), typically a thin node at the top of a steep drop (a
//!     riffle): without it that node could pass any discharge on the
//!     strength of its deep neighbour's conveyance while staying nearly dry,
//!     with absurd velocities.
//!   - The `(S² + ε²)^¼` form equals `√|S|` for `|S| ≫ ε` and turns linear
//!     for `|S| ≪ ε`, so `dQ/dz` stays finite at zero slope (where `√|S|`
//!     has an infinite derivative and Newton's method would stall). ε is
//!     [`Options::slope_regularisation`]; the relative change is
//!     `1 − (1 + ε²/S²)^(−¼)`, so at the default 1e-7 the discharge differs
//!     from `√|S|` by under 0.01 % for slopes above 5e-6 and 0.25 % at 1e-6.
//!   - `φ` is a smooth ramp (0 → 1 over [`DRY_RAMP_DEPTH`] above
//!     [`MIN_DEPTH`]) on the depth of the *donor* node (the one with the
//!     higher stage). It stops a nearly dry node from being drained below its
//!     bed, which is what makes wetting and drying work without negative
//!     depths. It is exactly 1 once the donor is a centimetre deep, so it does
//!     not touch normal flows.
//! * Time stepping is the θ-method (θ ∈ [0.55, 1]); the nonlinear system of
//!   each step is solved by Newton's method whose Jacobian is tridiagonal
//!   (each residual involves a node and its two neighbours), solved by the
//!   Thomas algorithm in O(N). Newton starts from the previous state
//!   extrapolated with the previous step's rate, updates are scaled to at
//!   most 2 m per iteration, and stages are clipped to `bed + MIN_DEPTH`
//!   after each iteration (with the donor ramp the clip is rarely active;
//!   when it is, it shows in the mass balance).
//! * The upstream node receives the inflow hydrograph. The downstream node
//!   either releases a discharge set by its stage (normal depth or a rating)
//!   or has its stage imposed (fixed or series); in the latter case its
//!   outflow is whatever closes that node's continuity equation, so the mass
//!   balance stays exact.
//! * Lateral inflows are point sources into the control volume that contains
//!   their chainage (the upstream one at a tie).
//!
//! # Time step
//!
//! The implicit scheme is stable at any step, so the step is chosen for
//! Newton convergence: it is halved and the step retried when Newton fails or
//! produces a non-finite state, and grown by 1.5 after easy convergences,
//! within [`Options::dt_min`], [`Options::dt_max`]. Steps land exactly on
//! output times that are at least a step apart; outputs closer together than
//! the step are interpolated linearly in time inside it (dense output), so
//! minute-by-minute output does not force minute-long steps. Accuracy is
//! set by `dt_max` (numerical diffusion of the θ-scheme is about
//! (θ − ½) c² Δt, common practice) and the Newton tolerance.
//!
//! # Inputs outside their range
//!
//! Series are held at their end values outside their sampled range, so output
//! times beyond the end of the inflow forecast are allowed (the last inflow is
//! held). Output times before `start_time` are rejected.

use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::engine::GRAVITY;
use crate::engine::props::{Hydraulics, Props};
use crate::engine::series::{Cursor, Series};

/// Smallest depth a node is allowed to have (m). Stages are clipped to
/// `bed + MIN_DEPTH` so that no node ever sits below its bed.
pub const MIN_DEPTH: f64 = 1e-4;
/// Depth over which a donor node's outflow ramps from zero to full (m).
pub const DRY_RAMP_DEPTH: f64 = 0.01;
/// A node shallower than this (m) is reported as dry.
pub const DRY_DEPTH: f64 = 1e-3;
/// The face conveyance is at most this multiple of the donor node's own
/// conveyance: a nearly dry node below a steep drop must not pass a large
/// discharge on the strength of its neighbour's conveyance.
pub const DONOR_CAP: f64 = 2.0;
/// Half-width of the blend into the cap, as a fraction of the cap.
const CAP_BLEND: f64 = 0.2;
/// Lower bound on the storage width used in the Jacobian only (m), so a
/// dry node with a zero-width bed keeps a non-singular Newton matrix. It does
/// not change the converged solution.
const JACOBIAN_WIDTH_FLOOR: f64 = 0.01;
/// Largest stage change one Newton iteration may make (m); larger updates
/// are scaled down, which keeps the first iterations of a big step from
/// overshooting into dry or absurd states.
const NEWTON_STEP_CAP: f64 = 2.0;
/// Froude number above which a warning is raised.
pub const FROUDE_WARN: f64 = 0.7;
/// Froude number above which the warning says the flow is near critical.
pub const FROUDE_STRONG: f64 = 0.9;
/// Mass-balance error (%) above which a warning is raised.
pub const MASS_BALANCE_WARN_PCT: f64 = 0.5;
/// Ponce–Li–Simons (1978) threshold for diffusion waves: T·S0·√(g/d0) ≥ 30
/// (from memory).
pub const DIFFUSION_APPLICABILITY_THRESHOLD: f64 = 30.0;

// ---------------------------------------------------------------------------
// Inputs
// ---------------------------------------------------------------------------

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

/// What happens at the downstream end of the reach.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum DownstreamBoundary {
    /// Outflow is the normal-flow discharge at the last node's stage for the
    /// given friction slope: `Q = K(z) √S_f`. Place it far enough downstream
    /// of the points of interest that its influence has faded.
    NormalDepth {
        /// Friction slope (positive, dimensionless).
        friction_slope: f64,
    },
    /// The stage of the last node is held at a constant (m).
    FixedStage {
        /// Water-surface elevation (m).
        stage: f64,
    },
    /// The stage of the last node follows a series (m).
    StageSeries(Series),
    /// Outflow from a stage–discharge rating: `(stage, discharge)` pairs with
    /// stages strictly increasing and discharges non-decreasing. Below the
    /// first stage the first discharge is held; above the last the last
    /// segment is extended linearly.
    Rating {
        /// `(stage m, discharge m³/s)` pairs.
        table: Vec<(f64, f64)>,
    },
}

impl DownstreamBoundary {
    fn is_stage(&self) -> bool {
        matches!(self, Self::FixedStage { .. } | Self::StageSeries(_))
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

/// Where the run starts from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", content = "stages", rename_all = "snake_case")]
pub enum InitialState {
    /// The steady profile for the inflow and laterals at the start time,
    /// computed from the downstream boundary upstream with the same discrete
    /// face relations the unsteady solver uses (so a steady run stays put).
    Steady,
    /// Saved water-surface elevations, one per node (m). Values below a
    /// node's bed are raised to `bed + MIN_DEPTH`.
    Hot(Vec<f64>),
}

/// Numerical options. Defaults suit reaches of a few to a few hundred
/// kilometres with node spacing of tens to hundreds of metres.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Options {
    /// Time weighting θ ∈ [0.55, 1]: 0.5 would be second order but
    /// undamped; slightly above ½ damps spurious oscillations while adding
    /// little numerical diffusion (common practice).
    pub theta: f64,
    /// First time step tried (s).
    pub dt_initial: f64,
    /// Smallest time step before giving up (s).
    pub dt_min: f64,
    /// Largest time step (s); controls accuracy.
    pub dt_max: f64,
    /// Newton convergence: largest stage update (m).
    pub newton_tol: f64,
    /// Newton iterations before the step is halved.
    pub max_newton_iter: usize,
    /// ε of the zero-slope regularisation (dimensionless slope).
    pub slope_regularisation: f64,
    /// Hard cap on accepted plus rejected steps, so no input can make a run
    /// loop for ever.
    pub max_steps: usize,
}

impl Default for Options {
    fn default() -> Self {
        Self {
            theta: 0.6,
            dt_initial: 60.0,
            dt_min: 0.5,
            dt_max: 600.0,
            newton_tol: 1e-4,
            max_newton_iter: 12,
            slope_regularisation: 1e-7,
            max_steps: 2_000_000,
        }
    }
}

/// Everything one diffusive-wave run needs.
#[derive(Debug)]
pub struct Problem<'a, H> {
    /// Nodes and their hydraulics.
    pub reach: Reach<'a, H>,
    /// Inflow at the first node (m³/s, non-negative).
    pub upstream: Series,
    /// Downstream boundary condition.
    pub downstream: DownstreamBoundary,
    /// Point inflows along the reach.
    pub laterals: Vec<Lateral>,
    /// Initial water surface.
    pub initial: InitialState,
    /// Time of the initial state (s).
    pub start_time: f64,
    /// Times at which to report stage and discharge (s), strictly
    /// increasing, none before `start_time`. One equal to `start_time`
    /// reports the initial state.
    pub output_times: Vec<f64>,
    /// Numerical options.
    pub options: Options,
}

impl<H> Clone for Problem<'_, H> {
    fn clone(&self) -> Self {
        Self {
            reach: self.reach,
            upstream: self.upstream.clone(),
            downstream: self.downstream.clone(),
            laterals: self.laterals.clone(),
            initial: self.initial.clone(),
            start_time: self.start_time,
            output_times: self.output_times.clone(),
            options: self.options.clone(),
        }
    }
}

// ---------------------------------------------------------------------------
// Outputs
// ---------------------------------------------------------------------------

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

/// Numbers a forecaster needs to judge a run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Diagnostics {
    /// (inflow + lateral − outflow − Δstorage) as % of inflow + lateral
    /// volume (of the initial storage when nothing flowed in). Volumes are
    /// integrated with the same θ-weighting as the equations.
    pub mass_balance_error_pct: f64,
    /// Upstream inflow volume (m³).
    pub inflow_volume: f64,
    /// Lateral inflow volume (m³).
    pub lateral_volume: f64,
    /// Outflow volume at the downstream end (m³).
    pub outflow_volume: f64,
    /// Final minus initial storage (m³).
    pub storage_change: f64,
    /// Largest Froude number at any node after any accepted step, among
    /// nodes deeper than the drying ramp (about 1 cm).
    pub max_froude: f64,
    /// Where it occurred (m).
    pub max_froude_chainage: f64,
    /// When it occurred (s).
    pub max_froude_time: f64,
    /// Ponce–Li–Simons dimensionless wave period. For the diffusive solver
    /// `T·S0·√(g/d0)`; for the kinematic solver `T·S0·u0/d0`. `T` is the
    /// duration of the upstream hydrograph within the run (the run length if
    /// the hydrograph is a single value), `S0` the mean bed slope between the
    /// end nodes, `d0` the mean hydraulic depth and `u0` the mean velocity of
    /// the initial state. `None` when the slope or depth is not positive.
    pub applicability_number: Option<f64>,
    /// The threshold the number is compared with (30 diffusive, 171
    /// kinematic; Ponce, Li & Simons 1978, from memory).
    pub applicability_threshold: f64,
    /// Nodes that were shallower than [`DRY_DEPTH`] at some time.
    pub dry_nodes: Vec<usize>,
    /// Smallest accepted step (s).
    pub dt_min_used: f64,
    /// Largest accepted step (s).
    pub dt_max_used: f64,
    /// Accepted steps.
    pub steps: usize,
    /// Newton iterations over all accepted steps.
    pub newton_iterations_total: usize,
    /// Most Newton iterations in one accepted step.
    pub max_newton_iterations: usize,
    /// Steps rejected and retried with half the step.
    pub rejected_steps: usize,
    /// Nodes whose section was extended with vertical walls at some time.
    pub extrapolated_nodes: Vec<usize>,
    /// Their chainages (m).
    pub extrapolated_chainages: Vec<f64>,
    /// Things the forecaster should know.
    pub warnings: Vec<Warning>,
    /// Wall-clock time of the run (s), filled by the caller: the engine has
    /// no clock.
    pub wall_time_s: Option<f64>,
}

/// Something in a run that deserves the forecaster's attention.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Warning {
    /// Froude number above [`FROUDE_WARN`]: inertia, which the diffusive
    /// wave neglects, starts to matter.
    FroudeHigh {
        /// Largest Froude number.
        froude: f64,
        /// Where (m).
        chainage: f64,
        /// When (s).
        time: f64,
    },
    /// Froude number above [`FROUDE_STRONG`]: near-critical flow; results
    /// near this location are unreliable.
    FroudeNearCritical {
        /// Largest Froude number.
        froude: f64,
        /// Where (m).
        chainage: f64,
        /// When (s).
        time: f64,
    },
    /// The applicability number is below its threshold: the wave is too
    /// short or the river too flat/deep for the method.
    LowApplicability {
        /// Method the number refers to.
        method: &'static str,
        /// The number.
        number: f64,
        /// The threshold.
        threshold: f64,
    },
    /// Stages rose above the surveyed sections, which were extended with
    /// vertical walls.
    Extrapolated {
        /// Chainages (m) of the affected nodes.
        chainages: Vec<f64>,
    },
    /// Some nodes ran (nearly) dry.
    DryNodes {
        /// How many.
        count: usize,
        /// Chainage of the first (m).
        first_chainage: f64,
    },
    /// Volume was not conserved to [`MASS_BALANCE_WARN_PCT`].
    MassBalance {
        /// Error in % of inflow volume.
        error_pct: f64,
    },
}

impl std::fmt::Display for Warning {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Warning::FroudeHigh {
                froude,
                chainage,
                time,
            } => write!(
                f,
                "Froude number reached {froude:.2} at chainage {chainage:.0} m (t = {time:.0} s): \
                 inertia is no longer negligible there"
            ),
            Warning::FroudeNearCritical {
                froude,
                chainage,
                time,
            } => write!(
                f,
                "Froude number reached {froude:.2} at chainage {chainage:.0} m (t = {time:.0} s): \
                 near-critical flow, stages there are unreliable"
            ),
            Warning::LowApplicability {
                method,
                number,
                threshold,
            } => write!(
                f,
                "{method} applicability number {number:.1} is below {threshold:.0}: \
                 the wave is too short or the reach too flat or deep for this method"
            ),
            Warning::Extrapolated { chainages } => {
                write!(
                    f,
                    "stage rose above the surveyed section at {} node(s) (first at chainage {:.0} m); \
                     vertical walls were assumed",
                    chainages.len(),
                    chainages.first().copied().unwrap_or(f64::NAN)
                )
            }
            Warning::DryNodes {
                count,
                first_chainage,
            } => write!(
                f,
                "{count} node(s) ran dry (first at chainage {first_chainage:.0} m)"
            ),
            Warning::MassBalance { error_pct } => write!(
                f,
                "mass balance error {error_pct:.3} % of inflow volume exceeds {MASS_BALANCE_WARN_PCT} %"
            ),
        }
    }
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

// ---------------------------------------------------------------------------
// Validation helpers shared with the kinematic solver
// ---------------------------------------------------------------------------

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

/// Validate laterals and map each to the node whose control volume holds it.
pub(crate) fn lateral_nodes<H: Hydraulics>(
    reach: &Reach<'_, H>,
    laterals: &[Lateral],
) -> Result<Vec<usize>, RoutingError> {
    laterals
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
        .collect()
}

/// Duration used for the applicability number: the part of the upstream
/// hydrograph inside the run, or the run length for a constant inflow.
pub(crate) fn wave_duration(upstream: &Series, start: f64, end: f64) -> f64 {
    let d = upstream.end().min(end) - upstream.start().max(start);
    if d > 0.0 { d } else { end - start }
}

fn check_options(o: &Options) -> Result<(), RoutingError> {
    let bad = |name, value, reason| {
        Err(RoutingError::InvalidOption {
            name,
            value,
            reason,
        })
    };
    if !(0.55..=1.0).contains(&o.theta) {
        return bad("theta", o.theta, "must lie in [0.55, 1]");
    }
    if !(o.dt_min.is_finite() && o.dt_min > 0.0) {
        return bad("dt_min", o.dt_min, "must be positive");
    }
    if !(o.dt_max.is_finite() && o.dt_max >= o.dt_min) {
        return bad("dt_max", o.dt_max, "must be finite and at least dt_min");
    }
    if !(o.dt_initial >= o.dt_min && o.dt_initial <= o.dt_max) {
        return bad("dt_initial", o.dt_initial, "must lie in [dt_min, dt_max]");
    }
    if !(o.newton_tol.is_finite() && o.newton_tol > 0.0) {
        return bad("newton_tol", o.newton_tol, "must be positive");
    }
    if o.max_newton_iter == 0 {
        return bad("max_newton_iter", 0.0, "must be at least 1");
    }
    if !(o.slope_regularisation.is_finite() && o.slope_regularisation > 0.0) {
        return bad(
            "slope_regularisation",
            o.slope_regularisation,
            "must be positive",
        );
    }
    if o.max_steps == 0 {
        return bad("max_steps", 0.0, "must be at least 1");
    }
    Ok(())
}

fn check_boundary(b: &DownstreamBoundary) -> Result<(), RoutingError> {
    match b {
        DownstreamBoundary::NormalDepth { friction_slope } => {
            if !(friction_slope.is_finite() && *friction_slope > 0.0) {
                return Err(RoutingError::InvalidBoundary(format!(
                    "normal-depth friction slope must be positive, got {friction_slope}"
                )));
            }
        }
        DownstreamBoundary::FixedStage { stage } => {
            if !stage.is_finite() {
                return Err(RoutingError::InvalidBoundary(
                    "fixed stage is not finite".into(),
                ));
            }
        }
        DownstreamBoundary::StageSeries(_) => {}
        DownstreamBoundary::Rating { table } => {
            if table.len() < 2 {
                return Err(RoutingError::InvalidBoundary(
                    "a rating needs at least two points".into(),
                ));
            }
            for (i, &(z, q)) in table.iter().enumerate() {
                if !(z.is_finite() && q.is_finite() && q >= 0.0) {
                    return Err(RoutingError::InvalidBoundary(format!(
                        "rating point {i} must be finite with non-negative discharge"
                    )));
                }
                if i > 0 && (z <= table[i - 1].0 || q < table[i - 1].1) {
                    return Err(RoutingError::InvalidBoundary(format!(
                        "rating point {i}: stages must increase strictly and discharges must not decrease"
                    )));
                }
            }
            let n = table.len();
            if table[n - 1].1 <= table[n - 2].1 {
                return Err(RoutingError::InvalidBoundary(
                    "the last rating segment must rise so it can be extended".into(),
                ));
            }
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------
// Local relations
// ---------------------------------------------------------------------------

/// Smooth ramp of the donor depth: 0 at `MIN_DEPTH`, 1 at `MIN_DEPTH +
/// DRY_RAMP_DEPTH`, C¹ (smoothstep). Returns `(φ, dφ/dh)`.
#[inline]
fn dry_ramp(depth: f64) -> (f64, f64) {
    let x = (depth - MIN_DEPTH) / DRY_RAMP_DEPTH;
    if x <= 0.0 {
        (0.0, 0.0)
    } else if x >= 1.0 {
        (1.0, 0.0)
    } else {
        (
            x * x * (3.0 - 2.0 * x),
            6.0 * x * (1.0 - x) / DRY_RAMP_DEPTH,
        )
    }
}

/// Face discharge from node `a` to node `b` (downstream) and its derivatives
/// with respect to `z_a` and `z_b`. See the module docs for the formula.
#[inline]
fn face_flow(pa: &Props, pb: &Props, bed_a: f64, bed_b: f64, dx: f64, eps: f64) -> (f64, f64, f64) {
    let s = (pa.z - pb.z) / dx;
    let s2e = s * s + eps * eps;
    let quarter = s2e.sqrt().sqrt(); // (S² + ε²)^¼
    let r = s / quarter;
    let dr = (0.5 * s * s + eps * eps) / (s2e * quarter); // dr/dS
    let donor_is_a = s >= 0.0;
    let donor_bed = if donor_is_a { bed_a } else { bed_b };
    let donor_z = if donor_is_a { pa.z } else { pb.z };
    // Face conveyance: the mean of the two nodes, capped at DONOR_CAP times
    // the donor's (see the module docs). The donor conveyance is blended
    // smoothly across S = 0 (over |S| ~ 10 ε) and the cap is entered through
    // a C¹ quadratic blend over ±20 % of the cap, so Newton does not cycle
    // between branches in a pool; below 0.8 × cap the plain mean is used.
    let sc = 10.0 * eps;
    // σ: +1 when a is the donor, −1 when b is, a C¹ cubic in between.
    let (sigma, dsigma) = if s >= sc {
        (1.0, 0.0)
    } else if s <= -sc {
        (-1.0, 0.0)
    } else {
        let y = s / sc;
        (y * (1.5 - 0.5 * y * y), 1.5 * (1.0 - y * y) / (sc * dx))
    };
    let (ka, kb) = (pa.conveyance, pb.conveyance);
    let k_donor = 0.5 * (1.0 + sigma) * ka + 0.5 * (1.0 - sigma) * kb;
    let dkd_a = 0.5 * (1.0 + sigma) * pa.dconveyance_dz + 0.5 * (ka - kb) * dsigma;
    let dkd_b = 0.5 * (1.0 - sigma) * pb.dconveyance_dz - 0.5 * (ka - kb) * dsigma;
    let mean = 0.5 * (ka + kb);
    let cap = DONOR_CAP * k_donor;
    let u = mean - (1.0 - CAP_BLEND) * cap; // distance into the blend band
    let (kf, dk_dmean, dk_dcap) = if u <= 0.0 {
        (mean, 1.0, 0.0)
    } else if u >= 2.0 * CAP_BLEND * cap {
        (cap, 0.0, 1.0)
    } else {
        let w = 4.0 * CAP_BLEND * cap;
        (
            mean - u * u / w,
            1.0 - 2.0 * u / w,
            2.0 * u * (1.0 - CAP_BLEND) / w + u * u / (w * cap),
        )
    };
    let dkfa = 0.5 * dk_dmean * pa.dconveyance_dz + dk_dcap * DONOR_CAP * dkd_a;
    let dkfb = 0.5 * dk_dmean * pb.dconveyance_dz + dk_dcap * DONOR_CAP * dkd_b;
    let (phi, dphi) = dry_ramp(donor_z - donor_bed);
    let q = phi * kf * r;
    let mut dqa = phi * (dkfa * r + kf * dr / dx);
    let mut dqb = phi * (dkfb * r - kf * dr / dx);
    if donor_is_a {
        dqa += dphi * kf * r;
    } else {
        dqb += dphi * kf * r;
    }
    (q, dqa, dqb)
}

/// Rating discharge and its derivative at stage `z` (table validated).
fn rating_flow(table: &[(f64, f64)], z: f64) -> (f64, f64) {
    let n = table.len();
    if z <= table[0].0 {
        return (table[0].1, 0.0);
    }
    // Segment index: last i with table[i].0 <= z, capped to the last segment.
    let hi = table.partition_point(|&(zi, _)| zi <= z).min(n - 1);
    let (z0, q0) = table[hi - 1];
    let (z1, q1) = table[hi];
    let slope = (q1 - q0) / (z1 - z0);
    (q0 + slope * (z - z0), slope)
}

/// Outflow through a discharge-type downstream boundary and its derivative.
/// Zero for stage boundaries (their outflow comes from continuity).
fn boundary_outflow(b: &DownstreamBoundary, p: &Props, bed: f64) -> (f64, f64) {
    let (phi, dphi) = dry_ramp(p.z - bed);
    match b {
        DownstreamBoundary::NormalDepth { friction_slope } => {
            let rs = friction_slope.sqrt();
            (
                phi * p.conveyance * rs,
                (phi * p.dconveyance_dz + dphi * p.conveyance) * rs,
            )
        }
        DownstreamBoundary::Rating { table } => {
            let (q, dq) = rating_flow(table, p.z);
            (phi * q, phi * dq + dphi * q)
        }
        _ => (0.0, 0.0),
    }
}

/// Find `z ≥ lo` with `f(z) = target` for a non-decreasing `f` with
/// `f(lo) ≤ target`, by bracket expansion and bisection to 1e-9 m.
/// `None` when no bracket is found or `f` is not finite.
pub(crate) fn solve_increasing(mut f: impl FnMut(f64) -> f64, lo: f64, target: f64) -> Option<f64> {
    let f_lo = f(lo);
    if !f_lo.is_finite() {
        return None;
    }
    if f_lo >= target {
        return Some(lo);
    }
    let mut a = lo;
    let mut step = 0.5;
    let mut b = lo + step;
    let mut found = false;
    for _ in 0..60 {
        let fb = f(b);
        if !fb.is_finite() {
            return None;
        }
        if fb >= target {
            found = true;
            break;
        }
        a = b;
        step *= 2.0;
        b = lo + step;
    }
    if !found {
        return None;
    }
    for _ in 0..200 {
        if b - a <= 1e-9 {
            break;
        }
        let m = 0.5 * (a + b);
        let fm = f(m);
        if !fm.is_finite() {
            return None;
        }
        if fm >= target {
            b = m;
        } else {
            a = m;
        }
    }
    Some(0.5 * (a + b))
}

/// Solve a tridiagonal system by the Thomas algorithm (no pivoting).
///
/// Row `i` reads `lower[i]·x[i−1] + diag[i]·x[i] + upper[i]·x[i+1] =
/// rhs[i]` (`lower[0]` and `upper[n−1]` are ignored). The solution
/// overwrites `rhs`; `work` is scratch of the same length. Returns the row
/// of a zero or non-finite pivot on failure. Without pivoting it is exact for
/// the diagonally dominant systems the θ-scheme produces at small steps and
/// in practice for larger ones; a failed pivot makes the caller halve the
/// step, which restores dominance through the storage term.
pub(crate) fn solve_tridiagonal(
    lower: &[f64],
    diag: &[f64],
    upper: &[f64],
    rhs: &mut [f64],
    work: &mut [f64],
) -> Result<(), usize> {
    let n = rhs.len();
    if n == 0 {
        return Ok(());
    }
    let mut beta = diag[0];
    if beta == 0.0 || !beta.is_finite() {
        return Err(0);
    }
    work[0] = upper[0] / beta;
    rhs[0] /= beta;
    for i in 1..n {
        beta = diag[i] - lower[i] * work[i - 1];
        if beta == 0.0 || !beta.is_finite() {
            return Err(i);
        }
        work[i] = if i + 1 < n { upper[i] / beta } else { 0.0 };
        rhs[i] = (rhs[i] - lower[i] * rhs[i - 1]) / beta;
    }
    for i in (0..n - 1).rev() {
        rhs[i] -= work[i] * rhs[i + 1];
    }
    Ok(())
}

fn props_finite(p: &Props) -> bool {
    p.flow_area.is_finite()
        && p.storage_area.is_finite()
        && p.flow_top_width.is_finite()
        && p.storage_top_width.is_finite()
        && p.conveyance.is_finite()
        && p.dconveyance_dz.is_finite()
}

// ---------------------------------------------------------------------------
// Steady profile
// ---------------------------------------------------------------------------

/// Steady water surface for given face discharges (`face_discharge[j]`
/// between nodes `j` and `j+1`, non-negative) and a known downstream stage,
/// marching upstream with the same discrete face relation as the unsteady
/// solver, one bracketed root per face.
pub fn steady_profile<H: Hydraulics>(
    reach: &Reach<'_, H>,
    face_discharge: &[f64],
    downstream_stage: f64,
    slope_regularisation: f64,
) -> Result<Vec<f64>, RoutingError> {
    let n = reach.len();
    if face_discharge.len() + 1 != n {
        return Err(RoutingError::LengthMismatch {
            what: "face discharges",
            expected: n - 1,
            got: face_discharge.len(),
        });
    }
    let (x, nodes) = (reach.chainage, reach.nodes);
    let mut z = vec![0.0; n];
    z[n - 1] = downstream_stage.max(nodes[n - 1].bed_elevation() + MIN_DEPTH);
    for j in (0..n - 1).rev() {
        let pb = nodes[j + 1].props(z[j + 1]);
        let (bed_a, bed_b) = (nodes[j].bed_elevation(), nodes[j + 1].bed_elevation());
        let dx = x[j + 1] - x[j];
        let lo = z[j + 1].max(bed_a + MIN_DEPTH);
        let q = face_discharge[j];
        let fail = RoutingError::SteadyProfile {
            node: j,
            chainage: x[j],
            discharge: q,
        };
        if !q.is_finite() {
            return Err(fail);
        }
        z[j] = solve_increasing(
            |za| {
                face_flow(
                    &nodes[j].props(za),
                    &pb,
                    bed_a,
                    bed_b,
                    dx,
                    slope_regularisation,
                )
                .0
            },
            lo,
            q,
        )
        .ok_or(fail)?;
    }
    Ok(z)
}

// ---------------------------------------------------------------------------
// The solver
// ---------------------------------------------------------------------------

/// Preallocated per-node and per-face arrays, so a step allocates nothing.
struct Work {
    z: Vec<f64>,
    z_old: Vec<f64>,
    /// dz/dt of the last accepted step: the Newton predictor.
    rate: Vec<f64>,
    props: Vec<Props>,
    q_face: Vec<f64>,
    dq_a: Vec<f64>,
    dq_b: Vec<f64>,
    /// Net inflow to each control volume at the old time (incl. outflow).
    f_old: Vec<f64>,
    /// Storage of each control volume at the old time (m³).
    v_old: Vec<f64>,
    lat_old: Vec<f64>,
    lat_new: Vec<f64>,
    lower: Vec<f64>,
    diag: Vec<f64>,
    upper: Vec<f64>,
    rhs: Vec<f64>,
    scratch: Vec<f64>,
}

impl Work {
    fn new(n: usize) -> Self {
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
        }
    }
}

/// Fixed geometry derived once from the reach.
struct Geometry {
    dx: Vec<f64>,
    length: Vec<f64>,
    bed: Vec<f64>,
}

/// Evaluate node properties and face flows at `w.z`. Returns the first node
/// with non-finite properties on failure.
fn evaluate<H: Hydraulics>(nodes: &[H], g: &Geometry, eps: f64, w: &mut Work) -> Result<(), usize> {
    for (i, node) in nodes.iter().enumerate() {
        let p = node.props(w.z[i]);
        if !props_finite(&p) {
            return Err(i);
        }
        w.props[i] = p;
    }
    for j in 0..nodes.len() - 1 {
        let (q, a, b) = face_flow(
            &w.props[j],
            &w.props[j + 1],
            g.bed[j],
            g.bed[j + 1],
            g.dx[j],
            eps,
        );
        w.q_face[j] = q;
        w.dq_a[j] = a;
        w.dq_b[j] = b;
    }
    Ok(())
}

/// Net inflow to control volume `i` at the current evaluation, excluding
/// the downstream boundary outflow.
#[inline]
fn net_inflow(w: &Work, i: usize, q_up: f64) -> f64 {
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

struct StepFailure {
    node: usize,
    reason: FailureReason,
}

/// Boundary values at the new time level.
struct NewLevel {
    dt: f64,
    q_up: f64,
    /// Imposed downstream stage, for stage boundaries.
    stage: Option<f64>,
}

/// One θ-step by Newton. On success `w.z` holds the new state and the
/// return value is the number of iterations; `w.props`/`w.q_face` are then
/// evaluated at the new state.
fn newton_step<H: Hydraulics>(
    nodes: &[H],
    g: &Geometry,
    b: &DownstreamBoundary,
    o: &Options,
    lvl: &NewLevel,
    w: &mut Work,
) -> Result<usize, StepFailure> {
    let n = nodes.len();
    let (theta, dt) = (o.theta, lvl.dt);
    let dtt = dt * theta;
    // Start from the old state extrapolated with the last step's rate (a
    // linear predictor saves about one Newton iteration per step on a
    // smooth flood), with the imposed stage already in place.
    for i in 0..n {
        w.z[i] = (w.z_old[i] + dt * w.rate[i]).max(g.bed[i] + MIN_DEPTH);
    }
    if let Some(s) = lvl.stage {
        w.z[n - 1] = s;
    }
    let mut worst = 0;
    for iter in 1..=o.max_newton_iter {
        evaluate(nodes, g, o.slope_regularisation, w).map_err(|node| StepFailure {
            node,
            reason: FailureReason::NonFinite,
        })?;
        for i in 0..n {
            let p = w.props[i];
            let mut net = net_inflow(w, i, lvl.q_up);
            let mut d_self = 0.0;
            w.lower[i] = 0.0;
            w.upper[i] = 0.0;
            if i > 0 {
                d_self += w.dq_b[i - 1];
                w.lower[i] = -dtt * w.dq_a[i - 1];
            }
            if i + 1 < n {
                d_self -= w.dq_a[i];
                w.upper[i] = dtt * w.dq_b[i];
            } else if lvl.stage.is_none() {
                let (qo, dqo) = boundary_outflow(b, &p, g.bed[i]);
                net -= qo;
                d_self -= dqo;
            }
            let residual = p.storage_area * g.length[i]
                - w.v_old[i]
                - dt * (theta * net + (1.0 - theta) * w.f_old[i]);
            w.rhs[i] = -residual;
            w.diag[i] = p.storage_top_width.max(JACOBIAN_WIDTH_FLOOR) * g.length[i] - dtt * d_self;
        }
        if let Some(s) = lvl.stage {
            w.lower[n - 1] = 0.0;
            w.diag[n - 1] = 1.0;
            w.rhs[n - 1] = s - w.z[n - 1];
        }
        solve_tridiagonal(&w.lower, &w.diag, &w.upper, &mut w.rhs, &mut w.scratch).map_err(
            |node| StepFailure {
                node,
                reason: FailureReason::SingularJacobian,
            },
        )?;
        let mut max_dz = 0.0_f64;
        for (i, &d) in w.rhs.iter().enumerate() {
            if !d.is_finite() {
                return Err(StepFailure {
                    node: i,
                    reason: FailureReason::NonFinite,
                });
            }
            if d.abs() > max_dz {
                max_dz = d.abs();
                worst = i;
            }
        }
        let scale = if max_dz > NEWTON_STEP_CAP {
            NEWTON_STEP_CAP / max_dz
        } else {
            1.0
        };
        for i in 0..n {
            w.z[i] = (w.z[i] + scale * w.rhs[i]).max(g.bed[i] + MIN_DEPTH);
        }
        if max_dz <= o.newton_tol {
            evaluate(nodes, g, o.slope_regularisation, w).map_err(|node| StepFailure {
                node,
                reason: FailureReason::NonFinite,
            })?;
            return Ok(iter);
        }
    }
    Err(StepFailure {
        node: worst,
        reason: FailureReason::NewtonNotConverged,
    })
}

/// Route the inflow hydrograph through the reach with the implicit
/// diffusive-wave scheme described in the module documentation.
pub fn route<H: Hydraulics>(p: &Problem<'_, H>) -> Result<RoutingResult, RoutingError> {
    let o = &p.options;
    check_options(o)?;
    validate_output_times(p.start_time, &p.output_times)?;
    validate_inflow(&p.upstream, || "upstream".to_string())?;
    check_boundary(&p.downstream)?;
    let reach = p.reach;
    let lat_node = lateral_nodes(&reach, &p.laterals)?;
    let nodes = reach.nodes;
    let x = reach.chainage;
    let n = reach.len();
    let g = Geometry {
        dx: x.windows(2).map(|w| w[1] - w[0]).collect(),
        length: reach.control_lengths(),
        bed: nodes.iter().map(|h| h.bed_elevation()).collect(),
    };
    let b = &p.downstream;
    let t0 = p.start_time;
    let mut up = p.upstream.cursor();
    let mut lat_cursors: Vec<Cursor<'_>> = p.laterals.iter().map(|l| l.inflow.cursor()).collect();
    let mut stage_cursor = match b {
        DownstreamBoundary::StageSeries(s) => Some(s.cursor()),
        _ => None,
    };
    let mut stage_at = |t: f64| -> Option<f64> {
        let s = match b {
            DownstreamBoundary::FixedStage { stage } => *stage,
            DownstreamBoundary::StageSeries(_) => stage_cursor.as_mut().map(|c| c.at(t))?,
            _ => return None,
        };
        Some(s.max(g.bed[n - 1] + MIN_DEPTH))
    };
    let mut w = Work::new(n);
    let fill_laterals = |cursors: &mut [Cursor<'_>], t: f64, out: &mut [f64]| {
        out.fill(0.0);
        for (c, &node) in cursors.iter_mut().zip(&lat_node) {
            out[node] += c.at(t);
        }
    };

    // ---- initial state -------------------------------------------------
    let q_up0 = up.at(t0);
    fill_laterals(&mut lat_cursors, t0, &mut w.lat_new);
    match &p.initial {
        InitialState::Steady => {
            // Face j carries the inflow plus the laterals of nodes 0..=j.
            let faces: Vec<f64> = w.lat_new[..n - 1]
                .iter()
                .scan(q_up0, |acc, &l| {
                    *acc += l;
                    Some(*acc)
                })
                .collect();
            let q_total = faces[n - 2] + w.lat_new[n - 1];
            let z_down = match stage_at(t0) {
                Some(s) => s,
                None => {
                    let last = &nodes[n - 1];
                    let bed = g.bed[n - 1];
                    solve_increasing(
                        |z| boundary_outflow(b, &last.props(z), bed).0,
                        bed + MIN_DEPTH,
                        q_total,
                    )
                    .ok_or(RoutingError::SteadyProfile {
                        node: n - 1,
                        chainage: x[n - 1],
                        discharge: q_total,
                    })?
                }
            };
            let z = steady_profile(&reach, &faces, z_down, o.slope_regularisation)?;
            w.z.copy_from_slice(&z);
        }
        InitialState::Hot(z) => {
            if z.len() != n {
                return Err(RoutingError::LengthMismatch {
                    what: "hot-start stages",
                    expected: n,
                    got: z.len(),
                });
            }
            for (i, &zi) in z.iter().enumerate() {
                if !zi.is_finite() {
                    return Err(RoutingError::NonFinite {
                        what: "hot-start stage",
                        index: i,
                    });
                }
                w.z[i] = zi.max(g.bed[i] + MIN_DEPTH);
            }
        }
    }
    let eps = o.slope_regularisation;
    evaluate(nodes, &g, eps, &mut w).map_err(|node| RoutingError::NonFinite {
        what: "section properties at the initial stage",
        index: node,
    })?;

    // Old-level quantities.
    let mut q_up_old = q_up0;
    let mut q_out_old = if b.is_stage() {
        w.q_face[n - 2] + w.lat_new[n - 1]
    } else {
        boundary_outflow(b, &w.props[n - 1], g.bed[n - 1]).0
    };
    for i in 0..n {
        w.f_old[i] = net_inflow(&w, i, q_up_old);
        w.v_old[i] = w.props[i].storage_area * g.length[i];
    }
    w.f_old[n - 1] -= q_out_old;
    w.lat_old.copy_from_slice(&w.lat_new);
    w.z_old.copy_from_slice(&w.z);
    let storage0: f64 = w.v_old.iter().sum();

    // Diagnostics accumulators.
    let mut dry = vec![false; n];
    let mut extrap = vec![false; n];
    let mut max_fr = (0.0_f64, x[0], t0);
    let mut track =
        |w: &Work, q_up: f64, q_out: f64, t: f64, dry: &mut [bool], extrap: &mut [bool]| {
            for i in 0..n {
                let pr = &w.props[i];
                if w.z[i] - g.bed[i] < DRY_DEPTH {
                    dry[i] = true;
                }
                if pr.extrapolated {
                    extrap[i] = true;
                }
                // Froude numbers of films thinner than the drying ramp say
                // nothing about inertia and are left out.
                if w.z[i] - g.bed[i] < MIN_DEPTH + DRY_RAMP_DEPTH {
                    continue;
                }
                let q = node_discharge(w, i, q_up, q_out);
                let fr = pr.froude(q);
                if fr > max_fr.0 {
                    max_fr = (fr, x[i], t);
                }
            }
        };
    track(&w, q_up_old, q_out_old, t0, &mut dry, &mut extrap);
    let mean_depth0 = w.props.iter().map(|pr| pr.hydraulic_depth()).sum::<f64>() / n as f64;

    let n_out = p.output_times.len();
    let mut stage_out = Vec::with_capacity(n_out);
    let mut discharge_out = Vec::with_capacity(n_out);
    let record =
        |w: &Work, q_up: f64, q_out: f64, so: &mut Vec<Vec<f64>>, qo: &mut Vec<Vec<f64>>| {
            so.push(w.z.clone());
            qo.push((0..n).map(|i| node_discharge(w, i, q_up, q_out)).collect());
        };
    let mut k_out = 0;
    while k_out < n_out && p.output_times[k_out] <= t0 {
        record(&w, q_up_old, q_out_old, &mut stage_out, &mut discharge_out);
        k_out += 1;
    }
    // State at the start of the current step, for dense output.
    let mut prev_z = w.z.clone();
    let mut prev_q: Vec<f64> = (0..n)
        .map(|i| node_discharge(&w, i, q_up_old, q_out_old))
        .collect();

    let (mut vol_in, mut vol_lat, mut vol_out) = (0.0, 0.0, 0.0);
    let mut steps = 0usize;
    let mut rejected = 0usize;
    let mut attempts = 0usize;
    let mut iters_total = 0usize;
    let mut iters_max = 0usize;
    let mut dt_min_used = f64::INFINITY;
    let mut dt_max_used = 0.0_f64;
    let mut dt_nominal = o.dt_initial;
    let mut t = t0;
    let theta = o.theta;
    let easy = (o.max_newton_iter / 3).max(3);

    while k_out < n_out {
        attempts += 1;
        if attempts > o.max_steps {
            return Err(RoutingError::TooManySteps {
                limit: o.max_steps,
                time: t,
            });
        }
        let target = p.output_times[k_out];
        let remaining = target - t;
        // Dense output (outputs closer together than the step the solver
        // would take): step on and interpolate the outputs inside the step
        // rather than shortening every step to land on each of them.
        let dense = k_out + 1 < n_out && p.output_times[k_out + 1] - target < dt_nominal;
        let (dt, t_new) = if remaining <= dt_nominal * (1.0 + 1e-9) && dense {
            let last = p.output_times[n_out - 1];
            let dt = dt_nominal.min(last - t);
            (dt, if dt == last - t { last } else { t + dt })
        } else if remaining <= dt_nominal * (1.0 + 1e-9) {
            (remaining, target)
        } else if remaining < 2.0 * dt_nominal {
            (0.5 * remaining, t + 0.5 * remaining)
        } else {
            (dt_nominal, t + dt_nominal)
        };
        let lvl = NewLevel {
            dt,
            q_up: up.at(t_new),
            stage: stage_at(t_new),
        };
        fill_laterals(&mut lat_cursors, t_new, &mut w.lat_new);
        match newton_step(nodes, &g, b, o, &lvl, &mut w) {
            Err(fail) => {
                rejected += 1;
                dt_nominal = 0.5 * dt;
                if dt_nominal < o.dt_min {
                    return Err(RoutingError::NoConvergence {
                        time: t,
                        dt,
                        node: fail.node,
                        chainage: x[fail.node.min(n - 1)],
                        reason: fail.reason,
                    });
                }
                // w.z is rebuilt from w.z_old at the next attempt.
            }
            Ok(iters) => {
                steps += 1;
                iters_total += iters;
                iters_max = iters_max.max(iters);
                dt_min_used = dt_min_used.min(dt);
                dt_max_used = dt_max_used.max(dt);
                // New-level storage and net inflows.
                let mut v_new_last = 0.0;
                for i in 0..n {
                    let v = w.props[i].storage_area * g.length[i];
                    if i + 1 == n {
                        v_new_last = v;
                    }
                    w.scratch[i] = v;
                }
                let f_in_last = net_inflow(&w, n - 1, lvl.q_up);
                let q_out_new = if lvl.stage.is_some() {
                    // Outflow that closes the last node's continuity equation.
                    (theta * f_in_last + (1.0 - theta) * w.f_old[n - 1]
                        - (v_new_last - w.v_old[n - 1]) / dt)
                        / theta
                } else {
                    boundary_outflow(b, &w.props[n - 1], g.bed[n - 1]).0
                };
                let lat_sum_new: f64 = w.lat_new.iter().sum();
                let lat_sum_old: f64 = w.lat_old.iter().sum();
                vol_in += dt * (theta * lvl.q_up + (1.0 - theta) * q_up_old);
                vol_lat += dt * (theta * lat_sum_new + (1.0 - theta) * lat_sum_old);
                vol_out += dt * (theta * q_out_new + (1.0 - theta) * q_out_old);
                for i in 0..n {
                    w.f_old[i] = net_inflow(&w, i, lvl.q_up);
                    w.v_old[i] = w.scratch[i];
                }
                w.f_old[n - 1] -= q_out_new;
                for i in 0..n {
                    w.rate[i] = (w.z[i] - w.z_old[i]) / dt;
                }
                w.z_old.copy_from_slice(&w.z);
                w.lat_old.copy_from_slice(&w.lat_new);
                q_up_old = lvl.q_up;
                q_out_old = q_out_new;
                let t_prev = t;
                t = t_new;
                track(&w, q_up_old, q_out_old, t, &mut dry, &mut extrap);
                // Every output time reached by this step: exact at the
                // step's end, linear in time between its two ends inside.
                let q_now: Vec<f64> = (0..n)
                    .map(|i| node_discharge(&w, i, q_up_old, q_out_old))
                    .collect();
                while k_out < n_out && p.output_times[k_out] <= t_new {
                    let to = p.output_times[k_out];
                    if to == t_new {
                        stage_out.push(w.z.clone());
                        discharge_out.push(q_now.clone());
                    } else {
                        let a = ((to - t_prev) / (t_new - t_prev)).clamp(0.0, 1.0);
                        stage_out.push(
                            prev_z
                                .iter()
                                .zip(&w.z)
                                .map(|(z0, z1)| z0 + a * (z1 - z0))
                                .collect(),
                        );
                        discharge_out.push(
                            prev_q
                                .iter()
                                .zip(&q_now)
                                .map(|(q0, q1)| q0 + a * (q1 - q0))
                                .collect(),
                        );
                    }
                    k_out += 1;
                }
                prev_z.copy_from_slice(&w.z);
                prev_q = q_now;
                if iters <= easy {
                    dt_nominal = (dt_nominal * 1.5).min(o.dt_max);
                }
            }
        }
    }

    // ---- diagnostics -----------------------------------------------------
    let storage1: f64 = w.v_old.iter().sum();
    let storage_change = storage1 - storage0;
    let volume_in = vol_in + vol_lat;
    let error = volume_in - vol_out - storage_change;
    let denom = if volume_in > 0.0 {
        volume_in
    } else {
        storage0.max(1.0)
    };
    let mass_pct = 100.0 * error / denom;
    let t_end = p.output_times[n_out - 1];
    let slope = reach.mean_bed_slope();
    let applicability = if slope > 0.0 && mean_depth0 > 0.0 {
        Some(wave_duration(&p.upstream, t0, t_end) * slope * (GRAVITY / mean_depth0).sqrt())
    } else {
        None
    };
    let dry_nodes: Vec<usize> = (0..n).filter(|&i| dry[i]).collect();
    let extrapolated_nodes: Vec<usize> = (0..n).filter(|&i| extrap[i]).collect();
    let mut diagnostics = Diagnostics {
        mass_balance_error_pct: mass_pct,
        inflow_volume: vol_in,
        lateral_volume: vol_lat,
        outflow_volume: vol_out,
        storage_change,
        max_froude: max_fr.0,
        max_froude_chainage: max_fr.1,
        max_froude_time: max_fr.2,
        applicability_number: applicability,
        applicability_threshold: DIFFUSION_APPLICABILITY_THRESHOLD,
        extrapolated_chainages: extrapolated_nodes.iter().map(|&i| x[i]).collect(),
        dry_nodes,
        extrapolated_nodes,
        dt_min_used: if steps > 0 { dt_min_used } else { 0.0 },
        dt_max_used,
        steps,
        newton_iterations_total: iters_total,
        max_newton_iterations: iters_max,
        rejected_steps: rejected,
        warnings: Vec::new(),
        wall_time_s: None,
    };
    diagnostics.warnings = collect_warnings(&diagnostics, x, "diffusive-wave");
    Ok(RoutingResult {
        output_times: p.output_times.clone(),
        stage: stage_out,
        discharge: discharge_out,
        final_state: w.z.clone(),
        diagnostics,
    })
}

/// Discharge reported at node `i` (see [`RoutingResult::discharge`]).
#[inline]
fn node_discharge(w: &Work, i: usize, q_up: f64, q_out: f64) -> f64 {
    let n = w.z.len();
    if i == 0 {
        q_up
    } else if i + 1 == n {
        q_out
    } else {
        0.5 * (w.q_face[i - 1] + w.q_face[i])
    }
}

/// Turn the numbers of a run into warnings.
pub(crate) fn collect_warnings(
    d: &Diagnostics,
    chainage: &[f64],
    method: &'static str,
) -> Vec<Warning> {
    let mut out = Vec::new();
    if d.max_froude > FROUDE_STRONG {
        out.push(Warning::FroudeNearCritical {
            froude: d.max_froude,
            chainage: d.max_froude_chainage,
            time: d.max_froude_time,
        });
    } else if d.max_froude > FROUDE_WARN {
        out.push(Warning::FroudeHigh {
            froude: d.max_froude,
            chainage: d.max_froude_chainage,
            time: d.max_froude_time,
        });
    }
    if let Some(number) = d.applicability_number
        && number < d.applicability_threshold
    {
        out.push(Warning::LowApplicability {
            method,
            number,
            threshold: d.applicability_threshold,
        });
    }
    if !d.extrapolated_chainages.is_empty() {
        out.push(Warning::Extrapolated {
            chainages: d.extrapolated_chainages.clone(),
        });
    }
    if let Some(&first) = d.dry_nodes.first() {
        out.push(Warning::DryNodes {
            count: d.dry_nodes.len(),
            first_chainage: chainage[first],
        });
    }
    if d.mass_balance_error_pct.abs() > MASS_BALANCE_WARN_PCT {
        out.push(Warning::MassBalance {
            error_pct: d.mass_balance_error_pct,
        });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Rectangular channel of width `b`, Manning `n`, hydraulic radius taken
    /// as the true A/P (not the wide-channel approximation).
    struct Rect {
        bed: f64,
        width: f64,
        n: f64,
        /// Bank height above bed: above it the section is extended with
        /// vertical walls and flagged as extrapolated.
        bank: f64,
    }

    impl Hydraulics for Rect {
        fn bed_elevation(&self) -> f64 {
            self.bed
        }
        fn props(&self, z: f64) -> Props {
            let h = (z - self.bed).max(0.0);
            let a = self.width * h;
            let p = self.width + 2.0 * h;
            let k = if h > 0.0 {
                a.powf(5.0 / 3.0) / p.powf(2.0 / 3.0) / self.n
            } else {
                0.0
            };
            // dK/dh = K (5/3 · B/A − 2/3 · 2/P)
            let dk = if h > 0.0 {
                k * (5.0 / 3.0 * self.width / a - 4.0 / 3.0 / p)
            } else {
                0.0
            };
            Props {
                z,
                flow_area: a,
                storage_area: a,
                flow_top_width: self.width,
                storage_top_width: self.width,
                wetted_perimeter: p,
                conveyance: k,
                dconveyance_dz: dk,
                extrapolated: h > self.bank,
            }
        }
    }

    /// V-shaped section (zero width at the bed) to exercise drying.
    struct Vee {
        bed: f64,
        side: f64,
        n: f64,
    }

    impl Hydraulics for Vee {
        fn bed_elevation(&self) -> f64 {
            self.bed
        }
        fn props(&self, z: f64) -> Props {
            let h = (z - self.bed).max(0.0);
            let a = self.side * h * h;
            let t = 2.0 * self.side * h;
            let p = 2.0 * h * (1.0 + self.side * self.side).sqrt();
            let (k, dk) = if h > 0.0 {
                let k = a.powf(5.0 / 3.0) / p.powf(2.0 / 3.0) / self.n;
                (k, k * (5.0 / 3.0 * 2.0 / h - 2.0 / 3.0 / h))
            } else {
                (0.0, 0.0)
            };
            Props {
                z,
                flow_area: a,
                storage_area: a,
                flow_top_width: t,
                storage_top_width: t,
                wetted_perimeter: p,
                conveyance: k,
                dconveyance_dz: dk,
                extrapolated: false,
            }
        }
    }

    fn uniform_rect(n_nodes: usize, dx: f64, slope: f64, width: f64) -> (Vec<f64>, Vec<Rect>) {
        let x: Vec<f64> = (0..n_nodes).map(|i| i as f64 * dx).collect();
        let nodes = x
            .iter()
            .map(|&xi| Rect {
                bed: 10.0 - slope * xi,
                width,
                n: 0.035,
                bank: 50.0,
            })
            .collect();
        (x, nodes)
    }

    fn hydrograph(base: f64, peak: f64, t_peak: f64, dur: f64) -> Series {
        let t: Vec<f64> = (0..=40).map(|i| i as f64 * dur / 40.0).collect();
        let v = t
            .iter()
            .map(|&ti| {
                let r = (ti / t_peak).max(1e-12);
                // Gamma-shaped hydrograph: (r e^{1−r})^4.
                base + (peak - base) * (r * (1.0 - r).exp()).powi(4)
            })
            .collect();
        Series::new(t, v).expect("valid")
    }

    fn problem<'a, H: Hydraulics>(
        reach: Reach<'a, H>,
        upstream: Series,
        downstream: DownstreamBoundary,
        out: Vec<f64>,
    ) -> Problem<'a, H> {
        Problem {
            reach,
            upstream,
            downstream,
            laterals: vec![],
            initial: InitialState::Steady,
            start_time: 0.0,
            output_times: out,
            options: Options::default(),
        }
    }

    fn hourly(hours: usize) -> Vec<f64> {
        (0..=hours).map(|h| h as f64 * 3600.0).collect()
    }

    fn all_finite(r: &RoutingResult) -> bool {
        r.stage
            .iter()
            .chain(r.discharge.iter())
            .flatten()
            .all(|v| v.is_finite())
            && r.final_state.iter().all(|v| v.is_finite())
    }

    #[test]
    fn thomas_solves_known_system() {
        // [2 1 0; 1 3 1; 0 1 2] x = [4, 10, 8] has x = (1, 2, 3).
        let lower = [0.0, 1.0, 1.0];
        let diag = [2.0, 3.0, 2.0];
        let upper = [1.0, 1.0, 0.0];
        let mut rhs = [4.0, 10.0, 8.0];
        let mut work = [0.0; 3];
        solve_tridiagonal(&lower, &diag, &upper, &mut rhs, &mut work).expect("regular");
        for (got, want) in rhs.iter().zip([1.0, 2.0, 3.0]) {
            assert!((got - want).abs() < 1e-12, "{got} vs {want}");
        }
    }

    #[test]
    fn thomas_matches_dense_elimination_on_random_dominant_system() {
        // Compare with Gaussian elimination on the same dense matrix.
        let n = 7;
        let mut seed = 12345u64;
        let mut rnd = || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((seed >> 33) as f64) / (1u64 << 31) as f64 - 0.5
        };
        let lower: Vec<f64> = (0..n).map(|_| rnd()).collect();
        let upper: Vec<f64> = (0..n).map(|_| rnd()).collect();
        let diag: Vec<f64> = (0..n).map(|_| 2.0 + rnd()).collect();
        let b: Vec<f64> = (0..n).map(|_| rnd()).collect();
        let mut dense = vec![vec![0.0; n + 1]; n];
        for i in 0..n {
            dense[i][i] = diag[i];
            if i > 0 {
                dense[i][i - 1] = lower[i];
            }
            if i + 1 < n {
                dense[i][i + 1] = upper[i];
            }
            dense[i][n] = b[i];
        }
        for k in 0..n {
            for i in k + 1..n {
                let f = dense[i][k] / dense[k][k];
                let pivot_row = dense[k].clone();
                for (dst, src) in dense[i][k..].iter_mut().zip(&pivot_row[k..]) {
                    *dst -= f * src;
                }
            }
        }
        let mut xs = vec![0.0; n];
        for i in (0..n).rev() {
            let s: f64 = (i + 1..n).map(|j| dense[i][j] * xs[j]).sum();
            xs[i] = (dense[i][n] - s) / dense[i][i];
        }
        let mut rhs = b.clone();
        let mut work = vec![0.0; n];
        solve_tridiagonal(&lower, &diag, &upper, &mut rhs, &mut work).expect("regular");
        for i in 0..n {
            assert!((rhs[i] - xs[i]).abs() < 1e-12);
        }
    }

    #[test]
    fn thomas_reports_zero_pivot() {
        let mut rhs = [1.0, 1.0];
        let mut work = [0.0; 2];
        assert_eq!(
            solve_tridiagonal(&[0.0, 1.0], &[0.0, 1.0], &[1.0, 0.0], &mut rhs, &mut work),
            Err(0)
        );
    }

    #[test]
    fn face_flow_derivatives_match_finite_differences() {
        let s = Rect {
            bed: 0.0,
            width: 20.0,
            n: 0.03,
            bank: 9.0,
        };
        let s2 = Rect {
            bed: -0.1,
            width: 35.0,
            n: 0.04,
            bank: 9.0,
        };
        // A much deeper neighbour: exercises the donor cap and its blend.
        let deep = Rect {
            bed: -3.0,
            width: 35.0,
            n: 0.04,
            bank: 9.0,
        };
        let cases = [
            (&s2, 2.0, 1.9),
            (&s2, 1.5, 1.5 + 1e-9),
            (&s2, 1.0, 1.3),
            (&s2, 0.004, 0.5),
            (&s2, 2.0, 1.999_99),
            (&deep, 0.3, 0.25),
            (&deep, 0.8, 0.2),
            (&deep, 1.5, 0.2),
            (&deep, 2.2, 0.2),
            (&deep, 0.1, 0.5),
            (&deep, 0.3, 0.3),
            (&deep, 0.3, 0.3 - 1e-5),
            (&deep, 0.3, 0.3 + 1e-5),
        ];
        for (other, za, zb) in cases {
            let f = |za: f64, zb: f64| {
                face_flow(&s.props(za), &other.props(zb), 0.0, other.bed, 150.0, 1e-7).0
            };
            let (_, da, db) =
                face_flow(&s.props(za), &other.props(zb), 0.0, other.bed, 150.0, 1e-7);
            let h = 1e-7;
            let fa = (f(za + h, zb) - f(za - h, zb)) / (2.0 * h);
            let fb = (f(za, zb + h) - f(za, zb - h)) / (2.0 * h);
            assert!(
                (fa - da).abs() <= 1e-4 * (1.0 + da.abs()),
                "dq/dza {fa} vs {da} at {za},{zb}"
            );
            assert!(
                (fb - db).abs() <= 1e-4 * (1.0 + db.abs()),
                "dq/dzb {fb} vs {db} at {za},{zb}"
            );
        }
    }

    #[test]
    fn donor_cap_limits_flow_out_of_a_thin_node() {
        // A 5 cm deep node above a 3 m deep one: the face may carry at most
        // DONOR_CAP times the thin node's own conveyance.
        let thin = Rect {
            bed: 0.0,
            width: 20.0,
            n: 0.03,
            bank: 9.0,
        };
        let deep = Rect {
            bed: -3.0,
            width: 20.0,
            n: 0.03,
            bank: 9.0,
        };
        let (pa, pb) = (thin.props(0.05), deep.props(0.0));
        let (q, _, _) = face_flow(&pa, &pb, 0.0, -3.0, 100.0, 1e-7);
        let limit = DONOR_CAP * pa.conveyance * (0.05_f64 / 100.0).sqrt();
        assert!(q <= limit * (1.0 + 1e-9), "{q} vs {limit}");
        assert!(q < 0.1 * 0.5 * (pa.conveyance + pb.conveyance) * (0.05_f64 / 100.0).sqrt());
    }

    #[test]
    fn regularised_face_flow_matches_manning_away_from_zero_slope() {
        // Common practice: Q = K √S for S ≫ ε.
        let s = Rect {
            bed: 0.0,
            width: 20.0,
            n: 0.03,
            bank: 9.0,
        };
        let (za, zb, dx) = (2.0, 1.9, 100.0);
        let (q, _, _) = face_flow(&s.props(za), &s.props(zb), 0.0, 0.0, dx, 1e-7);
        let kf = 0.5 * (s.props(za).conveyance + s.props(zb).conveyance);
        let manning = kf * (0.1_f64 / dx).sqrt();
        assert!((q / manning - 1.0).abs() < 1e-6);
        // Reversed slope gives reversed flow.
        let (qr, _, _) = face_flow(&s.props(zb), &s.props(za), 0.0, 0.0, dx, 1e-7);
        assert!((qr + q).abs() < 1e-9 * q);
    }

    #[test]
    fn rating_interpolates_and_extends() {
        let t = [(1.0, 0.0), (2.0, 10.0), (4.0, 50.0)];
        assert_eq!(rating_flow(&t, 0.0), (0.0, 0.0));
        assert_eq!(rating_flow(&t, 1.5), (5.0, 10.0));
        assert_eq!(rating_flow(&t, 3.0), (30.0, 20.0));
        assert_eq!(rating_flow(&t, 5.0), (70.0, 20.0));
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
    fn rejects_invalid_inputs() {
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

        let reach = Reach::new(&x, &nodes).expect("valid");
        let q = Series::constant(5.0).expect("valid");
        let nd = DownstreamBoundary::NormalDepth {
            friction_slope: 1e-3,
        };
        let base = problem(reach, q.clone(), nd.clone(), hourly(2));

        let mut p = base.clone();
        p.options.theta = 0.5;
        assert!(matches!(
            route(&p),
            Err(RoutingError::InvalidOption { name: "theta", .. })
        ));
        let mut p = base.clone();
        p.output_times.clear();
        assert_eq!(route(&p).err(), Some(RoutingError::NoOutputTimes));
        let mut p = base.clone();
        p.output_times = vec![0.0, 10.0, 5.0];
        assert!(matches!(
            route(&p),
            Err(RoutingError::BadOutputTime { index: 2, .. })
        ));
        let mut p = base.clone();
        p.output_times = vec![-1.0];
        assert!(matches!(
            route(&p),
            Err(RoutingError::BadOutputTime { index: 0, .. })
        ));
        let mut p = base.clone();
        p.output_times = vec![f64::NAN];
        assert!(matches!(route(&p), Err(RoutingError::NonFinite { .. })));
        let mut p = base.clone();
        p.upstream = Series::new(vec![0.0, 1.0], vec![1.0, -1.0]).expect("finite");
        assert!(matches!(
            route(&p),
            Err(RoutingError::NegativeInflow { .. })
        ));
        let mut p = base.clone();
        p.laterals = vec![Lateral {
            chainage: 1e6,
            inflow: q.clone(),
        }];
        assert!(matches!(
            route(&p),
            Err(RoutingError::LateralOutsideReach { index: 0, .. })
        ));
        let mut p = base.clone();
        p.initial = InitialState::Hot(vec![1.0; 3]);
        assert!(matches!(
            route(&p),
            Err(RoutingError::LengthMismatch { .. })
        ));
        let mut p = base.clone();
        p.initial = InitialState::Hot(vec![f64::NAN; 5]);
        assert!(matches!(route(&p), Err(RoutingError::NonFinite { .. })));
        let mut p = base.clone();
        p.downstream = DownstreamBoundary::NormalDepth {
            friction_slope: -1.0,
        };
        assert!(matches!(route(&p), Err(RoutingError::InvalidBoundary(_))));
        let mut p = base.clone();
        p.downstream = DownstreamBoundary::Rating {
            table: vec![(1.0, 5.0), (0.5, 6.0)],
        };
        assert!(matches!(route(&p), Err(RoutingError::InvalidBoundary(_))));
        let mut p = base.clone();
        p.downstream = DownstreamBoundary::FixedStage { stage: f64::NAN };
        assert!(matches!(route(&p), Err(RoutingError::InvalidBoundary(_))));
        let mut p = base;
        p.options.dt_initial = 1e6;
        assert!(matches!(
            route(&p),
            Err(RoutingError::InvalidOption {
                name: "dt_initial",
                ..
            })
        ));
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

    #[test]
    fn steady_run_stays_steady_and_conserves_mass() {
        let (x, nodes) = uniform_rect(21, 100.0, 1e-3, 10.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let p = problem(
            reach,
            Series::constant(8.0).expect("valid"),
            DownstreamBoundary::NormalDepth {
                friction_slope: 1e-3,
            },
            hourly(3),
        );
        let r = route(&p).expect("runs");
        let first = &r.stage[0];
        for row in &r.stage {
            for (a, b) in row.iter().zip(first) {
                assert!((a - b).abs() < 1e-6);
            }
        }
        for q in r.discharge.last().expect("rows") {
            assert!((q - 8.0).abs() < 1e-4, "discharge {q}");
        }
        assert!(r.diagnostics.mass_balance_error_pct.abs() < 1e-6);
        assert!(r.diagnostics.steps > 0);
    }

    #[test]
    fn dry_channel_with_zero_inflow_stays_finite() {
        let x: Vec<f64> = (0..30).map(|i| i as f64 * 50.0).collect();
        let nodes: Vec<Vee> = x
            .iter()
            .map(|&xi| Vee {
                bed: 5.0 - 2e-3 * xi,
                side: 3.0,
                n: 0.04,
            })
            .collect();
        let reach = Reach::new(&x, &nodes).expect("valid");
        let mut p = problem(
            reach,
            Series::constant(0.0).expect("valid"),
            DownstreamBoundary::NormalDepth {
                friction_slope: 2e-3,
            },
            hourly(6),
        );
        let r = route(&p).expect("dry run");
        assert!(all_finite(&r));
        assert_eq!(r.diagnostics.dry_nodes.len(), 30);
        assert!(
            r.diagnostics
                .warnings
                .iter()
                .any(|w| matches!(w, Warning::DryNodes { count: 30, .. }))
        );
        for (z, node) in r.final_state.iter().zip(&nodes) {
            assert!(*z >= node.bed && *z < node.bed + 0.01);
        }
        // Now a flood arrives in the dry channel and then recedes to zero.
        p.upstream = Series::new(
            vec![0.0, 3600.0, 7200.0, 10800.0],
            vec![0.0, 20.0, 0.0, 0.0],
        )
        .expect("valid");
        let r = route(&p).expect("wetting and drying run");
        assert!(all_finite(&r));
        let peak_out = r.discharge.iter().map(|row| row[29]).fold(0.0, f64::max);
        assert!(peak_out > 5.0, "the flood reaches the outlet: {peak_out}");
        assert!(
            r.diagnostics.mass_balance_error_pct.abs() < 1.0,
            "{:?}",
            r.diagnostics
        );
    }

    #[test]
    fn steep_flat_and_widening_reaches_run_without_nan() {
        for &(slope, stage_bc) in &[(1e-2, false), (1e-5, true), (1e-5, false)] {
            let x: Vec<f64> = (0..60).map(|i| i as f64 * 200.0).collect();
            let nodes: Vec<Rect> = x
                .iter()
                .map(|&xi| Rect {
                    bed: 100.0 - slope * xi,
                    // Abrupt widening half-way down.
                    width: if xi < 6000.0 { 15.0 } else { 150.0 },
                    n: 0.035,
                    bank: 4.0,
                })
                .collect();
            let reach = Reach::new(&x, &nodes).expect("valid");
            let bed_end = nodes[59].bed;
            let downstream = if stage_bc {
                DownstreamBoundary::FixedStage {
                    stage: bed_end + 3.0,
                }
            } else {
                DownstreamBoundary::NormalDepth {
                    friction_slope: slope,
                }
            };
            let p = problem(
                reach,
                hydrograph(5.0, 400.0, 6.0 * 3600.0, 24.0 * 3600.0),
                downstream,
                hourly(24),
            );
            let r = route(&p).unwrap_or_else(|e| panic!("slope {slope}: {e}"));
            assert!(all_finite(&r), "slope {slope}");
            assert!(
                r.diagnostics.mass_balance_error_pct.abs() < 0.5,
                "slope {slope}: {:?}",
                r.diagnostics
            );
            // A 400 m³/s flood in a 15 m channel overtops the 4 m "bank".
            if slope == 1e-5 {
                assert!(!r.diagnostics.extrapolated_nodes.is_empty());
            }
        }
    }

    #[test]
    fn fixed_stage_outflow_closes_mass_balance() {
        let (x, nodes) = uniform_rect(31, 200.0, 2e-4, 30.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let stage = nodes[30].bed + 2.5;
        let mut p = problem(
            reach,
            hydrograph(10.0, 80.0, 5.0 * 3600.0, 20.0 * 3600.0),
            DownstreamBoundary::StageSeries(
                Series::new(vec![0.0, 36000.0, 72000.0], vec![stage, stage + 0.5, stage])
                    .expect("valid"),
            ),
            hourly(20),
        );
        p.laterals = vec![Lateral {
            chainage: 2950.0,
            inflow: Series::new(vec![0.0, 20000.0, 40000.0], vec![1.0, 15.0, 1.0]).expect("valid"),
        }];
        let r = route(&p).expect("runs");
        assert!(
            r.diagnostics.mass_balance_error_pct.abs() < 0.05,
            "{:?}",
            r.diagnostics
        );
        assert!(r.diagnostics.lateral_volume > 0.0);
        // Stage boundary honoured at every output.
        for (row, &t) in r.stage.iter().zip(&r.output_times) {
            let want = match &p.downstream {
                DownstreamBoundary::StageSeries(s) => s.at(t),
                _ => unreachable!(),
            };
            assert!((row[30] - want).abs() < 1e-9);
        }
    }

    #[test]
    fn rating_boundary_runs_and_hot_start_continues() {
        let (x, nodes) = uniform_rect(21, 250.0, 5e-4, 20.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let bed = nodes[20].bed;
        let table: Vec<(f64, f64)> = (0..30)
            .map(|k| {
                let h = 0.2 * k as f64;
                (bed + h, 20.0 / 0.035 * h.powf(5.0 / 3.0) * 5e-4_f64.sqrt())
            })
            .collect();
        let upstream = hydrograph(10.0, 60.0, 4.0 * 3600.0, 12.0 * 3600.0);
        let p = problem(
            reach,
            upstream.clone(),
            DownstreamBoundary::Rating {
                table: table.clone(),
            },
            hourly(12),
        );
        let full = route(&p).expect("runs");
        assert!(full.diagnostics.mass_balance_error_pct.abs() < 0.1);
        // Restart from the 6-hour state and compare the 12-hour state.
        let mut half = problem(
            reach,
            upstream,
            DownstreamBoundary::Rating { table },
            vec![6.0 * 3600.0],
        );
        let first = route(&half).expect("first half");
        half.initial = InitialState::Hot(first.final_state.clone());
        half.start_time = 6.0 * 3600.0;
        half.output_times = vec![12.0 * 3600.0];
        let second = route(&half).expect("second half");
        for (a, b) in second.final_state.iter().zip(&full.final_state) {
            // Different step sequences: agree to a few centimetres.
            assert!((a - b).abs() < 0.03, "{a} vs {b}");
        }
    }

    #[test]
    fn warnings_display_location() {
        let w = Warning::FroudeNearCritical {
            froude: 0.95,
            chainage: 1200.0,
            time: 7200.0,
        };
        let s = w.to_string();
        assert!(
            s.contains("0.95") && s.contains("1200") && s.contains("7200"),
            "{s}"
        );
        let d = Warning::DryNodes {
            count: 3,
            first_chainage: 40.0,
        }
        .to_string();
        assert!(d.contains('3') && d.contains("40"));
    }

    #[test]
    fn steep_reach_warns_about_froude() {
        let (x, nodes) = uniform_rect(41, 100.0, 2e-2, 10.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let p = problem(
            reach,
            hydrograph(20.0, 150.0, 2.0 * 3600.0, 6.0 * 3600.0),
            DownstreamBoundary::NormalDepth {
                friction_slope: 2e-2,
            },
            hourly(6),
        );
        let r = route(&p).expect("runs");
        assert!(
            r.diagnostics.max_froude > FROUDE_WARN,
            "{}",
            r.diagnostics.max_froude
        );
        assert!(r.diagnostics.warnings.iter().any(|w| matches!(
            w,
            Warning::FroudeHigh { .. } | Warning::FroudeNearCritical { .. }
        )));
    }

    /// A section that returns NaN above a certain stage, as a corrupt table
    /// might.
    struct Broken {
        inner: Rect,
        ceiling: f64,
    }

    impl Hydraulics for Broken {
        fn bed_elevation(&self) -> f64 {
            self.inner.bed
        }
        fn props(&self, z: f64) -> Props {
            let mut p = self.inner.props(z);
            if z > self.ceiling {
                p.conveyance = f64::NAN;
            }
            p
        }
    }

    #[test]
    fn non_convergence_is_a_typed_error_with_location() {
        let (x, nodes) = uniform_rect(11, 100.0, 1e-3, 10.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let mut p = problem(
            reach,
            hydrograph(1.0, 300.0, 1800.0, 7200.0),
            DownstreamBoundary::NormalDepth {
                friction_slope: 1e-3,
            },
            hourly(2),
        );
        // One Newton iteration can never reach 1e-12 m on a rising flood.
        p.options.max_newton_iter = 1;
        p.options.newton_tol = 1e-12;
        p.options.dt_min = 30.0;
        p.options.dt_initial = 60.0;
        match route(&p) {
            Err(RoutingError::NoConvergence {
                node,
                chainage,
                time,
                reason: FailureReason::NewtonNotConverged,
                ..
            }) => {
                assert!(node < 11);
                assert_eq!(chainage, x[node]);
                assert!((0.0..7200.0).contains(&time));
            }
            other => panic!("expected NoConvergence, got {other:?}"),
        }
    }

    #[test]
    fn nan_from_a_section_is_reported_not_propagated() {
        let x: Vec<f64> = (0..8).map(|i| i as f64 * 100.0).collect();
        let nodes: Vec<Broken> = x
            .iter()
            .map(|&xi| Broken {
                inner: Rect {
                    bed: 10.0 - 1e-3 * xi,
                    width: 10.0,
                    n: 0.035,
                    bank: 5.0,
                },
                ceiling: 10.0 - 1e-3 * xi + 1.5,
            })
            .collect();
        let reach = Reach::new(&x, &nodes).expect("valid");
        // The flood must rise above the 1.5 m "ceiling".
        let p = problem(
            reach,
            hydrograph(2.0, 200.0, 3600.0, 7200.0),
            DownstreamBoundary::NormalDepth {
                friction_slope: 1e-3,
            },
            hourly(2),
        );
        match route(&p) {
            Err(RoutingError::NoConvergence {
                reason: FailureReason::NonFinite,
                ..
            }) => {}
            other => panic!("expected a NonFinite failure, got {other:?}"),
        }
    }

    #[test]
    fn inputs_round_trip_through_serde_and_series_stays_validated() {
        let b = DownstreamBoundary::StageSeries(
            Series::new(vec![0.0, 10.0], vec![1.0, 2.0]).expect("valid"),
        );
        let json = serde_json::to_string(&b).expect("serialise");
        let back: DownstreamBoundary = serde_json::from_str(&json).expect("deserialise");
        assert_eq!(back, b);
        let r: DownstreamBoundary =
            serde_json::from_str(r#"{"kind":"rating","table":[[0.0,0.0],[1.0,5.0]]}"#)
                .expect("rating");
        assert!(matches!(r, DownstreamBoundary::Rating { ref table } if table.len() == 2));
        let i: InitialState =
            serde_json::from_str(r#"{"kind":"hot","stages":[1.0,2.0]}"#).expect("hot");
        assert_eq!(i, InitialState::Hot(vec![1.0, 2.0]));
        // Missing options take their defaults.
        let o: Options = serde_json::from_str(r#"{"theta":0.8}"#).expect("options");
        assert_eq!(o.theta, 0.8);
        assert_eq!(o.dt_max, Options::default().dt_max);
        // A series that decreases in time is rejected on the way in.
        let bad = serde_json::from_str::<Series>(r#"{"t":[0.0,-1.0],"v":[1.0,1.0]}"#);
        assert!(bad.is_err());
    }

    #[test]
    fn randomised_irregular_reaches_run_clean() {
        // Deterministic pseudo-random reaches with pools, adverse segments,
        // width jumps, dry spells in the inflow and every boundary type:
        // every run must succeed with finite numbers and a small mass error.
        let mut seed = 0x2545_f491_4f6c_dd1d_u64;
        let mut rnd = move || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for case in 0..24 {
            let n = 10 + (rnd() * 30.0) as usize;
            let mut x = vec![0.0];
            for _ in 1..n {
                let last = x[x.len() - 1];
                x.push(last + 50.0 + 400.0 * rnd());
            }
            let slope = [1e-5, 3e-4, 2e-3, 1e-2][case % 4];
            let nodes: Vec<Rect> = x
                .iter()
                .map(|&xi| Rect {
                    bed: 100.0 - slope * xi + (rnd() - 0.5) * 0.8,
                    width: 5.0 + 60.0 * rnd(),
                    n: 0.025 + 0.03 * rnd(),
                    bank: 3.0,
                })
                .collect();
            let reach = Reach::new(&x, &nodes).expect("valid");
            let peak = 1.0 + 300.0 * rnd();
            let base = if rnd() < 0.3 { 0.0 } else { 0.05 * peak };
            let upstream = Series::new(
                vec![0.0, 3600.0, 4.0 * 3600.0, 8.0 * 3600.0, 12.0 * 3600.0],
                vec![base, base, peak, base, 0.0],
            )
            .expect("valid");
            let bed_end = nodes[n - 1].bed;
            let downstream = match case % 4 {
                0 => DownstreamBoundary::FixedStage {
                    stage: bed_end + 4.0 * rnd(),
                },
                1 => DownstreamBoundary::NormalDepth {
                    friction_slope: slope.max(1e-4),
                },
                2 => DownstreamBoundary::Rating {
                    table: vec![
                        (bed_end, 0.0),
                        (bed_end + 1.0, 30.0),
                        (bed_end + 5.0, 900.0),
                    ],
                },
                _ => DownstreamBoundary::StageSeries(
                    Series::new(vec![0.0, 43200.0], vec![bed_end + 1.0, bed_end + 3.0])
                        .expect("valid"),
                ),
            };
            let mut p = problem(reach, upstream, downstream, hourly(14));
            p.laterals = vec![Lateral {
                chainage: x[n / 2],
                inflow: Series::new(vec![0.0, 20000.0, 30000.0], vec![0.0, 0.2 * peak, 0.0])
                    .expect("valid"),
            }];
            let r = route(&p).unwrap_or_else(|e| panic!("case {case}: {e}"));
            assert!(all_finite(&r), "case {case}");
            for row in &r.stage {
                for (z, s) in row.iter().zip(&nodes) {
                    assert!(*z >= s.bed, "case {case}: stage below bed");
                }
            }
            assert!(
                r.diagnostics.mass_balance_error_pct.abs() < 0.5,
                "case {case}: {:?}",
                r.diagnostics
            );
        }
    }
}

//! What a diffusive-wave run is given: the downstream boundary, the initial
//! state, the numerical options and the whole [`Problem`], with the checks
//! that reject a malformed one before any step is taken.

use serde::{Deserialize, Serialize};

use crate::engine::routing::{Lateral, Reach, RoutingError};
use crate::engine::series::Series;

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
    pub(crate) fn is_stage(&self) -> bool {
        matches!(self, Self::FixedStage { .. } | Self::StageSeries(_))
    }
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

/// The time integrator of the diffusive-wave solver.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TimeScheme {
    /// The θ-method with [`Options::theta`]; the step is chosen for
    /// Newton's convergence and capped at [`Options::dt_max`].
    #[default]
    Theta,
    /// TR-BDF2 (Bank et al. 1985): a trapezoid stage to t + γΔt and a
    /// BDF2 stage to t + Δt, γ = 2 − √2, second order and L-stable, with
    /// a local error estimate (Hosea and Shampine 1996) choosing the step
    /// against [`Options::local_error_tol`].
    TrBdf2,
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
    /// Time integrator; the θ-method unless chosen otherwise.
    pub scheme: TimeScheme,
    /// TR-BDF2 only: largest estimated local error of a step in stage (m);
    /// a step above it is retried shorter. Newton then also stops at a
    /// tenth of it if that is below [`Options::newton_tol`].
    pub local_error_tol: f64,
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
            scheme: TimeScheme::Theta,
            local_error_tol: 1e-3,
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

pub(crate) fn check_options(o: &Options) -> Result<(), RoutingError> {
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
    if !(o.local_error_tol.is_finite() && o.local_error_tol > 0.0) {
        return bad("local_error_tol", o.local_error_tol, "must be positive");
    }
    Ok(())
}

pub(crate) fn check_boundary(b: &DownstreamBoundary) -> Result<(), RoutingError> {
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

#[cfg(test)]
mod tests {
    use super::*;

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
}

//! How a routing run went: the numbers and warnings a forecaster needs to
//! judge it, the same for both methods.
//!
//! Each method watches the state it computes (`Watch`: dry nodes, sections
//! extended above their survey, the largest Froude number), counts its
//! steps (`StepStats`) and closes its volume budget (`engine::budget`);
//! `summarise` turns those into [`Diagnostics`] with the Ponce–Li–Simons
//! applicability number of the method and the [`Warning`]s, so a threshold
//! or a warning rule is written once for both.

use serde::Serialize;

use crate::engine::GRAVITY;
use crate::engine::budget::MassBalance;
use crate::engine::props::Props;
use crate::engine::series::Series;

/// A node shallower than this (m) is reported as dry.
pub const DRY_DEPTH: f64 = 1e-3;
/// Froude number above which a warning is raised.
pub const FROUDE_WARN: f64 = 0.7;
/// Froude number above which the warning says the flow is near critical.
pub const FROUDE_STRONG: f64 = 0.9;
/// Mass-balance error (%) above which a warning is raised.
pub const MASS_BALANCE_WARN_PCT: f64 = 0.5;
/// Ponce–Li–Simons (1978) threshold for diffusion waves: T·S0·√(g/d0) ≥ 30
/// (from memory).
pub const DIFFUSION_APPLICABILITY_THRESHOLD: f64 = 30.0;
/// Ponce–Li–Simons (1978) threshold for kinematic waves: T·S0·u0/d0 ≥ 171
/// (from memory).
pub const KINEMATIC_APPLICABILITY_THRESHOLD: f64 = 171.0;

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
    /// Largest Froude number at any node: for the diffusive solver after
    /// any accepted step, among nodes deeper than the drying ramp (about
    /// 1 cm); for the kinematic solver at the start and the output times.
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

/// The routing method a run used: it decides the form and threshold of the
/// applicability number and names the method in warnings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Method {
    /// Implicit diffusive wave ([`crate::engine::diffusive`]).
    DiffusiveWave,
    /// Variable-parameter Muskingum–Cunge ([`crate::engine::kinematic`]).
    KinematicWave,
}

impl Method {
    fn name(self) -> &'static str {
        match self {
            Self::DiffusiveWave => "diffusive-wave",
            Self::KinematicWave => "kinematic-wave",
        }
    }

    fn applicability_threshold(self) -> f64 {
        match self {
            Self::DiffusiveWave => DIFFUSION_APPLICABILITY_THRESHOLD,
            Self::KinematicWave => KINEMATIC_APPLICABILITY_THRESHOLD,
        }
    }

    /// Ponce–Li–Simons dimensionless wave period (see
    /// [`Diagnostics::applicability_number`]): `T·S0·√(g/d0)` for the
    /// diffusive wave, `T·S0·u0/d0` for the kinematic wave; `None` when the
    /// slope, the depth or (kinematic) the velocity is not positive.
    pub(crate) fn applicability(self, duration: f64, slope: f64, start: MeanState) -> Option<f64> {
        let MeanState { depth, velocity } = start;
        match self {
            Self::DiffusiveWave => {
                (slope > 0.0 && depth > 0.0).then(|| duration * slope * (GRAVITY / depth).sqrt())
            }
            Self::KinematicWave => (slope > 0.0 && depth > 0.0 && velocity > 0.0)
                .then(|| duration * slope * velocity / depth),
        }
    }
}

/// Mean hydraulic depth and velocity over the nodes of a state, the `d0`
/// and `u0` of the applicability number.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct MeanState {
    depth: f64,
    velocity: f64,
}

impl MeanState {
    /// From each node's properties and discharge.
    pub(crate) fn of(nodes: impl ExactSizeIterator<Item = (Props, f64)>) -> Self {
        let n = nodes.len() as f64;
        let (mut depth, mut velocity) = (0.0, 0.0);
        for (p, q) in nodes {
            depth += p.hydraulic_depth();
            velocity += p.velocity(q);
        }
        Self {
            depth: depth / n,
            velocity: velocity / n,
        }
    }
}

/// Duration used for the applicability number: the part of the upstream
/// hydrograph inside the run, or the run length for a constant inflow.
pub(crate) fn wave_duration(upstream: &Series, start: f64, end: f64) -> f64 {
    let d = upstream.end().min(end) - upstream.start().max(start);
    if d > 0.0 { d } else { end - start }
}

/// What a run watches at every node whenever it knows the state there:
/// nodes that ran dry, sections extended above their survey, and the
/// largest Froude number with where and when it occurred.
pub(crate) struct Watch {
    dry: Vec<bool>,
    extrapolated: Vec<bool>,
    /// (Froude number, chainage m, time s).
    max_froude: (f64, f64, f64),
    froude_min_depth: f64,
}

impl Watch {
    /// For `n` nodes, starting at chainage `x0` and time `t0`. Nodes
    /// shallower than `froude_min_depth` (m) are left out of the Froude
    /// maximum.
    pub(crate) fn new(n: usize, x0: f64, t0: f64, froude_min_depth: f64) -> Self {
        Self {
            dry: vec![false; n],
            extrapolated: vec![false; n],
            max_froude: (0.0, x0, t0),
            froude_min_depth,
        }
    }

    /// Node `i` at chainage `x` and time `t` has properties `p`, discharge
    /// `q` and depth `depth` above its bed.
    pub(crate) fn observe(&mut self, i: usize, p: &Props, q: f64, depth: f64, x: f64, t: f64) {
        if depth < DRY_DEPTH {
            self.dry[i] = true;
        }
        if p.extrapolated {
            self.extrapolated[i] = true;
        }
        if depth < self.froude_min_depth {
            return;
        }
        let fr = p.froude(q);
        if fr > self.max_froude.0 {
            self.max_froude = (fr, x, t);
        }
    }
}

/// Step counts and sizes of a run.
pub(crate) struct StepStats {
    steps: usize,
    rejected: usize,
    newton_total: usize,
    newton_max: usize,
    dt_min: f64,
    dt_max: f64,
}

impl StepStats {
    pub(crate) fn new() -> Self {
        Self {
            steps: 0,
            rejected: 0,
            newton_total: 0,
            newton_max: 0,
            dt_min: f64::INFINITY,
            dt_max: 0.0,
        }
    }

    /// A step of `dt` seconds was accepted after `newton_iterations`.
    pub(crate) fn accept(&mut self, dt: f64, newton_iterations: usize) {
        self.steps += 1;
        self.newton_total += newton_iterations;
        self.newton_max = self.newton_max.max(newton_iterations);
        self.dt_min = self.dt_min.min(dt);
        self.dt_max = self.dt_max.max(dt);
    }

    /// A step was rejected and will be retried.
    pub(crate) fn reject(&mut self) {
        self.rejected += 1;
    }
}

/// Everything a run observed, put together as [`Diagnostics`] with its
/// warnings. `chainage` locates the nodes.
pub(crate) fn summarise(
    method: Method,
    balance: MassBalance,
    watch: Watch,
    steps: StepStats,
    applicability: Option<f64>,
    chainage: &[f64],
) -> Diagnostics {
    let flagged = |flags: &[bool]| (0..flags.len()).filter(|&i| flags[i]).collect::<Vec<_>>();
    let dry_nodes = flagged(&watch.dry);
    let extrapolated_nodes = flagged(&watch.extrapolated);
    let mut diagnostics = Diagnostics {
        mass_balance_error_pct: balance.error_pct,
        inflow_volume: balance.inflow_volume,
        lateral_volume: balance.lateral_volume,
        outflow_volume: balance.outflow_volume,
        storage_change: balance.storage_change,
        max_froude: watch.max_froude.0,
        max_froude_chainage: watch.max_froude.1,
        max_froude_time: watch.max_froude.2,
        applicability_number: applicability,
        applicability_threshold: method.applicability_threshold(),
        extrapolated_chainages: extrapolated_nodes.iter().map(|&i| chainage[i]).collect(),
        dry_nodes,
        extrapolated_nodes,
        dt_min_used: if steps.steps > 0 { steps.dt_min } else { 0.0 },
        dt_max_used: steps.dt_max,
        steps: steps.steps,
        newton_iterations_total: steps.newton_total,
        max_newton_iterations: steps.newton_max,
        rejected_steps: steps.rejected,
        warnings: Vec::new(),
        wall_time_s: None,
    };
    diagnostics.warnings = collect_warnings(&diagnostics, chainage, method.name());
    diagnostics
}

/// Turn the numbers of a run into warnings.
fn collect_warnings(d: &Diagnostics, chainage: &[f64], method: &'static str) -> Vec<Warning> {
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
}

//! Variable-parameter Muskingum–Cunge routing: a cross-check method.
//!
//! Muskingum–Cunge (Cunge 1969, from memory) routes discharge segment by segment with the
//! Muskingum recurrence
//!
//! ```text
//! O₂ = C0·I₂ + C1·I₁ + C2·O₁
//! C0 = (C − 2X)/(2(1−X) + C),  C1 = (C + 2X)/(2(1−X) + C),
//! C2 = (2(1−X) − C)/(2(1−X) + C)
//! ```
//!
//! where the Courant number `C = c·Δt/Δx` and the weighting
//! `X = ½ (1 − Q/(T·S0·c·Δx))` are chosen so that the scheme's numerical
//! diffusion equals the physical diffusivity `Q/(2·T·S0)` of a diffusion
//! wave (Ponce 1989, *Engineering Hydrology*, from memory). Celerity and
//! width are recomputed every step from the cross-sections at normal depth
//! for a reference discharge (the "variable-parameter" form), so the method
//! captures the stage dependence of celerity that a fixed-parameter
//! Muskingum misses.
//!
//! It has no backwater: the stage at every node is the normal depth for the
//! routed discharge at the local bed slope, and there is no downstream
//! boundary condition. Comparing it with the diffusive solver therefore tells
//! a forecaster how much backwater matters on a reach (common practice).
//!
//! Choices made here:
//!
//! * Reference discharge of a segment and step: the mean of the three known
//!   values `I₁, I₂, O₁` (three-point average, Ponce & Yevjevich 1978, from
//!   memory); it avoids iterating on the unknown `O₂`.
//! * Celerity `c = dQ/dA = √S0 · (dK/dz) / T` and top width `T` are evaluated
//!   at normal depth for the reference discharge at both end sections of the
//!   segment with the segment's bed slope, then averaged.
//! * Lateral inflows enter at the node whose control volume contains them and
//!   are added to that node's discharge, so they are routed by the segments
//!   downstream of it.
//! * Routed discharges are clipped at zero (the recurrence can undershoot
//!   slightly when `C0 < 0`); the mass-balance figure shows the effect.
//! * Node stage is normal depth for the node discharge at the mean slope of
//!   the adjacent segments. The stage is only computed at output times and at
//!   the start, so Froude numbers and dry nodes refer to those instants.
//! * Storage for the mass balance is the geometric storage at those normal
//!   depths, which the Muskingum recurrence conserves only approximately; the
//!   figure is a consistency indicator rather than an exact budget. Because
//!   the coefficients change from step to step, variable-parameter
//!   Muskingum–Cunge does not conserve volume exactly (a known property of
//!   the method): on trial runs about 1–2 % for in-bank floods and up to
//!   about 5 % when celerity drops sharply as a flood spreads onto
//!   floodplains. Use it as a cross-check of crest discharge and timing on
//!   steep reaches, not for volumes.

use thiserror::Error;

use crate::engine::budget::{Budget, Flows};
use crate::engine::diagnostics::{self, MeanState, Method, StepStats, Watch, wave_duration};
use crate::engine::props::{Hydraulics, Props};
use crate::engine::roots::solve_increasing;
use crate::engine::routing::{
    Lateral, LateralInflows, Reach, RoutingError, RoutingResult, check_run_inputs,
};
use crate::engine::series::Series;

pub use crate::engine::diagnostics::KINEMATIC_APPLICABILITY_THRESHOLD;

/// Discharge below which a segment is treated as carrying nothing (m³/s).
const TINY_DISCHARGE: f64 = 1e-9;

/// Errors of the Muskingum–Cunge solver.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum KinematicError {
    /// An input failed the checks shared with the diffusive solver.
    #[error(transparent)]
    Input(#[from] RoutingError),
    /// The time step is not a positive finite number.
    #[error("time step must be positive and finite, got {0}")]
    InvalidTimeStep(f64),
    /// Kinematic routing needs the bed to fall along every segment.
    #[error(
        "segment {segment} (chainage {upstream_chainage} m to {downstream_chainage} m) has bed slope {slope}; \
         Muskingum–Cunge needs a positive slope"
    )]
    NonPositiveSlope {
        /// Segment index (between nodes `segment` and `segment + 1`).
        segment: usize,
        /// Upstream chainage (m).
        upstream_chainage: f64,
        /// Downstream chainage (m).
        downstream_chainage: f64,
        /// Bed slope (dimensionless).
        slope: f64,
    },
    /// No normal depth found (a section with non-finite properties).
    #[error("no normal depth at node {node} (chainage {chainage} m) for {discharge} m³/s")]
    NormalDepth {
        /// Node index.
        node: usize,
        /// Its chainage (m).
        chainage: f64,
        /// Discharge (m³/s).
        discharge: f64,
    },
}

/// Everything one Muskingum–Cunge run needs. There is no downstream
/// boundary and the initial state is always the steady flow for the inflow
/// and laterals at the start time.
#[derive(Debug)]
pub struct Problem<'a, H> {
    /// Nodes and their hydraulics; bed must fall along every segment.
    pub reach: Reach<'a, H>,
    /// Inflow at the first node (m³/s, non-negative).
    pub upstream: Series,
    /// Point inflows.
    pub laterals: Vec<Lateral>,
    /// Start time (s).
    pub start_time: f64,
    /// Output times (s), strictly increasing, none before the start.
    pub output_times: Vec<f64>,
    /// Routing time step (s); the last step before an output time is
    /// shortened to land on it.
    pub dt: f64,
}

/// Normal-depth stage for discharge `q` at slope `slope` (safeguarded
/// Newton from `guess`, bisection fallback). Returns the stage and the
/// properties there.
fn normal_stage<H: Hydraulics>(h: &H, q: f64, slope: f64, guess: f64) -> Option<(f64, Props)> {
    let bed = h.bed_elevation();
    let target = q / slope.sqrt();
    if target <= 0.0 {
        return Some((bed, h.props(bed)));
    }
    let mut lo = bed;
    let mut hi = f64::INFINITY;
    let mut z = if guess.is_finite() && guess > bed {
        guess
    } else {
        bed + 0.5
    };
    for _ in 0..80 {
        let p = h.props(z);
        let f = p.conveyance - target;
        if !f.is_finite() {
            return None;
        }
        if f.abs() <= 1e-12 * target {
            return Some((z, p));
        }
        if f > 0.0 {
            hi = z;
        } else {
            lo = z;
        }
        let mut next = z - f / p.dconveyance_dz;
        if !(next.is_finite() && next > lo && next < hi) {
            next = if hi.is_finite() {
                0.5 * (lo + hi)
            } else {
                lo + 2.0 * (z - bed).max(0.5)
            };
        }
        if (next - z).abs() < 1e-9 {
            return Some((next, h.props(next)));
        }
        z = next;
    }
    let z = solve_increasing(|z| h.props(z).conveyance, bed, target)?;
    Some((z, h.props(z)))
}

/// Celerity dQ/dA at normal depth (m/s) and conveying top width (m).
fn celerity(p: &Props, slope: f64) -> (f64, f64) {
    if p.flow_top_width > 0.0 {
        (
            slope.sqrt() * p.dconveyance_dz / p.flow_top_width,
            p.flow_top_width,
        )
    } else {
        (0.0, 0.0)
    }
}

/// Route the inflow with variable-parameter Muskingum–Cunge.
pub fn route<H: Hydraulics>(p: &Problem<'_, H>) -> Result<RoutingResult, KinematicError> {
    if !(p.dt.is_finite() && p.dt > 0.0) {
        return Err(KinematicError::InvalidTimeStep(p.dt));
    }
    check_run_inputs(p.start_time, &p.output_times, &p.upstream)?;
    let mut laterals = LateralInflows::new(&p.reach, &p.laterals)?;
    let reach = p.reach;
    let (x, n) = (reach.chainage(), reach.len());
    let mut segments = Segments::new(&reach)?;
    let mut stages = NodeStages::new(&reach, &segments.slope);

    // Steady initial discharge.
    let t0 = p.start_time;
    let mut up = p.upstream.cursor();
    let mut lat = vec![0.0; n];
    laterals.fill(t0, &mut lat);
    let mut flow = Flow::steady(up.at(t0), &lat);
    let mut old = Flows {
        upstream: flow.q[0] - lat[0],
        lateral: lat.iter().sum(),
        outflow: flow.q[n - 1],
    };
    // Every node counts for the Froude maximum: stages exist only at the
    // start and the output times, never as thin trial films.
    let mut watch = Watch::new(n, x[0], t0, f64::NEG_INFINITY);
    let storage0 = stages.at(&flow.q, &mut watch, t0)?;
    let start = stages.mean_state(&flow.q);
    // The Muskingum recurrence weights the two time levels equally, so its
    // volumes are integrated with the trapezoid rule.
    let mut budget = Budget::new(0.5, storage0);
    let mut storage1 = storage0;

    let n_out = p.output_times.len();
    let mut stage_out = Vec::with_capacity(n_out);
    let mut discharge_out = Vec::with_capacity(n_out);
    let mut k = 0;
    while k < n_out && p.output_times[k] <= t0 {
        stage_out.push(stages.z.clone());
        discharge_out.push(flow.q.clone());
        k += 1;
    }
    let mut t = t0;
    let mut stats = StepStats::new();
    while k < n_out {
        let target = p.output_times[k];
        let remaining = target - t;
        let (dt, t_new) = if remaining <= p.dt * (1.0 + 1e-9) {
            (remaining, target)
        } else {
            (p.dt, t + p.dt)
        };
        let q_up = up.at(t_new);
        laterals.fill(t_new, &mut lat);
        flow.step(&mut segments, dt, q_up, &lat)?;
        let new = Flows {
            upstream: q_up,
            lateral: lat.iter().sum(),
            outflow: flow.q[n - 1],
        };
        budget.step(dt, &old, &new);
        old = new;
        t = t_new;
        stats.accept(dt, 0);
        if t_new == target {
            storage1 = stages.at(&flow.q, &mut watch, t)?;
            stage_out.push(stages.z.clone());
            discharge_out.push(flow.q.clone());
            k += 1;
        }
    }

    let method = Method::KinematicWave;
    let duration = wave_duration(&p.upstream, t0, p.output_times[n_out - 1]);
    let applicability = method.applicability(duration, reach.mean_bed_slope(), start);
    let balance = budget.close(storage1);
    Ok(RoutingResult {
        output_times: p.output_times.clone(),
        stage: stage_out,
        discharge: discharge_out,
        final_state: stages.z,
        diagnostics: diagnostics::summarise(method, balance, watch, stats, applicability, x),
    })
}

/// The segments between nodes: length, bed slope and the warm starts of
/// the normal depths at their two ends.
struct Segments<'a, H> {
    nodes: &'a [H],
    chainage: &'a [f64],
    dx: Vec<f64>,
    slope: Vec<f64>,
    /// Last normal-depth stages at the (upstream, downstream) end.
    z: Vec<[f64; 2]>,
}

impl<'a, H: Hydraulics> Segments<'a, H> {
    /// Lengths and slopes; every slope must be positive.
    fn new(reach: &Reach<'a, H>) -> Result<Self, KinematicError> {
        let (x, nodes) = (reach.chainage(), reach.nodes());
        let n = nodes.len();
        let dx: Vec<f64> = x.windows(2).map(|w| w[1] - w[0]).collect();
        let mut slope = vec![0.0; n - 1];
        for j in 0..n - 1 {
            let s = (nodes[j].bed_elevation() - nodes[j + 1].bed_elevation()) / dx[j];
            // Written so that a NaN slope is rejected too.
            if s.is_nan() || s <= 0.0 {
                return Err(KinematicError::NonPositiveSlope {
                    segment: j,
                    upstream_chainage: x[j],
                    downstream_chainage: x[j + 1],
                    slope: s,
                });
            }
            slope[j] = s;
        }
        let z = (0..n - 1)
            .map(|j| {
                [
                    nodes[j].bed_elevation() + 1.0,
                    nodes[j + 1].bed_elevation() + 1.0,
                ]
            })
            .collect();
        Ok(Self {
            nodes,
            chainage: x,
            dx,
            slope,
            z,
        })
    }

    /// Outflow of segment `j` after a step of `dt` from inflow `i_old` to
    /// `i_new`, with outflow `o_old` before it (the Muskingum recurrence with
    /// Cunge's parameters for the three-point reference discharge).
    fn route(
        &mut self,
        j: usize,
        dt: f64,
        i_old: f64,
        i_new: f64,
        o_old: f64,
    ) -> Result<f64, KinematicError> {
        let q_ref = (i_old + i_new + o_old) / 3.0;
        if q_ref <= TINY_DISCHARGE {
            return Ok(0.0);
        }
        let (slope, dx) = (self.slope[j], self.dx[j]);
        let mut c_sum = 0.0;
        let mut t_sum = 0.0;
        for (end, node) in [j, j + 1].into_iter().enumerate() {
            let (z, pr) = normal_stage(&self.nodes[node], q_ref, slope, self.z[j][end]).ok_or(
                KinematicError::NormalDepth {
                    node,
                    chainage: self.chainage[node],
                    discharge: q_ref,
                },
            )?;
            self.z[j][end] = z;
            let (c, w) = celerity(&pr, slope);
            c_sum += c;
            t_sum += w;
        }
        let (c, width) = (0.5 * c_sum, 0.5 * t_sum);
        if !(c > 0.0 && width > 0.0) {
            return Ok(0.0);
        }
        let xw = 0.5 * (1.0 - q_ref / (width * slope * c * dx));
        let cr = c * dt / dx;
        let den = 2.0 * (1.0 - xw) + cr;
        let c0 = (cr - 2.0 * xw) / den;
        let c1 = (cr + 2.0 * xw) / den;
        let c2 = (2.0 * (1.0 - xw) - cr) / den;
        Ok((c0 * i_new + c1 * i_old + c2 * o_old).max(0.0))
    }
}

/// Discharges at the nodes, before and after the step being taken.
struct Flow {
    /// Node discharge, the node's lateral included (m³/s).
    q: Vec<f64>,
    /// Arrival from upstream, before the node's lateral (m³/s).
    routed: Vec<f64>,
    q_new: Vec<f64>,
    routed_new: Vec<f64>,
}

impl Flow {
    /// Steady flow: the inflow `q_up` plus the laterals above each node.
    fn steady(q_up: f64, lat: &[f64]) -> Self {
        let n = lat.len();
        let mut q = vec![0.0; n];
        let mut routed = vec![0.0; n];
        let mut acc = q_up;
        for i in 0..n {
            routed[i] = acc;
            acc += lat[i];
            q[i] = acc;
        }
        Self {
            q_new: q.clone(),
            routed_new: routed.clone(),
            q,
            routed,
        }
    }

    /// Route one step of `dt` to inflow `q_up` and laterals `lat`, segment
    /// by segment downstream.
    fn step<H: Hydraulics>(
        &mut self,
        segments: &mut Segments<'_, H>,
        dt: f64,
        q_up: f64,
        lat: &[f64],
    ) -> Result<(), KinematicError> {
        self.routed_new[0] = q_up;
        self.q_new[0] = q_up + lat[0];
        for j in 0..lat.len() - 1 {
            let out = segments.route(j, dt, self.q[j], self.q_new[j], self.routed[j + 1])?;
            self.routed_new[j + 1] = out;
            self.q_new[j + 1] = out + lat[j + 1];
        }
        std::mem::swap(&mut self.q, &mut self.q_new);
        std::mem::swap(&mut self.routed, &mut self.routed_new);
        Ok(())
    }
}

/// Node stages at normal depth for the node discharges, at the mean slope
/// of the adjacent segments.
struct NodeStages<'a, H> {
    nodes: &'a [H],
    chainage: &'a [f64],
    slope: Vec<f64>,
    length: Vec<f64>,
    /// Last stages computed, and the warm starts of the next (m).
    z: Vec<f64>,
}

impl<'a, H: Hydraulics> NodeStages<'a, H> {
    fn new(reach: &Reach<'a, H>, segment_slope: &[f64]) -> Self {
        let nodes = reach.nodes();
        let n = nodes.len();
        let slope = (0..n)
            .map(|i| match (i.checked_sub(1), i + 1 < n) {
                (Some(l), true) => 0.5 * (segment_slope[l] + segment_slope[i]),
                (Some(l), false) => segment_slope[l],
                (None, _) => segment_slope[0],
            })
            .collect();
        Self {
            nodes,
            chainage: reach.chainage(),
            slope,
            length: reach.control_lengths(),
            z: nodes.iter().map(|h| h.bed_elevation() + 1.0).collect(),
        }
    }

    /// Stages for node discharges `q` at time `t`, shown to the watch;
    /// returns the storage they hold (m³).
    fn at(&mut self, q: &[f64], watch: &mut Watch, t: f64) -> Result<f64, KinematicError> {
        let mut storage = 0.0;
        for (i, node) in self.nodes.iter().enumerate() {
            let (z, pr) = normal_stage(node, q[i], self.slope[i], self.z[i]).ok_or(
                KinematicError::NormalDepth {
                    node: i,
                    chainage: self.chainage[i],
                    discharge: q[i],
                },
            )?;
            self.z[i] = z;
            storage += pr.storage_area * self.length[i];
            watch.observe(i, &pr, q[i], z - node.bed_elevation(), self.chainage[i], t);
        }
        Ok(storage)
    }

    /// Mean depth and velocity at the last stages computed, for discharges
    /// `q`.
    fn mean_state(&self, q: &[f64]) -> MeanState {
        MeanState::of(
            self.nodes
                .iter()
                .zip(&self.z)
                .zip(q)
                .map(|((h, &z), &q)| (h.props(z), q)),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::test_sections::Wide;

    fn reach_nodes(n: usize, dx: f64, slope: f64) -> (Vec<f64>, Vec<Wide>) {
        let x: Vec<f64> = (0..n).map(|i| i as f64 * dx).collect();
        let nodes = x
            .iter()
            .map(|&xi| Wide {
                bed: 50.0 - slope * xi,
                width: 40.0,
                n: 0.03,
            })
            .collect();
        (x, nodes)
    }

    #[test]
    fn normal_stage_matches_closed_form() {
        // Wide rectangle: h = (q n / (B √S))^{3/5} (Manning, common practice).
        let s = Wide {
            bed: 2.0,
            width: 40.0,
            n: 0.03,
        };
        for &q in &[0.01, 1.0, 100.0, 5000.0] {
            let (z, _) = normal_stage(&s, q, 1e-3, 0.0).expect("solves");
            let h = (q * 0.03 / (40.0 * 1e-3_f64.sqrt())).powf(0.6);
            assert!((z - 2.0 - h).abs() < 1e-8, "q {q}: {} vs {h}", z - 2.0);
        }
        assert_eq!(normal_stage(&s, 0.0, 1e-3, 5.0).map(|r| r.0), Some(2.0));
    }

    #[test]
    fn celerity_is_five_thirds_velocity_for_wide_channel() {
        // Common practice: c = (5/3) V for Manning on a wide channel.
        let s = Wide {
            bed: 0.0,
            width: 40.0,
            n: 0.03,
        };
        let (z, p) = normal_stage(&s, 80.0, 5e-4, 1.0).expect("solves");
        let (c, w) = celerity(&p, 5e-4);
        let v = 80.0 / (40.0 * z);
        assert!((c / v - 5.0 / 3.0).abs() < 1e-9);
        assert_eq!(w, 40.0);
    }

    #[test]
    fn constant_inflow_stays_constant() {
        let (x, nodes) = reach_nodes(11, 500.0, 1e-3);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let p = Problem {
            reach,
            upstream: Series::constant(30.0).expect("valid"),
            laterals: vec![Lateral {
                chainage: 2600.0,
                inflow: Series::constant(5.0).expect("valid"),
            }],
            start_time: 0.0,
            output_times: vec![0.0, 3600.0, 7200.0],
            dt: 300.0,
        };
        let r = route(&p).expect("runs");
        let last = r.discharge.last().expect("rows");
        assert!((last[0] - 30.0).abs() < 1e-9);
        assert!((last[10] - 35.0).abs() < 1e-9);
        // The lateral at 2600 m enters node 5 (control volume 2250–2750 m).
        assert!((last[4] - 30.0).abs() < 1e-9 && (last[5] - 35.0).abs() < 1e-9);
        assert!(r.diagnostics.mass_balance_error_pct.abs() < 1e-9);
    }

    #[test]
    fn flood_is_routed_and_attenuated() {
        let (x, nodes) = reach_nodes(41, 500.0, 1e-3);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let t: Vec<f64> = (0..=48).map(|i| i as f64 * 1800.0).collect();
        let v = t
            .iter()
            .map(|&ti| 20.0 + 180.0 * (-((ti - 21600.0) / 7200.0).powi(2)).exp())
            .collect();
        let p = Problem {
            reach,
            upstream: Series::new(t, v).expect("valid"),
            laterals: vec![],
            start_time: 0.0,
            output_times: (0..=48).map(|i| i as f64 * 1800.0).collect(),
            dt: 300.0,
        };
        let r = route(&p).expect("runs");
        let peak_in = r.discharge.iter().map(|row| row[0]).fold(0.0, f64::max);
        let (peak_out, t_out) = r
            .discharge
            .iter()
            .zip(&r.output_times)
            .map(|(row, &t)| (row[40], t))
            .fold((0.0, 0.0), |a, b| if b.0 > a.0 { b } else { a });
        assert!(
            peak_out < peak_in && peak_out > 0.5 * peak_in,
            "{peak_out} vs {peak_in}"
        );
        assert!(t_out > 21600.0, "the peak arrives later: {t_out}");
        assert!(
            r.diagnostics.mass_balance_error_pct.abs() < 1.0,
            "{:?}",
            r.diagnostics
        );
        assert!(r.stage.iter().flatten().all(|z| z.is_finite()));
    }

    #[test]
    fn rejects_flat_segment_and_bad_step() {
        let x = [0.0, 100.0, 200.0];
        let nodes = [
            Wide {
                bed: 1.0,
                width: 10.0,
                n: 0.03,
            },
            Wide {
                bed: 0.9,
                width: 10.0,
                n: 0.03,
            },
            Wide {
                bed: 0.95,
                width: 10.0,
                n: 0.03,
            },
        ];
        let reach = Reach::new(&x, &nodes).expect("valid");
        let mut p = Problem {
            reach,
            upstream: Series::constant(1.0).expect("valid"),
            laterals: vec![],
            start_time: 0.0,
            output_times: vec![3600.0],
            dt: 60.0,
        };
        match route(&p) {
            Err(KinematicError::NonPositiveSlope { segment: 1, .. }) => {}
            other => panic!("expected a slope error, got {other:?}"),
        }
        p.dt = 0.0;
        assert_eq!(route(&p).err(), Some(KinematicError::InvalidTimeStep(0.0)));
        p.dt = 60.0;
        p.output_times = vec![];
        assert!(matches!(
            route(&p),
            Err(KinematicError::Input(RoutingError::NoOutputTimes))
        ));
    }

    #[test]
    fn zero_inflow_gives_dry_finite_result() {
        let (x, nodes) = reach_nodes(6, 100.0, 1e-3);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let p = Problem {
            reach,
            upstream: Series::constant(0.0).expect("valid"),
            laterals: vec![],
            start_time: 0.0,
            output_times: vec![600.0, 1200.0],
            dt: 60.0,
        };
        let r = route(&p).expect("runs");
        assert!(r.stage.iter().flatten().all(|z| z.is_finite()));
        assert_eq!(r.diagnostics.dry_nodes.len(), 6);
        assert!(r.discharge.iter().flatten().all(|&q| q == 0.0));
    }
}

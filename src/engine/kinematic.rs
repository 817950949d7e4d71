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

use crate::engine::diffusive::{
    Diagnostics, Lateral, Reach, RoutingError, RoutingResult, collect_warnings, lateral_nodes,
    validate_inflow, validate_output_times, wave_duration,
};
use crate::engine::props::{Hydraulics, Props};
use crate::engine::series::{Cursor, Series};

/// Ponce–Li–Simons (1978) threshold for kinematic waves: T·S0·u0/d0 ≥ 171
/// (from memory).
pub const KINEMATIC_APPLICABILITY_THRESHOLD: f64 = 171.0;

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
    let z = crate::engine::diffusive::solve_increasing(|z| h.props(z).conveyance, bed, target)?;
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
    validate_output_times(p.start_time, &p.output_times)?;
    validate_inflow(&p.upstream, || "upstream".to_string())?;
    let reach = p.reach;
    let lat_node = lateral_nodes(&reach, &p.laterals)?;
    let (x, nodes) = (reach.chainage(), reach.nodes());
    let n = reach.len();
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
    let node_slope: Vec<f64> = (0..n)
        .map(|i| match (i.checked_sub(1), i + 1 < n) {
            (Some(l), true) => 0.5 * (slope[l] + slope[i]),
            (Some(l), false) => slope[l],
            (None, _) => slope[0],
        })
        .collect();
    let length = reach.control_lengths();

    let mut up = p.upstream.cursor();
    let mut lat_cursors: Vec<Cursor<'_>> = p.laterals.iter().map(|l| l.inflow.cursor()).collect();
    let mut lat = vec![0.0; n];
    let fill = |cursors: &mut [Cursor<'_>], t: f64, out: &mut [f64]| {
        out.fill(0.0);
        for (c, &node) in cursors.iter_mut().zip(&lat_node) {
            out[node] += c.at(t);
        }
    };

    // Steady initial discharge.
    let t0 = p.start_time;
    fill(&mut lat_cursors, t0, &mut lat);
    let mut q = vec![0.0; n];
    let mut routed = vec![0.0; n]; // arrival from upstream, before the node's lateral
    let mut acc = up.at(t0);
    for i in 0..n {
        routed[i] = acc;
        acc += lat[i];
        q[i] = acc;
    }
    let mut q_new = q.clone();
    let mut routed_new = routed.clone();
    let mut lat_sum_old: f64 = lat.iter().sum();
    let mut q_up_old = q[0] - lat[0];

    // Warm starts for the per-segment normal depths (upstream, downstream end).
    let mut z_seg: Vec<[f64; 2]> = (0..n - 1)
        .map(|j| {
            [
                nodes[j].bed_elevation() + 1.0,
                nodes[j + 1].bed_elevation() + 1.0,
            ]
        })
        .collect();
    let mut z_node: Vec<f64> = nodes.iter().map(|h| h.bed_elevation() + 1.0).collect();

    let mut stats = Stats::new(n, x[0], t0);
    let stages = |q: &[f64], z_node: &mut [f64], stats: &mut Stats, t: f64| {
        let mut storage = 0.0;
        for i in 0..n {
            let (z, pr) = normal_stage(&nodes[i], q[i], node_slope[i], z_node[i]).ok_or(
                KinematicError::NormalDepth {
                    node: i,
                    chainage: x[i],
                    discharge: q[i],
                },
            )?;
            z_node[i] = z;
            storage += pr.storage_area * length[i];
            stats.observe(i, &pr, q[i], z - nodes[i].bed_elevation(), x[i], t);
        }
        Ok::<f64, KinematicError>(storage)
    };
    let storage0 = stages(&q, &mut z_node, &mut stats, t0)?;
    // Initial mean depth and velocity for the applicability number.
    let (mut d_sum, mut u_sum) = (0.0, 0.0);
    for i in 0..n {
        let pr = nodes[i].props(z_node[i]);
        d_sum += pr.hydraulic_depth();
        u_sum += pr.velocity(q[i]);
    }
    let (d0, u0) = (d_sum / n as f64, u_sum / n as f64);

    let n_out = p.output_times.len();
    let mut stage_out = Vec::with_capacity(n_out);
    let mut discharge_out = Vec::with_capacity(n_out);
    let mut k = 0;
    while k < n_out && p.output_times[k] <= t0 {
        stage_out.push(z_node.clone());
        discharge_out.push(q.clone());
        k += 1;
    }
    let mut storage1 = storage0;
    let (mut vol_in, mut vol_lat, mut vol_out) = (0.0, 0.0, 0.0);
    let mut t = t0;
    let mut steps = 0usize;
    let (mut dt_min_used, mut dt_max_used) = (f64::INFINITY, 0.0_f64);
    while k < n_out {
        let target = p.output_times[k];
        let remaining = target - t;
        let (dt, t_new) = if remaining <= p.dt * (1.0 + 1e-9) {
            (remaining, target)
        } else {
            (p.dt, t + p.dt)
        };
        let q_up = up.at(t_new);
        fill(&mut lat_cursors, t_new, &mut lat);
        routed_new[0] = q_up;
        q_new[0] = q_up + lat[0];
        for j in 0..n - 1 {
            let (i_old, i_new, o_old) = (q[j], q_new[j], routed[j + 1]);
            let q_ref = (i_old + i_new + o_old) / 3.0;
            let out = if q_ref <= TINY_DISCHARGE {
                0.0
            } else {
                let mut c_sum = 0.0;
                let mut t_sum = 0.0;
                for (end, node) in [j, j + 1].into_iter().enumerate() {
                    let (z, pr) = normal_stage(&nodes[node], q_ref, slope[j], z_seg[j][end])
                        .ok_or(KinematicError::NormalDepth {
                            node,
                            chainage: x[node],
                            discharge: q_ref,
                        })?;
                    z_seg[j][end] = z;
                    let (c, w) = celerity(&pr, slope[j]);
                    c_sum += c;
                    t_sum += w;
                }
                let (c, width) = (0.5 * c_sum, 0.5 * t_sum);
                if c > 0.0 && width > 0.0 {
                    let xw = 0.5 * (1.0 - q_ref / (width * slope[j] * c * dx[j]));
                    let cr = c * dt / dx[j];
                    let den = 2.0 * (1.0 - xw) + cr;
                    let c0 = (cr - 2.0 * xw) / den;
                    let c1 = (cr + 2.0 * xw) / den;
                    let c2 = (2.0 * (1.0 - xw) - cr) / den;
                    (c0 * i_new + c1 * i_old + c2 * o_old).max(0.0)
                } else {
                    0.0
                }
            };
            routed_new[j + 1] = out;
            q_new[j + 1] = out + lat[j + 1];
        }
        let lat_sum: f64 = lat.iter().sum();
        vol_in += 0.5 * dt * (q_up_old + q_up);
        vol_lat += 0.5 * dt * (lat_sum_old + lat_sum);
        vol_out += 0.5 * dt * (q[n - 1] + q_new[n - 1]);
        std::mem::swap(&mut q, &mut q_new);
        std::mem::swap(&mut routed, &mut routed_new);
        q_up_old = q_up;
        lat_sum_old = lat_sum;
        t = t_new;
        steps += 1;
        dt_min_used = dt_min_used.min(dt);
        dt_max_used = dt_max_used.max(dt);
        if t_new == target {
            storage1 = stages(&q, &mut z_node, &mut stats, t)?;
            stage_out.push(z_node.clone());
            discharge_out.push(q.clone());
            k += 1;
        }
    }

    let storage_change = storage1 - storage0;
    let volume_in = vol_in + vol_lat;
    let error = volume_in - vol_out - storage_change;
    let denom = if volume_in > 0.0 {
        volume_in
    } else {
        storage0.max(1.0)
    };
    let s0 = reach.mean_bed_slope();
    let t_end = p.output_times[n_out - 1];
    let applicability =
        (d0 > 0.0 && u0 > 0.0).then(|| wave_duration(&p.upstream, t0, t_end) * s0 * u0 / d0);
    let dry_nodes: Vec<usize> = (0..n).filter(|&i| stats.dry[i]).collect();
    let extrapolated_nodes: Vec<usize> = (0..n).filter(|&i| stats.extrap[i]).collect();
    let mut diagnostics = Diagnostics {
        mass_balance_error_pct: 100.0 * error / denom,
        inflow_volume: vol_in,
        lateral_volume: vol_lat,
        outflow_volume: vol_out,
        storage_change,
        max_froude: stats.max_fr.0,
        max_froude_chainage: stats.max_fr.1,
        max_froude_time: stats.max_fr.2,
        applicability_number: applicability,
        applicability_threshold: KINEMATIC_APPLICABILITY_THRESHOLD,
        extrapolated_chainages: extrapolated_nodes.iter().map(|&i| x[i]).collect(),
        dry_nodes,
        extrapolated_nodes,
        dt_min_used: if steps > 0 { dt_min_used } else { 0.0 },
        dt_max_used,
        steps,
        newton_iterations_total: 0,
        max_newton_iterations: 0,
        rejected_steps: 0,
        warnings: Vec::new(),
        wall_time_s: None,
    };
    diagnostics.warnings = collect_warnings(&diagnostics, x, "kinematic-wave");
    Ok(RoutingResult {
        output_times: p.output_times.clone(),
        stage: stage_out,
        discharge: discharge_out,
        final_state: z_node,
        diagnostics,
    })
}

/// Running maxima and flags observed at the instants stages are computed.
struct Stats {
    dry: Vec<bool>,
    extrap: Vec<bool>,
    max_fr: (f64, f64, f64),
}

impl Stats {
    fn new(n: usize, x0: f64, t0: f64) -> Self {
        Self {
            dry: vec![false; n],
            extrap: vec![false; n],
            max_fr: (0.0, x0, t0),
        }
    }

    fn observe(&mut self, i: usize, p: &Props, q: f64, depth: f64, x: f64, t: f64) {
        if depth < crate::engine::diffusive::DRY_DEPTH {
            self.dry[i] = true;
        }
        if p.extrapolated {
            self.extrap[i] = true;
        }
        let fr = p.froude(q);
        if fr > self.max_fr.0 {
            self.max_fr = (fr, x, t);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Wide rectangle: K = B h^{5/3} / n (hydraulic radius ≈ depth).
    struct Wide {
        bed: f64,
        width: f64,
        n: f64,
    }

    impl Hydraulics for Wide {
        fn bed_elevation(&self) -> f64 {
            self.bed
        }
        fn props(&self, z: f64) -> Props {
            let h = (z - self.bed).max(0.0);
            Props {
                z,
                flow_area: self.width * h,
                storage_area: self.width * h,
                flow_top_width: self.width,
                storage_top_width: self.width,
                wetted_perimeter: self.width,
                conveyance: self.width * h.powf(5.0 / 3.0) / self.n,
                dconveyance_dz: 5.0 / 3.0 * self.width * h.powf(2.0 / 3.0) / self.n,
                extrapolated: false,
            }
        }
    }

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

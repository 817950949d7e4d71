//! Reference checks of the routing solvers against results from outside the
//! project: analytical solutions, handbook methods and published formulas.
//!
//! Every check builds its channel from an analytic section defined here, so
//! the expected values follow from closed-form geometry and do not depend on
//! the production property tables.

use reachcast::engine::GRAVITY;
use reachcast::engine::diffusive::{
    self, DownstreamBoundary, InitialState, Lateral, Options, Problem, Reach, RoutingResult,
    TimeScheme,
};
use reachcast::engine::kinematic;
use reachcast::engine::props::{Hydraulics, Props};
use reachcast::engine::series::Series;

// ---------------------------------------------------------------------------
// Analytic sections
// ---------------------------------------------------------------------------

/// Properties at `z` of a section that conveys all the water it stores
/// (the storage area and width are the flow's), within its geometry.
fn conveying(
    z: f64,
    area: f64,
    top_width: f64,
    wetted_perimeter: f64,
    conveyance: f64,
    dconveyance_dz: f64,
) -> Props {
    Props {
        z,
        flow_area: area,
        storage_area: area,
        flow_top_width: top_width,
        storage_top_width: top_width,
        wetted_perimeter,
        conveyance,
        dconveyance_dz,
        extrapolated: false,
    }
}

/// Wide rectangular channel: hydraulic radius taken equal to the depth, so
/// Manning gives K = B h^{5/3} / n (common practice).
struct WideRect {
    bed: f64,
    width: f64,
    n: f64,
}

impl Hydraulics for WideRect {
    fn bed_elevation(&self) -> f64 {
        self.bed
    }
    fn props(&self, z: f64) -> Props {
        let h = (z - self.bed).max(0.0);
        let k = self.width * h.powf(5.0 / 3.0) / self.n;
        let dk = 5.0 / 3.0 * self.width * h.powf(2.0 / 3.0) / self.n;
        // Wide: the wetted perimeter is taken as the width.
        conveying(z, self.width * h, self.width, self.width, k, dk)
    }
}

/// Trapezoid with bottom width `b` and side slopes `m` horizontal : 1
/// vertical: A = (b + m h) h, P = b + 2 h √(1+m²), T = b + 2 m h,
/// K = A^{5/3} / (n P^{2/3}) (Manning, common practice).
struct Trapezoid {
    bed: f64,
    b: f64,
    m: f64,
    n: f64,
}

impl Trapezoid {
    fn area(&self, h: f64) -> f64 {
        (self.b + self.m * h) * h
    }
    fn conveyance(&self, h: f64) -> f64 {
        if h <= 0.0 {
            return 0.0;
        }
        let p = self.b + 2.0 * h * (1.0 + self.m * self.m).sqrt();
        self.area(h).powf(5.0 / 3.0) / (self.n * p.powf(2.0 / 3.0))
    }
}

impl Hydraulics for Trapezoid {
    fn bed_elevation(&self) -> f64 {
        self.bed
    }
    fn props(&self, z: f64) -> Props {
        let h = (z - self.bed).max(0.0);
        let a = self.area(h);
        let t = self.b + 2.0 * self.m * h;
        let dp = 2.0 * (1.0 + self.m * self.m).sqrt();
        let p = self.b + h * dp;
        let k = self.conveyance(h);
        let dk = if h > 0.0 {
            k * (5.0 / 3.0 * t / a - 2.0 / 3.0 * dp / p)
        } else {
            0.0
        };
        conveying(z, a, t, p, k, dk)
    }
}

/// Rectangular main channel between vertical banks of height `bank`, with
/// flat floodplains of total width `fp` beyond them. Conveyance is the sum
/// of the channel and floodplain sub-sections divided by vertical lines that
/// are not counted as wetted perimeter (divided-channel method, common
/// practice).
struct Compound {
    bed: f64,
    width: f64,
    bank: f64,
    fp: f64,
    n_channel: f64,
    n_fp: f64,
}

impl Hydraulics for Compound {
    fn bed_elevation(&self) -> f64 {
        self.bed
    }
    fn props(&self, z: f64) -> Props {
        let h = (z - self.bed).max(0.0);
        // Channel sub-section.
        let ac = self.width * h;
        let wall = h.min(self.bank);
        let pc = self.width + 2.0 * wall;
        let dpc = if h < self.bank { 2.0 } else { 0.0 };
        let (kc, dkc) = if h > 0.0 {
            let k = ac.powf(5.0 / 3.0) / (self.n_channel * pc.powf(2.0 / 3.0));
            (k, k * (5.0 / 3.0 * self.width / ac - 2.0 / 3.0 * dpc / pc))
        } else {
            (0.0, 0.0)
        };
        // Floodplain sub-section (wide: perimeter = width).
        let hf = (h - self.bank).max(0.0);
        let af = self.fp * hf;
        let (kf, dkf) = if hf > 0.0 {
            let k = self.fp * hf.powf(5.0 / 3.0) / self.n_fp;
            (k, 5.0 / 3.0 * k / hf)
        } else {
            (0.0, 0.0)
        };
        let t = if h > self.bank {
            self.width + self.fp
        } else {
            self.width
        };
        let p = pc + if hf > 0.0 { self.fp } else { 0.0 };
        conveying(z, ac + af, t, p, kc + kf, dkc + dkf)
    }
}

// ---------------------------------------------------------------------------
// Helpers
// ---------------------------------------------------------------------------

/// Normal depth by bisection on Manning's equation Q = K(h) √S0, done here
/// independently of the solvers.
fn normal_depth(conveyance: impl Fn(f64) -> f64, q: f64, s0: f64) -> f64 {
    let target = q / s0.sqrt();
    let (mut lo, mut hi) = (0.0, 1.0);
    while conveyance(hi) < target {
        hi *= 2.0;
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if conveyance(mid) < target {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

fn uniform_chainage(n: usize, dx: f64) -> Vec<f64> {
    (0..n).map(|i| i as f64 * dx).collect()
}

fn series_from(f: impl Fn(f64) -> f64, end: f64, step: f64) -> Series {
    let n = (end / step).round() as usize;
    let t: Vec<f64> = (0..=n).map(|i| i as f64 * step).collect();
    let v: Vec<f64> = t.iter().map(|&ti| f(ti)).collect();
    Series::new(t, v).expect("valid series")
}

/// Smooth single-peaked flood: base + (peak − base)·sin²(π t / duration)
/// for 0 ≤ t ≤ duration.
fn sine_flood(base: f64, peak: f64, duration: f64) -> impl Fn(f64) -> f64 {
    move |t| {
        if (0.0..=duration).contains(&t) {
            base + (peak - base) * (std::f64::consts::PI * t / duration).sin().powi(2)
        } else {
            base
        }
    }
}

fn node_index(x: &[f64], chainage: f64) -> usize {
    x.iter()
        .position(|&xi| (xi - chainage).abs() < 1e-6)
        .expect("node at chainage")
}

/// (value, time) of the largest discharge at `node`.
fn crest_discharge(r: &RoutingResult, node: usize) -> (f64, f64) {
    r.discharge
        .iter()
        .zip(&r.output_times)
        .map(|(row, &t)| (row[node], t))
        .fold((f64::MIN, 0.0), |a, b| if b.0 > a.0 { b } else { a })
}

fn crest_stage(r: &RoutingResult, node: usize) -> f64 {
    r.stage.iter().map(|row| row[node]).fold(f64::MIN, f64::max)
}

fn problem<'a, H: Hydraulics>(
    reach: Reach<'a, H>,
    upstream: Series,
    downstream: DownstreamBoundary,
    output_times: Vec<f64>,
    options: Options,
) -> Problem<'a, H> {
    Problem {
        reach,
        upstream,
        downstream,
        laterals: vec![],
        initial: InitialState::Steady,
        start_time: 0.0,
        output_times,
        options,
    }
}

// ---------------------------------------------------------------------------
// a) Hayami linear diffusion wave
// ---------------------------------------------------------------------------

/// Hayami (1951, from memory): for a small disturbance on uniform flow, the
/// diffusion-wave equation linearises to ∂Q/∂t + c ∂Q/∂x = D ∂²Q/∂x² with,
/// on a wide rectangular Manning channel, c = (5/3) V0 and D = q0 / (2 S0)
/// (common practice). With the disturbance imposed at x = 0 on a
/// semi-infinite channel the response is the convolution of the inflow
/// disturbance with
///
///   u(x, t) = x / (2 √(π D t³)) · exp(−(x − c t)² / (4 D t)).
#[test]
fn hayami_linear_diffusion_wave() {
    let options = Options {
        theta: 0.55,
        dt_initial: 60.0,
        dt_max: 60.0,
        newton_tol: 1e-6,
        ..Options::default()
    };
    hayami_check(options);
}

/// The same check with the TR-BDF2 integrator (second order, L-stable;
/// Bank et al. 1985, from memory) choosing its own steps up to ten times
/// the θ run's from its local error estimate, against the same analytical
/// response and the same tolerances.
#[test]
fn hayami_linear_diffusion_wave_with_trbdf2() {
    let options = Options {
        scheme: TimeScheme::TrBdf2,
        local_error_tol: 1e-5,
        dt_initial: 60.0,
        dt_max: 600.0,
        newton_tol: 1e-6,
        ..Options::default()
    };
    hayami_check(options);
}

/// Hayami (1951) linear diffusion wave, routed with `options`.
fn hayami_check(options: Options) {
    let (width, n_man, s0): (f64, f64, f64) = (100.0, 0.03, 5e-4);
    let q_base = 100.0; // m³/s, q0 = 1 m²/s
    let amp = 2.0; // a 2 % pulse keeps the problem close to linear
    let pulse = 4.0 * 3600.0;
    let q0 = q_base / width;
    let h0 = (q0 * n_man / s0.sqrt()).powf(0.6);
    let v0 = q0 / h0;
    let c = 5.0 / 3.0 * v0;
    let d = q0 / (2.0 * s0);

    let dx = 200.0;
    let x = uniform_chainage(301, dx); // 60 km
    let nodes: Vec<WideRect> = x
        .iter()
        .map(|&xi| WideRect {
            bed: 100.0 - s0 * xi,
            width,
            n: n_man,
        })
        .collect();
    let reach = Reach::new(&x, &nodes).expect("reach");
    let inflow = sine_flood(q_base, q_base + amp, pulse);
    let end = 14.0 * 3600.0;
    let out_step = 300.0;
    let out: Vec<f64> = (0..=(end / out_step) as usize)
        .map(|i| i as f64 * out_step)
        .collect();
    let p = problem(
        reach,
        series_from(&inflow, pulse, 60.0),
        DownstreamBoundary::NormalDepth { friction_slope: s0 },
        out.clone(),
        options,
    );
    let r = diffusive::route(&p).expect("routing");

    // Analytical response by trapezoidal quadrature of the convolution.
    let analytic = |xk: f64, t: f64| -> f64 {
        let kernel = |s: f64| {
            if s <= 0.0 {
                0.0
            } else {
                xk / (2.0 * (std::f64::consts::PI * d * s.powi(3)).sqrt())
                    * (-(xk - c * s).powi(2) / (4.0 * d * s)).exp()
            }
        };
        let tau_end = t.min(pulse);
        let m = (tau_end / 15.0).ceil().max(1.0) as usize;
        let h = tau_end / m as f64;
        let mut sum = 0.0;
        for i in 0..=m {
            let tau = i as f64 * h;
            let w = if i == 0 || i == m { 0.5 } else { 1.0 };
            sum += w * (inflow(tau) - q_base) * kernel(t - tau);
        }
        q_base + sum * h
    };

    for &xk in &[10_000.0, 20_000.0, 30_000.0] {
        let node = node_index(&x, xk);
        let (q_num, t_num) = crest_discharge(&r, node);
        // Analytical crest: a 300 s scan refined on a 10 s grid.
        let scan = |from: f64, to: f64, step: f64| {
            let (mut best_q, mut best_t) = (f64::MIN, from);
            let mut t = from;
            while t <= to {
                let q = analytic(xk, t);
                if q > best_q {
                    best_q = q;
                    best_t = t;
                }
                t += step;
            }
            (best_q, best_t)
        };
        let (_, t_coarse) = scan(0.0, end, 300.0);
        let (q_ana, t_ana) = scan(t_coarse - 300.0, t_coarse + 300.0, 10.0);
        let rise_err = (q_num - q_ana) / (q_ana - q_base);
        eprintln!(
            "Hayami x = {xk} m: numerical crest {q_num:.3} m³/s at {t_num} s, analytical {q_ana:.3} at {t_ana} s, \
             rise error {:.2} %",
            100.0 * rise_err
        );
        // The brief's criterion: crest within 2 % ...
        assert!((q_num - q_ana).abs() / q_ana < 0.02);
        // ... and a much stricter one on the disturbance itself, since the
        // base flow alone would pass the first: the rise above base flow
        // within 2 % (the model is nonlinear, Hayami linear; the 2 % pulse
        // keeps the difference well below that).
        assert!(rise_err.abs() < 0.02, "rise error {rise_err}");
        // Crest time within one output interval.
        assert!(
            (t_num - t_ana).abs() <= out_step,
            "crest time {t_num} vs {t_ana}"
        );
    }
    assert!(r.diagnostics.mass_balance_error_pct.abs() < 0.01);
}

// ---------------------------------------------------------------------------
// b) Uniform flow
// ---------------------------------------------------------------------------

/// Constant inflow on a uniform prismatic channel with a normal-depth
/// downstream boundary must stay at Manning's normal depth everywhere
/// (definition of uniform flow, common practice; e.g. Chow
/// 1959, from memory). Checked both from the steady start and from a hot start 0.3 m too
/// high, which the solver must drain back to normal depth.
#[test]
fn constant_inflow_stays_at_normal_depth() {
    let (s0, q) = (1e-3, 50.0);
    let x = uniform_chainage(41, 250.0);
    let nodes: Vec<Trapezoid> = x
        .iter()
        .map(|&xi| Trapezoid {
            bed: 30.0 - s0 * xi,
            b: 20.0,
            m: 2.0,
            n: 0.035,
        })
        .collect();
    let hn = normal_depth(|h| nodes[0].conveyance(h), q, s0);
    let reach = Reach::new(&x, &nodes).expect("reach");
    let out: Vec<f64> = (0..=8).map(|i| i as f64 * 6.0 * 3600.0).collect();
    let mut p = problem(
        reach,
        Series::constant(q).expect("series"),
        DownstreamBoundary::NormalDepth { friction_slope: s0 },
        out,
        Options::default(),
    );
    for hot in [false, true] {
        if hot {
            p.initial = InitialState::Hot(nodes.iter().map(|s| s.bed + hn + 0.3).collect());
        }
        let r = diffusive::route(&p).expect("routing");
        let rows: Vec<&Vec<f64>> = if hot {
            vec![r.stage.last().expect("rows")]
        } else {
            r.stage.iter().collect()
        };
        let mut worst = 0.0_f64;
        for row in rows {
            for (z, s) in row.iter().zip(&nodes) {
                worst = worst.max((z - s.bed - hn).abs());
            }
        }
        eprintln!("normal depth {hn:.4} m, hot start {hot}: largest departure {worst:.2e} m");
        assert!(worst < 1e-3, "departure {worst} m");
        let q_last = r.discharge.last().expect("rows");
        assert!(q_last.iter().all(|&qi| (qi - q).abs() < 0.01 * q));
    }
}

// ---------------------------------------------------------------------------
// c) Backwater profile
// ---------------------------------------------------------------------------

/// Direct-step method (Chow 1959, from memory; any standard hydraulics text): step the
/// depth from the downstream control towards normal depth in small
/// increments, each advancing upstream by Δx = ΔE / (S0 − S̄f) with S̄f the
/// mean friction slope Q²/K² of the two ends. With `velocity_head` false,
/// E = h, i.e. dz/dx = −S_f, the gradually-varied-flow equation the
/// diffusive wave solves; with it true, E = h + V²/2g (full energy).
/// Returns (distance upstream, depth) pairs.
fn direct_step(
    s: &Trapezoid,
    q: f64,
    s0: f64,
    h_down: f64,
    velocity_head: bool,
    reach_len: f64,
) -> Vec<(f64, f64)> {
    let hn = normal_depth(|h| s.conveyance(h), q, s0);
    let energy = |h: f64| {
        let v = q / s.area(h);
        h + if velocity_head {
            v * v / (2.0 * GRAVITY)
        } else {
            0.0
        }
    };
    let sf = |h: f64| (q / s.conveyance(h)).powi(2);
    let mut out = vec![(0.0, h_down)];
    let (mut h, mut dist) = (h_down, 0.0);
    let dh = 1e-4;
    while dist < reach_len && h - dh > hn + 1e-6 {
        let h2 = h - dh;
        let step = (energy(h) - energy(h2)) / (s0 - 0.5 * (sf(h) + sf(h2)));
        dist += step;
        h = h2;
        out.push((dist, h));
    }
    out.push((f64::INFINITY, hn));
    out
}

/// Depth at distance upstream by linear interpolation in a direct-step table.
fn depth_at(table: &[(f64, f64)], dist: f64) -> f64 {
    let i = table.partition_point(|&(d, _)| d <= dist);
    if i == 0 {
        return table[0].1;
    }
    if i >= table.len() || !table[i].0.is_finite() {
        return table[i.min(table.len() - 1)].1;
    }
    let (d0, h0) = table[i - 1];
    let (d1, h1) = table[i];
    h0 + (h1 - h0) * (dist - d0) / (d1 - d0)
}

/// A high fixed downstream stage produces an M1 backwater curve; the
/// diffusive model's steady profile must follow the direct-step profile of
/// dz/dx = −S_f within 1 cm. The full-energy direct step differs by the
/// velocity-head term, which at the Froude number here (≈ 0.1) is reported
/// and bounded but not part of the 1 cm criterion, because the diffusive wave
/// neglects it by construction.
#[test]
fn backwater_matches_direct_step() {
    let (s0, q) = (1e-4, 100.0);
    let section = |bed| Trapezoid {
        bed,
        b: 30.0,
        m: 2.0,
        n: 0.035,
    };
    let dx = 100.0;
    let x = uniform_chainage(251, dx); // 25 km
    let nodes: Vec<Trapezoid> = x.iter().map(|&xi| section(20.0 - s0 * xi)).collect();
    let len = x[x.len() - 1];
    let hn = normal_depth(|h| nodes[0].conveyance(h), q, s0);
    let h_down = 8.0;
    let bed_end = nodes[nodes.len() - 1].bed;
    let reach = Reach::new(&x, &nodes).expect("reach");
    let p = problem(
        reach,
        Series::constant(q).expect("series"),
        DownstreamBoundary::FixedStage {
            stage: bed_end + h_down,
        },
        vec![0.0, 6.0 * 3600.0],
        Options::default(),
    );
    let r = diffusive::route(&p).expect("routing");
    let reference = direct_step(&nodes[0], q, s0, h_down, false, len + 1.0);
    let energy = direct_step(&nodes[0], q, s0, h_down, true, len + 1.0);
    let (mut worst, mut worst_energy) = (0.0_f64, 0.0_f64);
    for row in &r.stage {
        for (i, (&z, s)) in row.iter().zip(&nodes).enumerate() {
            let dist = len - x[i];
            let h = z - s.bed;
            worst = worst.max((h - depth_at(&reference, dist)).abs());
            worst_energy = worst_energy.max((h - depth_at(&energy, dist)).abs());
        }
    }
    let v = q / nodes[0].area(h_down);
    let t = 30.0 + 4.0 * h_down;
    let froude = v / (GRAVITY * nodes[0].area(h_down) / t).sqrt();
    eprintln!(
        "backwater: normal depth {hn:.3} m, control depth {h_down} m, upstream depth {:.3} m; \
         largest difference to direct step without velocity head {worst:.2e} m, with velocity head \
         {worst_energy:.4} m (Froude at control {froude:.3})",
        r.stage[0][0] - nodes[0].bed
    );
    assert!(worst < 0.01, "{worst}");
    // The backwater reaches the upstream end (otherwise the test is void).
    assert!(r.stage[0][0] - nodes[0].bed - hn > 0.1);
    // Velocity head neglect is small at low Froude, as theory says.
    assert!(worst_energy < 0.05, "{worst_energy}");
}

// ---------------------------------------------------------------------------
// d) Mass balance
// ---------------------------------------------------------------------------

/// Continuity: inflow + lateral − outflow − Δstorage must vanish (the finite-
/// volume scheme is conservative by construction; the figure measures Newton
/// tolerance and bookkeeping). Checked for a flood with a tributary that
/// overtops a compound section.
#[test]
fn flood_wave_conserves_mass() {
    flood_wave_mass(Options::default());
}

/// The same budget with TR-BDF2, whose budget weights the flows of both
/// stages as its formulas do, so it must close within the same bound.
#[test]
fn flood_wave_conserves_mass_with_trbdf2() {
    flood_wave_mass(Options {
        scheme: TimeScheme::TrBdf2,
        dt_max: 1800.0,
        ..Options::default()
    });
}

fn flood_wave_mass(options: Options) {
    let s0 = 4e-4;
    let x = uniform_chainage(121, 250.0); // 30 km
    let nodes: Vec<Compound> = x
        .iter()
        .map(|&xi| Compound {
            bed: 50.0 - s0 * xi,
            width: 40.0,
            bank: 3.0,
            fp: 300.0,
            n_channel: 0.03,
            n_fp: 0.07,
        })
        .collect();
    let reach = Reach::new(&x, &nodes).expect("reach");
    let day = 86_400.0;
    let mut p = problem(
        reach,
        series_from(sine_flood(50.0, 600.0, day), 2.0 * day, 900.0),
        DownstreamBoundary::NormalDepth { friction_slope: s0 },
        (0..=48).map(|i| i as f64 * 3600.0).collect(),
        options,
    );
    p.laterals = vec![Lateral {
        chainage: 12_300.0,
        inflow: series_from(sine_flood(5.0, 80.0, 0.5 * day), 2.0 * day, 900.0),
    }];
    let r = diffusive::route(&p).expect("routing");
    let d = &r.diagnostics;
    eprintln!(
        "mass balance: in {:.4e} lat {:.4e} out {:.4e} dS {:.4e} m³, error {:.2e} %, steps {}, rejected {}",
        d.inflow_volume,
        d.lateral_volume,
        d.outflow_volume,
        d.storage_change,
        d.mass_balance_error_pct,
        d.steps,
        d.rejected_steps
    );
    assert!(d.mass_balance_error_pct.abs() < 0.1);
    // Independent check of the inflow volume: exact integral of the sine
    // flood (base·T + (peak − base)·duration/2) over two days.
    let exact_in = 50.0 * 2.0 * day + 550.0 * day / 2.0;
    assert!(
        (d.inflow_volume / exact_in - 1.0).abs() < 1e-3,
        "{}",
        d.inflow_volume
    );
    // The flood went over the banks somewhere.
    let overtopped = r
        .stage
        .iter()
        .any(|row| row.iter().zip(&nodes).any(|(z, s)| z - s.bed > s.bank));
    assert!(overtopped);
}

// ---------------------------------------------------------------------------
// e) Diffusive versus Muskingum–Cunge
// ---------------------------------------------------------------------------

/// On a steep reach both methods approximate the same diffusion wave
/// (Muskingum–Cunge matches its numerical diffusion to Q/(2 T S0): Cunge
/// 1969, Ponce 1989, from memory), so crests must agree within 3 %. On a flat
/// reach ending in a high fixed stage the diffusive wave feels the backwater
/// and the kinematic method cannot (Ponce, Li & Simons 1978, from memory), so
/// stages near the downstream end must differ clearly.
#[test]
fn diffusive_and_kinematic_agree_on_steep_reach_differ_under_backwater() {
    let hour = 3600.0;
    let out: Vec<f64> = (0..=60).map(|i| i as f64 * 0.5 * hour).collect();
    let flood = series_from(sine_flood(20.0, 300.0, 12.0 * hour), 30.0 * hour, 600.0);

    // Steep.
    let s0 = 6e-3;
    let x = uniform_chainage(101, 200.0);
    let nodes: Vec<Trapezoid> = x
        .iter()
        .map(|&xi| Trapezoid {
            bed: 200.0 - s0 * xi,
            b: 25.0,
            m: 1.5,
            n: 0.045,
        })
        .collect();
    let reach = Reach::new(&x, &nodes).expect("reach");
    let opts = Options {
        dt_max: 120.0,
        ..Options::default()
    };
    let pd = problem(
        reach,
        flood.clone(),
        DownstreamBoundary::NormalDepth { friction_slope: s0 },
        out.clone(),
        opts.clone(),
    );
    let rd = diffusive::route(&pd).expect("diffusive");
    let pk = kinematic::Problem {
        reach,
        upstream: flood.clone(),
        laterals: vec![],
        start_time: 0.0,
        output_times: out.clone(),
        dt: 120.0,
    };
    let rk = kinematic::route(&pk).expect("kinematic");
    for &xk in &[10_000.0, 20_000.0] {
        let node = node_index(&x, xk);
        let (qd, td) = crest_discharge(&rd, node);
        let (qk, tk) = crest_discharge(&rk, node);
        let zd = crest_stage(&rd, node);
        let zk = crest_stage(&rk, node);
        eprintln!(
            "steep x = {xk}: diffusive crest {qd:.2} m³/s at {td} s stage {zd:.3}; kinematic {qk:.2} at {tk} s stage {zk:.3}"
        );
        assert!((qd - qk).abs() / qk < 0.03, "{qd} vs {qk}");
        assert!((td - tk).abs() <= 0.5 * hour);
    }

    // Flat with backwater.
    let s0 = 1e-4;
    let nodes: Vec<Trapezoid> = x
        .iter()
        .map(|&xi| Trapezoid {
            bed: 200.0 - s0 * xi,
            b: 25.0,
            m: 1.5,
            n: 0.035,
        })
        .collect();
    let reach = Reach::new(&x, &nodes).expect("reach");
    let last = nodes.len() - 1;
    let pd = problem(
        reach,
        flood.clone(),
        DownstreamBoundary::FixedStage {
            stage: nodes[last].bed + 9.0,
        },
        out.clone(),
        opts,
    );
    let rd = diffusive::route(&pd).expect("diffusive");
    let pk = kinematic::Problem {
        reach,
        upstream: flood,
        laterals: vec![],
        start_time: 0.0,
        output_times: out,
        dt: 120.0,
    };
    let rk = kinematic::route(&pk).expect("kinematic");
    let node = node_index(&x, 18_000.0);
    let (zd, zk) = (crest_stage(&rd, node), crest_stage(&rk, node));
    let (qd, _) = crest_discharge(&rd, node);
    let (qk, _) = crest_discharge(&rk, node);
    eprintln!(
        "flat with backwater at 18 km: crest stage diffusive {zd:.3} kinematic {zk:.3}; crest Q {qd:.1} vs {qk:.1}"
    );
    assert!(
        zd - zk > 1.0,
        "backwater raises the diffusive crest: {zd} vs {zk}"
    );
}

// ---------------------------------------------------------------------------
// f) Grid convergence
// ---------------------------------------------------------------------------

/// Halving node spacing and time step must change crest stages by less than
/// 1 cm on a realistic reach (a flood over floodplains): a consistency check
/// of the discretisation (common practice).
#[test]
fn grid_convergence_of_crest_stage() {
    let s0 = 3e-4;
    let len = 20_000.0;
    let hour = 3600.0;
    let flood = series_from(sine_flood(60.0, 700.0, 24.0 * hour), 48.0 * hour, 900.0);
    let out: Vec<f64> = (0..=96).map(|i| i as f64 * 0.5 * hour).collect();
    let run = |dx: f64, dt: f64| -> (Vec<f64>, Vec<f64>) {
        let n = (len / dx).round() as usize + 1;
        let x = uniform_chainage(n, dx);
        let nodes: Vec<Compound> = x
            .iter()
            .map(|&xi| Compound {
                bed: 80.0 - s0 * xi,
                width: 50.0,
                bank: 3.5,
                fp: 400.0,
                n_channel: 0.032,
                n_fp: 0.08,
            })
            .collect();
        let reach = Reach::new(&x, &nodes).expect("reach");
        let p = problem(
            reach,
            flood.clone(),
            DownstreamBoundary::NormalDepth { friction_slope: s0 },
            out.clone(),
            Options {
                dt_initial: dt,
                dt_max: dt,
                newton_tol: 1e-5,
                ..Options::default()
            },
        );
        let r = diffusive::route(&p).expect("routing");
        let crest = [5_000.0, 10_000.0, 15_000.0]
            .iter()
            .map(|&xk| crest_stage(&r, node_index(&x, xk)))
            .collect();
        let depth = [5_000.0, 10_000.0, 15_000.0]
            .iter()
            .map(|&xk| crest_stage(&r, node_index(&x, xk)) - (80.0 - s0 * xk))
            .collect();
        (crest, depth)
    };
    let (coarse, depth) = run(200.0, 600.0);
    let (fine, _) = run(100.0, 300.0);
    for i in 0..3 {
        eprintln!(
            "grid: crest stage {:.4} (dx 200 m, dt 600 s) vs {:.4} (dx 100 m, dt 300 s), crest depth {:.2} m",
            coarse[i], fine[i], depth[i]
        );
        assert!((coarse[i] - fine[i]).abs() < 0.01);
        // Realistic: the crest is over the floodplain.
        assert!(depth[i] > 3.5);
    }
}

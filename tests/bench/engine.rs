//! Engine benchmark (run by hand, never as a test):
//!
//! ```sh
//! cargo bench --bench engine              # everything
//! cargo bench --bench engine -- single    # only the parts named so
//! ```
//!
//! Parts:
//!
//! * `single`: routes a 72-hour flood through a 50 km invented
//!   compound-channel reach with 501 computational nodes (100 m spacing)
//!   with the diffusive-wave solver, for 15-minute and 1-minute output, 21
//!   runs each. Reports wall time (median, min, max), on-CPU time per run
//!   (from `/proc`, so time other processes held the core is left out),
//!   steps, Newton iterations per step, nanoseconds per node-iteration
//!   (wall time / (nodes × Newton iterations); the flop count it is
//!   compared with is in the comment above `prismatic`), the allocations
//!   of one run beside its output rows, and a fingerprint of every bit of
//!   the result, so an optimisation can be shown to leave the numbers as
//!   they were. `REACHCAST_BENCH_DUMP=PATH` also writes every stage to
//!   `PATH.900` and `PATH.60` for a value-by-value comparison.
//! * `prismatic`: a 201-node, 96-hour run of a 20 km trapezoidal channel on
//!   a uniform slope, with its nodes and property tables built inside the
//!   timed region.
//! * `schemes`: the θ-method and TR-BDF2 (`diffusive::TimeScheme`)
//!   against a converged run (TR-BDF2 at a fixed 15 s step): error of the
//!   mid-reach crest stage, worst stage error at any node and output time,
//!   steps and wall time.
//! * `ensemble`: 1,000 members through the service's own path
//!   (`forecast::run::Prepared` built once, `forecast::ensemble::
//!   run_ensemble`: Latin hypercube design, `run_prepared` per member on
//!   rayon's pool, summary), peak scaled 0.7–1.3, timing shifted up to
//!   ±3 h, Manning's n by the default spread; wall and on-CPU time.
//! * `network`: the network solver (`engine::network`) on networks of the
//!   bench reach's size: the reach cut into a chain of three channels
//!   (checked against the single-channel run) and the same with a 101-node
//!   floodplain path forming a loop, wall time beside the single-channel
//!   median; then the loop's linear solve alone, bordered elimination
//!   against a dense LU of the same matrix.
//!
//! Figures and what limits them: README.md, "Performance".

use std::{
    alloc::{GlobalAlloc, Layout, System},
    sync::atomic::{AtomicUsize, Ordering},
    time::Instant,
};

use chrono::{DateTime, Duration};
use reachcast::engine::{
    diffusive::{
        self, DownstreamBoundary, InitialState, Options, Problem, Reach, RoutingResult, TimeScheme,
    },
    network::{
        self, Channel, DownstreamEnd, Network, NetworkInitial, NetworkProblem, UpstreamEnd,
        bordered::{Block, Bordered},
    },
    section::{CrossSection, Node, SectionGeometry, build_nodes},
    series::Series,
};
use reachcast::forecast::{
    ensemble::{EnsembleInput, EnsembleSpec, perturb::RatedInflow, run_ensemble},
    hydrograph::Hydrograph,
    run::{self, Adjust, Prepared},
    spec::ReachSpec,
};

/// Counts heap allocations, so the benchmark can show that a run allocates
/// per output row (its result) and not per time step or Newton iteration.
struct Counting;

static ALLOCATIONS: AtomicUsize = AtomicUsize::new(0);

// SAFETY: every call is forwarded unchanged to the system allocator; the
// counter has no effect on the memory handed out.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: same contract as the caller's.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// On-CPU time of every thread of this process (ns), from
/// `/proc/self/task/*/schedstat` (Linux; first field). Wall time on a
/// shared machine includes time other processes held the core; this does
/// not. `None` where the file is not available.
fn cpu_ns() -> Option<u64> {
    let mut total = 0;
    for task in std::fs::read_dir("/proc/self/task").ok()? {
        let path = task.ok()?.path().join("schedstat");
        let text = std::fs::read_to_string(path).ok()?;
        total += text.split_whitespace().next()?.parse::<u64>().ok()?;
    }
    Some(total)
}

/// An order-sensitive hash of every bit of a result (FNV-1a over the
/// stages, discharges and final state), printed so that an optimisation
/// can be checked to leave the numbers bit for bit the same.
fn fingerprint(r: &RoutingResult) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    let rows = r.stage.iter().chain(&r.discharge);
    for v in rows.flatten().chain(&r.final_state) {
        h ^= v.to_bits();
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    h
}

/// Repetitions of each single-run case (median and minimum reported).
const RUNS: usize = 21;

const LENGTH_M: f64 = 50_000.0;
const SLOPE: f64 = 0.0005;
const HOURS: usize = 72;

fn reach_sections() -> Vec<CrossSection> {
    // Eleven surveyed sections 5 km apart: a 40 m channel 3 m deep with
    // 150–250 m floodplains; widths vary so interpolation does real work.
    let sections: Vec<CrossSection> = (0..=10)
        .map(|i| {
            let x = f64::from(i) * 5_000.0;
            let bed = 100.0 - SLOPE * x;
            let fp = 150.0 + 10.0 * f64::from(i % 4) * 2.5;
            let w = 40.0 + 2.0 * f64::from(i % 3);
            let top = bed + 3.0;
            let pts = vec![
                [0.0, top + 4.0],
                [10.0, top + 0.5],
                [10.0 + fp, top],
                [14.0 + fp, bed + 0.3],
                [10.0 + fp + w / 2.0, bed],
                [6.0 + fp + w, bed + 0.3],
                [10.0 + fp + w, top],
                [10.0 + 2.0 * fp + w, top + 0.5],
                [20.0 + 2.0 * fp + w, top + 4.0],
            ];
            CrossSection {
                name: format!("S{i:02}"),
                chainage: x,
                geometry: SectionGeometry::StationElevation {
                    points: pts,
                    left_bank: 10.0 + fp,
                    right_bank: 10.0 + fp + w,
                    n_left: 0.06,
                    n_channel: 0.035,
                    n_right: 0.07,
                    storage: Vec::new(),
                },
            }
        })
        .collect();
    sections
}

/// A gamma-shaped flood: base 40 m³/s, peak `40 + rise` at `peak_h`.
fn inflow(rise: f64, peak_h: f64) -> Series {
    let t: Vec<f64> = (0..=HOURS).map(|h| h as f64 * 3600.0).collect();
    let q = t
        .iter()
        .map(|&s| {
            let h = s / 3600.0;
            let shape = if h > 0.0 {
                (h / peak_h).powi(4) * (4.0 * (1.0 - h / peak_h)).exp()
            } else {
                0.0
            };
            40.0 + rise * shape
        })
        .collect();
    Series::new(t, q).expect("valid series")
}

fn problem<'a>(reach: Reach<'a, Node>, up: Series, output_step: f64) -> Problem<'a, Node> {
    let n = (HOURS as f64 * 3600.0 / output_step).round() as usize;
    Problem {
        reach,
        upstream: up,
        downstream: DownstreamBoundary::NormalDepth {
            friction_slope: SLOPE,
        },
        laterals: Vec::new(),
        initial: InitialState::Steady,
        start_time: 0.0,
        output_times: (0..=n).map(|k| k as f64 * output_step).collect(),
        options: Options::default(),
    }
}

/// Wall times of `RUNS` repetitions (sorted, s), the on-CPU time per run
/// (s), the allocations of the last run and its result.
fn repeat(mut run: impl FnMut() -> RoutingResult) -> (Vec<f64>, f64, usize, RoutingResult) {
    let mut times = Vec::new();
    let mut last = None;
    let mut allocations = 0;
    // The kernel updates a thread's CPU time at scheduler ticks (a few
    // ms), so it is read around all runs together, not around each.
    let cpu_start = cpu_ns();
    for _ in 0..RUNS {
        let before = ALLOCATIONS.load(Ordering::Relaxed);
        let t = Instant::now();
        let r = run();
        times.push(t.elapsed().as_secs_f64());
        allocations = ALLOCATIONS.load(Ordering::Relaxed) - before;
        last = Some(r);
    }
    let cpu = match (cpu_start, cpu_ns()) {
        (Some(a), Some(b)) => (b - a) as f64 * 1e-9 / RUNS as f64,
        _ => f64::NAN,
    };
    times.sort_by(f64::total_cmp);
    (times, cpu, allocations, last.expect("at least one run"))
}

/// One line of timings and work counts for a case of `nodes` nodes.
fn report(label: &str, nodes: usize, times: &[f64], cpu: f64, r: &RoutingResult) {
    let median = times[times.len() / 2];
    let d = &r.diagnostics;
    let node_iterations = (nodes * d.newton_iterations_total) as f64;
    println!(
        "{label}: median {:.1} ms (min {:.1}, max {:.1}) over {} runs, on-CPU mean {:.1} ms; \
         {} steps, {:.2} Newton iterations/step, {:.1} ns per node-iteration \
         (on-CPU {:.1}), mass balance {:.2e} %",
        median * 1e3,
        times[0] * 1e3,
        times[times.len() - 1] * 1e3,
        times.len(),
        cpu * 1e3,
        d.steps,
        d.newton_iterations_total as f64 / d.steps as f64,
        median * 1e9 / node_iterations,
        cpu * 1e9 / node_iterations,
        d.mass_balance_error_pct
    );
}

// Arithmetic per node-iteration (the figure above divides wall time by
// nodes × Newton iterations), counted from the source, a fused
// multiply-add as two flops, comparisons and max/min as one:
//
// * table lookup (`PropertyTable::props_into`): grid index and offset
//   (sub, mul, two conversions, mul, add, sub: 7), then quadratic
//   interpolation of storage and flow area (4 each), the two top widths
//   (2 each), the perimeter (2), conveyance (4) and dK/dz (2), and the
//   `extrapolated` test (2): about 29 flops, 11 doubles (88 bytes, often
//   two cache lines) read from the node's own table.
// * face law (`flux::face_flow_inv`), per face: slope (2), S² + ε² (3),
//   two square roots, one reciprocal, r and dr/dS (8), donor choice and
//   donor conveyance with its derivatives (about 14), mean and cap test
//   (5), dK_f (8), the dry ramp (3) and q, dq/dz_a, dq/dz_b (9): about
//   52 flops, of which 3 are square roots or divisions.
// * the finite-values check of the properties: 6 comparisons.
// * residual and Jacobian row (`newton::assemble`): net inflow (2),
//   off-diagonals (2), storage minus old storage minus the θ-weighted
//   flux (8), diagonal (4): about 16 flops.
// * Thomas algorithm: forward sweep 2 mul + 2 sub + 1 reciprocal + 2 mul
//   (7), back substitution 2 (9 flops, one division), on a serial chain
//   through the pivots.
// * update and convergence test: 5.
//
// About 115 flops per node-iteration, 4 of them square roots or divisions.
// Every accepted step also evaluates properties and discharges once more
// at the converged stages (about 65 flops per node: no face derivatives),
// rolls the time level forward and watches Froude numbers (about 30 flops
// per node), shared out over about two iterations per step: some 160
// flops per node-iteration all told, about 60 ns at one flop per cycle at
// 2.6 GHz. A core that overlapped independent nodes fully, issuing two
// floating-point instructions a cycle (about 100 instructions, the
// multiply-adds fused), would take 20–30 ns; the square roots and
// divisions alone (4–6 cycles' throughput each, some 5 per node-iteration)
// bound it near 10 ns, and the Thomas sweep's two serial chains (about 22
// cycles' latency per row, two rows at a time) near 4 ns. What
// was measured (about 55 ns) and why it is slower: README.md,
// "Performance".

/// A prismatic reach: 20 km of one trapezoid (30 m bed, 1:2 banks,
/// n = 0.035, unbounded) on a uniform slope of 5e-4, two sections and
/// 201 nodes 100 m apart, routing a 96-hour flood. The tables are built
/// inside the timed region, as a run of a newly uploaded reach builds
/// them.
fn prismatic() {
    let section = |name: &str, x: f64| CrossSection {
        name: name.to_owned(),
        chainage: x,
        geometry: SectionGeometry::Trapezoid {
            bed_elevation: 50.0 - SLOPE * x,
            bottom_width: 30.0,
            side_slope: 2.0,
            n: 0.035,
            height: None,
        },
    };
    let sections = [section("P0", 0.0), section("P1", 20_000.0)];
    let hours = 96usize;
    let t: Vec<f64> = (0..=hours).map(|h| h as f64 * 3600.0).collect();
    let q = t
        .iter()
        .map(|&s| {
            let x = s / 3600.0 / 24.0;
            20.0 + 300.0 * x.powi(4) * (4.0 * (1.0 - x)).exp()
        })
        .collect();
    let up = Series::new(t, q).expect("valid series");
    let outputs: Vec<f64> = (0..=hours * 4).map(|k| k as f64 * 900.0).collect();
    let mut build = Vec::new();
    let (times, cpu, _, r) = repeat(|| {
        let t = Instant::now();
        let nodes = build_nodes(&sections, 100.0).expect("prismatic reach is valid");
        build.push(t.elapsed().as_secs_f64());
        let chainage: Vec<f64> = nodes.iter().map(|n| n.chainage).collect();
        let reach = Reach::new(&chainage, &nodes).expect("reach");
        let p = Problem {
            reach,
            upstream: up.clone(),
            downstream: DownstreamBoundary::NormalDepth {
                friction_slope: SLOPE,
            },
            laterals: Vec::new(),
            initial: InitialState::Steady,
            start_time: 0.0,
            output_times: outputs.clone(),
            options: Options::default(),
        };
        diffusive::route(&p).expect("prismatic run succeeds")
    });
    build.sort_by(f64::total_cmp);
    let nodes = r.final_state.len();
    report(
        &format!("prismatic {nodes}-node, {hours} h, tables included"),
        nodes,
        &times,
        cpu,
        &r,
    );
    println!(
        "  of which building nodes and tables: median {:.1} ms; result fingerprint {:016x}",
        build[build.len() / 2] * 1e3,
        fingerprint(&r)
    );
}

/// The bench reach as a reach description, so the ensemble runs through
/// the service's own code: [`Prepared`] built once, members drawn by
/// [`reachcast::forecast::ensemble::design`], routed by `run_prepared`
/// in parallel with rayon and summarised, exactly as
/// `service::ensemble` does for a forecast run.
fn reach_spec(sections: &[CrossSection], members: usize) -> ReachSpec {
    let doc = serde_json::json!({
        "name": "Benchmark compound channel (invented)",
        "sections": serde_json::to_value(sections).expect("sections serialise"),
        "max_node_spacing": 100,
        "downstream": {"kind": "normal_depth", "friction_slope": SLOPE},
        "points": [{"name": "Mid-reach", "chainage": LENGTH_M / 2.0, "kind": "other",
            "thresholds": [{"id": "t1", "name": "Bankfull", "elevation": 92.5}]}],
        "routing": {"output_interval_s": 900, "dt_max_s": 600},
    });
    let mut spec = ReachSpec::from_json(&doc.to_string()).expect("benchmark reach spec");
    spec.ensemble = EnsembleSpec {
        members,
        // The engine-only ensemble's spreads (rise 0.7–1.3, ±3 h) plus the
        // default spread of Manning's n, which the service also draws.
        peak_scale: [0.7, 1.3],
        timing_shift_hours: 3.0,
        ..EnsembleSpec::default()
    };
    spec
}

fn service_ensemble(sections: &[CrossSection]) {
    let members = 1_000usize;
    let threads = rayon::current_num_threads();
    let spec = reach_spec(sections, members);
    let t0 = DateTime::from_timestamp(1_790_000_000, 0).expect("valid time");
    let flood = inflow(600.0, 20.0);
    let inflow = Hydrograph::parse(
        (0..=HOURS)
            .map(|h| (t0 + Duration::hours(h as i64), flood.at(h as f64 * 3600.0)))
            .collect(),
    )
    .expect("valid hydrograph");
    let t = Instant::now();
    let prepared = Prepared::new(&spec).expect("prepared");
    let prepare_s = t.elapsed().as_secs_f64();
    let det = run::run_prepared(&spec, &prepared, &inflow, None, Adjust::NONE)
        .expect("deterministic run");
    let input = EnsembleInput {
        spec: &spec,
        settings: &spec.ensemble,
        prepared: &prepared,
        inflow: &inflow,
        traces: &[],
        issued: t0,
        rated: RatedInflow::None,
        seed: 0x5eed,
        method: None,
    };
    let cpu_start = cpu_ns();
    let t = Instant::now();
    let summary = run_ensemble(&input, &det.points)
        .expect("ensemble routes")
        .expect("ensemble is on");
    let wall = t.elapsed().as_secs_f64();
    let cpu = match (cpu_start, cpu_ns()) {
        (Some(a), Some(b)) => (b - a) as f64 * 1e-9,
        _ => f64::NAN,
    };
    let crest = &summary.points[0].crest;
    println!(
        "ensemble (service path): {} members ({} failed) on {threads} thread(s) in {wall:.1} s \
         ({:.1} ms/member per thread), on-CPU {cpu:.1} s ({:.1} ms/member); tables prepared \
         once in {:.0} ms; mid-reach crest {:.2} m to {:.2} m",
        summary.members,
        summary.failed_members,
        wall * 1e3 * threads as f64 / members as f64,
        cpu * 1e3 / members as f64,
        prepare_s * 1e3,
        crest.min,
        crest.max
    );
}

/// The θ-method and TR-BDF2 against a converged run of the benchmark
/// reach (TR-BDF2, second order, at a fixed 15 s step): the error of the
/// mid-reach crest stage and the worst stage error at any node and output
/// time, beside wall time.
fn schemes(reach: Reach<'_, Node>) {
    let run = |options: Options| {
        let mut p = problem(reach, inflow(600.0, 20.0), 900.0);
        p.options = options;
        let mut times = Vec::new();
        let mut last = None;
        for _ in 0..5 {
            let t = Instant::now();
            last = Some(diffusive::route(&p).expect("scheme run succeeds"));
            times.push(t.elapsed().as_secs_f64());
        }
        times.sort_by(f64::total_cmp);
        (times[times.len() / 2], last.expect("runs"))
    };
    let fine = Options {
        scheme: TimeScheme::TrBdf2,
        dt_initial: 15.0,
        dt_max: 15.0,
        local_error_tol: 1e3,
        newton_tol: 1e-7,
        ..Options::default()
    };
    let (_, reference) = run(fine.clone());
    let (_, coarser) = run(Options {
        dt_initial: 30.0,
        dt_max: 30.0,
        ..fine
    });
    let mid = reference.stage[0].len() / 2;
    let crest = |r: &RoutingResult| r.stage.iter().map(|row| row[mid]).fold(f64::MIN, f64::max);
    let crest_ref = crest(&reference);
    let theta = |dt_max: f64| Options {
        dt_max,
        ..Options::default()
    };
    let trbdf2 = |tol: f64| Options {
        scheme: TimeScheme::TrBdf2,
        dt_max: 3600.0,
        local_error_tol: tol,
        ..Options::default()
    };
    let worst = |r: &RoutingResult| {
        r.stage
            .iter()
            .zip(&reference.stage)
            .flat_map(|(a, b)| a.iter().zip(b).map(|(x, y)| (x - y).abs()))
            .fold(0.0, f64::max)
    };
    println!(
        "schemes against a converged run (TR-BDF2 at 15 s; at 30 s it differs by at most \
         {:.2} mm), 501 nodes, 15-minute output:",
        worst(&coarser) * 1e3
    );
    println!(
        "  | scheme | steps (rejected) | mid-reach crest error | worst stage error | wall time |"
    );
    for (label, options) in [
        ("θ = 0.6, dt_max 600 s (default)", theta(600.0)),
        ("θ = 0.6, dt_max 120 s", theta(120.0)),
        ("TR-BDF2, tol 1 mm, dt_max 3600 s", trbdf2(1e-3)),
        ("TR-BDF2, tol 0.1 mm, dt_max 3600 s", trbdf2(1e-4)),
    ] {
        let (wall, r) = run(options);
        println!(
            "  | {label} | {} ({}) | {:+.2} mm | {:.1} mm | {:.1} ms |",
            r.diagnostics.steps,
            r.diagnostics.rejected_steps,
            (crest(&r) - crest_ref) * 1e3,
            worst(&r) * 1e3,
            wall * 1e3
        );
    }
}

/// The benchmark reach as a network of its own size, solved by the
/// network solver: (a) the 501-node reach cut into three channels at
/// 20 km and 30 km (a chain: the network solver's overhead on the
/// single-channel problem, whose results it must reproduce), and (b) the
/// same with a 12 km floodplain path from 20 km to 30 km (101 nodes,
/// 120 m spacing, a wide shallow trapezoid whose bed lies at the channel's
/// bank tops, so it only flows once the flood overtops them): a loop.
/// Then the linear solve alone: the bordered (Schur complement) solve of
/// the loop's Newton system against a dense LU (nalgebra, partial
/// pivoting) of the same matrix.
fn network_part(nodes: &[Node], chainage: &[f64], single_ms: f64) {
    let reach = |a: usize, b: usize| Reach::new(&chainage[a..=b], &nodes[a..=b]).expect("reach");
    let flood = inflow(600.0, 20.0);
    let chain = vec![
        Channel {
            name: "upper".into(),
            reach: reach(0, 200),
            upstream: UpstreamEnd::Inflow(flood.clone()),
            downstream: DownstreamEnd::Junction(0),
            laterals: Vec::new(),
        },
        Channel {
            name: "middle".into(),
            reach: reach(200, 300),
            upstream: UpstreamEnd::Junction(0),
            downstream: DownstreamEnd::Junction(1),
            laterals: Vec::new(),
        },
        Channel {
            name: "lower".into(),
            reach: reach(300, 500),
            upstream: UpstreamEnd::Junction(1),
            downstream: DownstreamEnd::Outlet,
            laterals: Vec::new(),
        },
    ];
    // Bank tops at 20 and 30 km (bench sections: bed + 3 m).
    let top = |x: f64| 100.0 - SLOPE * x + 3.0;
    let path_section = |name: &str, x: f64, bed: f64| CrossSection {
        name: name.to_owned(),
        chainage: x,
        geometry: SectionGeometry::Trapezoid {
            bed_elevation: bed,
            bottom_width: 80.0,
            side_slope: 10.0,
            n: 0.08,
            height: None,
        },
    };
    let path_nodes = build_nodes(
        &[
            path_section("F0", 0.0, top(20_000.0)),
            path_section("F1", 12_000.0, top(30_000.0)),
        ],
        120.0,
    )
    .expect("floodplain path is valid");
    let path_x: Vec<f64> = path_nodes.iter().map(|n| n.chainage).collect();
    let mut looped = chain.clone();
    looped.push(Channel {
        name: "floodplain path".into(),
        reach: Reach::new(&path_x, &path_nodes).expect("reach"),
        upstream: UpstreamEnd::Junction(0),
        downstream: DownstreamEnd::Junction(1),
        laterals: Vec::new(),
    });
    let outputs: Vec<f64> = (0..=HOURS * 4).map(|k| k as f64 * 900.0).collect();
    let single = diffusive::route(&problem(reach(0, 500), flood.clone(), 900.0))
        .expect("single run succeeds");
    for (label, p) in [
        ("chain", net_problem(chain, &outputs)),
        ("loop", net_problem(looped, &outputs)),
    ] {
        let nodes_total = p.network.node_count();
        let mut times = Vec::new();
        let mut last = None;
        let cpu_start = cpu_ns();
        for _ in 0..RUNS {
            let t = Instant::now();
            last = Some(network::route_network(&p).expect("network run succeeds"));
            times.push(t.elapsed().as_secs_f64());
        }
        let cpu = match (cpu_start, cpu_ns()) {
            (Some(a), Some(b)) => (b - a) as f64 * 1e-9 / RUNS as f64,
            _ => f64::NAN,
        };
        times.sort_by(f64::total_cmp);
        let r = last.expect("runs");
        let median = times[times.len() / 2];
        println!(
            "network {label}: {} channels, {nodes_total} channel nodes, 15-minute output: median \
             {:.1} ms (min {:.1}, max {:.1}) over {RUNS} runs, on-CPU mean {:.1} ms; {} steps, \
             {:.2} Newton iterations/step, {:.1} ns per node-iteration; mass balance {:.2e} %; \
             {:.2}× the single-channel median ({single_ms:.1} ms)",
            r.channels.len(),
            median * 1e3,
            times[0] * 1e3,
            times[times.len() - 1] * 1e3,
            cpu * 1e3,
            r.steps,
            r.newton_iterations as f64 / r.steps as f64,
            median * 1e9 / (nodes_total * r.newton_iterations) as f64,
            r.balance.error_pct,
            median * 1e3 / single_ms
        );
        // The steady start alone: a run whose only output is the start.
        let start_only = NetworkProblem {
            output_times: vec![0.0],
            ..p.clone()
        };
        let mut start_times: Vec<f64> = (0..RUNS)
            .map(|_| {
                let t = Instant::now();
                network::route_network(&start_only).expect("steady start succeeds");
                t.elapsed().as_secs_f64()
            })
            .collect();
        start_times.sort_by(f64::total_cmp);
        println!(
            "  of which the steady start (pseudo-time stepping): median {:.1} ms",
            start_times[RUNS / 2] * 1e3
        );
        if label == "chain" {
            // The chain is the single-channel problem: same stages.
            let offsets = [0usize, 200, 300];
            let worst = r
                .channels
                .iter()
                .zip(offsets)
                .flat_map(|(c, o)| {
                    c.stage.iter().zip(&single.stage).flat_map(move |(a, b)| {
                        a.iter().enumerate().map(move |(i, z)| (z - b[o + i]).abs())
                    })
                })
                .fold(0.0, f64::max);
            println!(
                "  chain against the single-channel run: worst stage difference {:.2e} m",
                worst
            );
        } else {
            let split = r.junction_flows(&p.network, 0);
            let path = split
                .iter()
                .find(|e| e.channel == 3)
                .expect("path end")
                .discharge
                .iter()
                .fold(0.0_f64, |m, &q| m.max(q));
            println!("  floodplain path peak discharge {path:.1} m³/s");
        }
    }
    linear_solve_comparison();
}

/// A network run of the bench reach's flood from a steady start.
fn net_problem<'a>(channels: Vec<Channel<'a, Node>>, outputs: &[f64]) -> NetworkProblem<'a, Node> {
    NetworkProblem {
        network: Network::new(channels).expect("valid network"),
        downstream: DownstreamBoundary::NormalDepth {
            friction_slope: SLOPE,
        },
        initial: NetworkInitial::Steady,
        start_time: 0.0,
        output_times: outputs.to_vec(),
        options: Options::default(),
    }
}

/// The loop's Newton system shape (own unknowns 200, 99, 200 and 99, two
/// junctions), filled with a diagonally dominant system, solved by the
/// bordered elimination and by a dense LU; the solutions must agree.
fn linear_solve_comparison() {
    let lens = [
        (200, None, Some(0)),
        (99, Some(0), Some(1)),
        (200, Some(1), None),
        (99, Some(0), Some(1)),
    ];
    let mut start = 0;
    let blocks: Vec<Block> = lens
        .iter()
        .map(|&(len, up, down)| {
            let b = Block {
                start,
                len,
                up,
                down,
            };
            start += len;
            b
        })
        .collect();
    let mut s = Bordered::new(blocks, 2);
    let mut seed = 0x9e37_79b9_7f4a_7c15_u64;
    let mut rnd = move || {
        seed ^= seed << 13;
        seed ^= seed >> 7;
        seed ^= seed << 17;
        (seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5
    };
    for v in [
        &mut s.lower,
        &mut s.upper,
        &mut s.c_up,
        &mut s.c_down,
        &mut s.b_up,
        &mut s.b_down,
    ] {
        v.iter_mut().for_each(|x| *x = rnd());
    }
    s.diag.iter_mut().for_each(|x| *x = 3.0 + rnd());
    s.d = vec![5.0, 0.0, 0.0, 5.0];
    let n = s.len();
    let b: Vec<f64> = (0..n).map(|_| rnd()).collect();
    let reps = 2_000;
    let t = Instant::now();
    let mut x = b.clone();
    for _ in 0..reps {
        x.copy_from_slice(&b);
        s.solve(&mut x).expect("regular");
    }
    let bordered_us = t.elapsed().as_secs_f64() * 1e6 / reps as f64;
    let dense = s.to_dense();
    let dense_reps = 5;
    let t = Instant::now();
    let mut y = nalgebra::DVector::zeros(n);
    for _ in 0..dense_reps {
        let m = nalgebra::DMatrix::from_row_slice(n, n, &dense);
        y = m
            .lu()
            .solve(&nalgebra::DVector::from_column_slice(&b))
            .expect("regular");
    }
    let dense_us = t.elapsed().as_secs_f64() * 1e6 / dense_reps as f64;
    let diff = x
        .iter()
        .zip(y.iter())
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max);
    println!(
        "  linear solve of the loop's {n}-unknown Newton system: bordered (Schur) {bordered_us:.1} µs, \
         dense LU {dense_us:.0} µs ({:.0}× slower); solutions differ by at most {diff:.1e}",
        dense_us / bordered_us
    );
}

fn main() {
    // `cargo bench --bench engine -- single` runs only the parts whose
    // name contains the argument (single, prismatic, schemes, network,
    // ensemble).
    let filter: Option<String> = std::env::args().skip(1).find(|a| !a.starts_with('-'));
    let wanted = |part: &str| filter.as_deref().is_none_or(|f| part.contains(f));
    let sections = reach_sections();
    let started = Instant::now();
    let nodes = build_nodes(&sections, 100.0).expect("benchmark reach is valid");
    let build_ms = started.elapsed().as_secs_f64() * 1e3;
    let chainage: Vec<f64> = nodes.iter().map(|n| n.chainage).collect();
    let reach = Reach::new(&chainage, &nodes).expect("reach");
    println!(
        "reach: {:.0} km, {} nodes, property tables built in {build_ms:.0} ms",
        LENGTH_M / 1e3,
        nodes.len()
    );

    let mut single_ms = f64::NAN;
    for (label, step) in [("15-minute output", 900.0), ("1-minute output", 60.0)] {
        if !wanted("single") {
            break;
        }
        let p = problem(reach, inflow(600.0, 20.0), step);
        let (times, cpu, allocations, r) =
            repeat(|| diffusive::route(&p).expect("benchmark run succeeds"));
        if step == 900.0 {
            single_ms = times[times.len() / 2] * 1e3;
        }
        report(
            &format!("single run, {label}"),
            nodes.len(),
            &times,
            cpu,
            &r,
        );
        if let Ok(path) = std::env::var("REACHCAST_BENCH_DUMP") {
            // Every stage of the run, one output time a line, so two builds
            // can be compared value by value when the fingerprint differs.
            let text: String = r
                .stage
                .iter()
                .map(|row| {
                    let cells: Vec<String> = row.iter().map(|z| format!("{z:e}")).collect();
                    cells.join(" ") + "\n"
                })
                .collect();
            std::fs::write(format!("{path}.{}", step as u64), text).expect("dump written");
        }
        // Each output time is one stage row and one discharge row: the
        // result itself. Anything beyond those and a fixed setup count
        // would be per-step allocation.
        let rows = 2 * r.output_times.len();
        println!(
            "  allocations per run: {allocations} ({rows} output rows, {} other); \
             result fingerprint {:016x}",
            allocations as i64 - rows as i64,
            fingerprint(&r)
        );
    }
    if wanted("prismatic") {
        prismatic();
    }
    if wanted("schemes") {
        schemes(reach);
    }
    if wanted("network") {
        if single_ms.is_nan() {
            let p = problem(reach, inflow(600.0, 20.0), 900.0);
            let (times, _, _, _) = repeat(|| diffusive::route(&p).expect("benchmark run succeeds"));
            single_ms = times[times.len() / 2] * 1e3;
        }
        network_part(&nodes, &chainage, single_ms);
    }
    if wanted("ensemble") {
        service_ensemble(&sections);
    }
}

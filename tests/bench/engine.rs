//! Engine benchmark (run by hand, never as a test):
//!
//! ```sh
//! cargo bench --bench engine
//! ```
//!
//! Routes a 72-hour flood through a 50 km invented compound-channel reach
//! with 501 computational nodes (100 m spacing) with the diffusive-wave
//! solver, and reports wall time per run, node-steps per second and Newton
//! iterations per step, for 15-minute and 1-minute output. Then runs an
//! ensemble of 1,000 perturbed inflows (peak scaled 0.7–1.3, timing shifted
//! up to ±3 h) on every available core.

use std::{
    alloc::{GlobalAlloc, Layout, System},
    sync::atomic::{AtomicUsize, Ordering},
    time::Instant,
};

use reachcast::engine::{
    diffusive::{self, DownstreamBoundary, InitialState, Options, Problem, Reach},
    section::{CrossSection, Node, SectionGeometry, build_nodes},
    series::Series,
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
fn fingerprint(r: &diffusive::RoutingResult) -> u64 {
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

fn reach_nodes() -> Vec<Node> {
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
    build_nodes(&sections, 100.0).expect("benchmark reach is valid")
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

/// Small deterministic generator (64-bit LCG, Knuth's MMIX constants) so
/// the ensemble is the same on every run.
struct Lcg(u64);
impl Lcg {
    fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

fn main() {
    // `cargo bench --bench engine -- single` runs only the parts whose
    // name contains the argument.
    let filter: Option<String> = std::env::args().skip(1).find(|a| !a.starts_with('-'));
    let wanted = |part: &str| filter.as_deref().is_none_or(|f| part.contains(f));
    let started = Instant::now();
    let nodes = reach_nodes();
    let build_ms = started.elapsed().as_secs_f64() * 1e3;
    let chainage: Vec<f64> = nodes.iter().map(|n| n.chainage).collect();
    let reach = Reach::new(&chainage, &nodes).expect("reach");
    println!(
        "reach: {:.0} km, {} nodes, property tables built in {build_ms:.0} ms",
        LENGTH_M / 1e3,
        nodes.len()
    );

    for (label, step) in [("15-minute output", 900.0), ("1-minute output", 60.0)] {
        if !wanted("single") {
            break;
        }
        let p = problem(reach, inflow(600.0, 20.0), step);
        let mut times = Vec::new();
        let mut last = None;
        let mut allocations = 0;
        // The kernel updates a thread's CPU time at scheduler ticks (a few
        // ms), so it is read around all runs together, not around each.
        let cpu_start = cpu_ns();
        for _ in 0..RUNS {
            let before = ALLOCATIONS.load(Ordering::Relaxed);
            let t = Instant::now();
            let r = diffusive::route(&p).expect("benchmark run succeeds");
            times.push(t.elapsed().as_secs_f64());
            allocations = ALLOCATIONS.load(Ordering::Relaxed) - before;
            last = Some(r);
        }
        let cpu = match (cpu_start, cpu_ns()) {
            (Some(a), Some(b)) => (b - a) as f64 * 1e-9 / RUNS as f64,
            _ => f64::NAN,
        };
        times.sort_by(f64::total_cmp);
        let median = times[times.len() / 2];
        let r = last.expect("at least one run");
        let d = &r.diagnostics;
        let node_steps = (nodes.len() * d.steps) as f64;
        println!(
            "single run, {label}: median {:.1} ms (min {:.1}, max {:.1}) over {} runs, \
             on-CPU mean {:.1} ms; {} steps, {:.2} Newton iterations/step, \
             {:.2e} node-steps/s, mass balance {:.2e} %",
            median * 1e3,
            times[0] * 1e3,
            times[times.len() - 1] * 1e3,
            times.len(),
            cpu * 1e3,
            d.steps,
            d.newton_iterations_total as f64 / d.steps as f64,
            node_steps / median,
            d.mass_balance_error_pct
        );
        // Each output time is one stage row and one discharge row: the
        // result itself. Anything beyond those and a fixed setup count
        // would be per-step allocation.
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
        let rows = 2 * r.output_times.len();
        println!(
            "  allocations per run: {allocations} ({rows} output rows, {} other); \
             result fingerprint {:016x}",
            allocations as i64 - rows as i64,
            fingerprint(&r)
        );
    }
    if !wanted("ensemble") {
        return;
    }

    let members = 1_000usize;
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    let mut rng = Lcg(0x5eed);
    let params: Vec<(f64, f64)> = (0..members)
        .map(|_| {
            (
                600.0 * (0.7 + 0.6 * rng.next()),
                20.0 + 6.0 * (rng.next() - 0.5),
            )
        })
        .collect();
    let t = Instant::now();
    let crests: Vec<f64> = std::thread::scope(|s| {
        let chunks: Vec<_> = params
            .chunks(members.div_ceil(threads))
            .map(|chunk| {
                s.spawn(move || {
                    chunk
                        .iter()
                        .map(|&(rise, peak)| {
                            let r = diffusive::route(&problem(reach, inflow(rise, peak), 900.0))
                                .expect("ensemble member succeeds");
                            // Crest stage at mid-reach.
                            let mid = r.stage[0].len() / 2;
                            r.stage.iter().map(|row| row[mid]).fold(f64::MIN, f64::max)
                        })
                        .collect::<Vec<f64>>()
                })
            })
            .collect();
        chunks
            .into_iter()
            .flat_map(|h| h.join().expect("worker thread"))
            .collect()
    });
    let wall = t.elapsed().as_secs_f64();
    let (lo, hi) = crests
        .iter()
        .fold((f64::MAX, f64::MIN), |(a, b), &c| (a.min(c), b.max(c)));
    println!(
        "ensemble: {members} runs on {threads} thread(s) in {wall:.1} s ({:.1} ms/run per thread); \
         mid-reach crest range {lo:.2} m to {hi:.2} m",
        wall * 1e3 * threads as f64 / members as f64
    );
}

//! Whole network runs against independent references: the equivalent
//! single channel of a symmetric loop, the single-channel run a detached
//! tributary must not change, the volume balance, the steady split that
//! equalises head loss along two paths, and a side channel that wets and
//! dries.

use super::*;
use crate::engine::diffusive::{self, DownstreamBoundary, InitialState, Options, Problem};
use crate::engine::props::{Hydraulics, Props};
use crate::engine::routing::{Lateral, Reach};
use crate::engine::series::Series;
use crate::engine::test_sections::Rect;

/// `copies` identical rectangles side by side: areas, widths, perimeter
/// and conveyance all multiply by `copies` (the composite conveyance of
/// sub-sections is their sum, Chow 1959, Open-Channel Hydraulics,
/// from memory).
struct Copies {
    rect: Rect,
    copies: f64,
}

impl Hydraulics for Copies {
    fn bed_elevation(&self) -> f64 {
        self.rect.bed
    }
    fn props(&self, z: f64) -> Props {
        let p = self.rect.props(z);
        let k = self.copies;
        Props {
            flow_area: k * p.flow_area,
            storage_area: k * p.storage_area,
            flow_top_width: k * p.flow_top_width,
            storage_top_width: k * p.storage_top_width,
            wetted_perimeter: k * p.wetted_perimeter,
            conveyance: k * p.conveyance,
            dconveyance_dz: k * p.dconveyance_dz,
            ..p
        }
    }
}

/// Chainages `x0, x0 + dx, …, x1`.
fn chainage(x0: f64, x1: f64, dx: f64) -> Vec<f64> {
    let n = ((x1 - x0) / dx).round() as usize;
    (0..=n).map(|i| x0 + i as f64 * dx).collect()
}

/// Rectangles along `x`, bed falling linearly from `bed0` at `x[0]` to
/// `bed1` at the last node.
fn rects(x: &[f64], (bed0, bed1): (f64, f64), width: f64, n: f64, copies: f64) -> Vec<Copies> {
    let (a, b) = (x[0], x[x.len() - 1]);
    x.iter()
        .map(|&xi| Copies {
            rect: Rect::new(bed0 + (bed1 - bed0) * (xi - a) / (b - a), width, n, 50.0),
            copies,
        })
        .collect()
}

/// A gamma-shaped flood from `base` to `peak` at `t_peak`, over `dur` s.
fn flood(base: f64, peak: f64, t_peak: f64, dur: f64) -> Series {
    let t: Vec<f64> = (0..=60).map(|i| i as f64 * dur / 60.0).collect();
    let v = t
        .iter()
        .map(|&ti| {
            let r = (ti / t_peak).max(1e-12);
            base + (peak - base) * (r * (1.0 - r).exp()).powi(4)
        })
        .collect();
    Series::new(t, v).expect("valid")
}

fn channel<'a>(
    name: &str,
    reach: Reach<'a, Copies>,
    upstream: UpstreamEnd,
    downstream: DownstreamEnd,
) -> Channel<'a, Copies> {
    Channel {
        name: name.into(),
        reach,
        upstream,
        downstream,
        laterals: vec![],
    }
}

fn network_problem<'a>(
    channels: Vec<Channel<'a, Copies>>,
    downstream: DownstreamBoundary,
    output_times: Vec<f64>,
) -> NetworkProblem<'a, Copies> {
    NetworkProblem {
        network: Network::new(channels).expect("valid network"),
        downstream,
        initial: NetworkInitial::Steady,
        start_time: 0.0,
        output_times,
        options: Options::default(),
    }
}

fn every(step: f64, hours: f64) -> Vec<f64> {
    let n = (hours * 3600.0 / step).round() as usize;
    (0..=n).map(|k| k as f64 * step).collect()
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1e-9)
}

/// Check: a loop of two identical parallel channels equals one channel
/// whose section is the two side by side with conveyances summed
/// (composite conveyance, Chow 1959, from memory), within 1 mm of stage
/// and 0.1 % of discharge, and each branch carries exactly half.
#[test]
fn symmetric_loop_equals_the_composite_single_channel() {
    let (xu, xp, xd) = (
        chainage(0.0, 2000.0, 100.0),
        chainage(2000.0, 5000.0, 100.0),
        chainage(5000.0, 7000.0, 100.0),
    );
    let slope = 1e-3;
    let bed = |x: f64| 20.0 - slope * x;
    let up = rects(&xu, (bed(0.0), bed(2000.0)), 12.0, 0.035, 2.0);
    let branch = rects(&xp, (bed(2000.0), bed(5000.0)), 12.0, 0.035, 1.0);
    let down = rects(&xd, (bed(5000.0), bed(7000.0)), 12.0, 0.035, 2.0);
    let inflow = flood(10.0, 150.0, 3.0 * 3600.0, 12.0 * 3600.0);
    let outlet = DownstreamBoundary::NormalDepth {
        friction_slope: slope,
    };
    let times = every(900.0, 12.0);
    let reach = |x, n| Reach::new(x, n).expect("valid");
    let p = network_problem(
        vec![
            channel(
                "upper",
                reach(&xu, &up),
                UpstreamEnd::Inflow(inflow.clone()),
                DownstreamEnd::Junction(0),
            ),
            channel(
                "left",
                reach(&xp, &branch),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "right",
                reach(&xp, &branch),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "lower",
                reach(&xd, &down),
                UpstreamEnd::Junction(1),
                DownstreamEnd::Outlet,
            ),
        ],
        outlet.clone(),
        times.clone(),
    );
    let net = route_network(&p).expect("network runs");

    // The single channel: every section two rectangles side by side.
    let xs = chainage(0.0, 7000.0, 100.0);
    let single_nodes = rects(&xs, (bed(0.0), bed(7000.0)), 12.0, 0.035, 2.0);
    let single = diffusive::route(&Problem {
        reach: Reach::new(&xs, &single_nodes).expect("valid"),
        upstream: inflow,
        downstream: outlet,
        laterals: vec![],
        initial: InitialState::Steady,
        start_time: 0.0,
        output_times: times,
        options: Options::default(),
    })
    .expect("single channel runs");

    let (mut dz, mut dq) = (0.0_f64, 0.0_f64);
    for (t, (zs, qs)) in single.stage.iter().zip(&single.discharge).enumerate() {
        let pieces = [(0, 0usize), (1, 20), (3, 50)];
        for (c, offset) in pieces {
            let out = &net.channels[c];
            for (i, (&z, &q)) in out.stage[t].iter().zip(&out.discharge[t]).enumerate() {
                dz = dz.max((z - zs[offset + i]).abs());
                let interior = i > 0 && i + 1 < out.stage[t].len();
                // Branch discharges add up to the composite channel's.
                let q = if c == 1 { 2.0 * q } else { q };
                if interior || (c == 0 && i == 0) || (c == 3 && i + 1 == out.stage[t].len()) {
                    dq = dq.max(rel(q, qs[offset + i]));
                }
            }
        }
        // Exactly half each: the two branches are the same numbers.
        for (a, b) in net.channels[1].discharge[t]
            .iter()
            .zip(&net.channels[2].discharge[t])
        {
            assert!((a - b).abs() <= 1e-12 * a.abs().max(1.0), "{a} vs {b}");
        }
    }
    eprintln!("symmetric loop: stage {dz:.2e} m, discharge {dq:.2e} (relative)");
    assert!(dz < 1e-3, "largest stage difference {dz} m");
    assert!(dq < 1e-3, "largest relative discharge difference {dq}");
    assert!(net.balance.error_pct.abs() < 0.1, "{:?}", net.balance);
}

/// Check: a tributary with no inflow whose bed at the confluence lies
/// above any stage the flood reaches is detached; the run must reproduce
/// the single-channel run of the main channel (the diffusive solver,
/// itself checked against analytical cases) within 1 mm and 0.1 %.
#[test]
fn detached_tributary_reproduces_the_single_channel_run() {
    let (x1, x2, xt) = (
        chainage(0.0, 3000.0, 100.0),
        chainage(3000.0, 6000.0, 150.0),
        chainage(0.0, 2000.0, 100.0),
    );
    let bed = |x: f64| 30.0 - 5e-4 * x;
    let m1 = rects(&x1, (bed(0.0), bed(3000.0)), 20.0, 0.03, 1.0);
    let m2 = rects(&x2, (bed(3000.0), bed(6000.0)), 20.0, 0.03, 1.0);
    // Its bed at the confluence is 8 m above the main channel's.
    let trib = rects(&xt, (bed(3000.0) + 10.0, bed(3000.0) + 8.0), 8.0, 0.04, 1.0);
    let inflow = flood(5.0, 120.0, 4.0 * 3600.0, 16.0 * 3600.0);
    let outlet = DownstreamBoundary::FixedStage {
        stage: bed(6000.0) + 1.5,
    };
    let times = every(600.0, 16.0);
    let p = network_problem(
        vec![
            channel(
                "main upper",
                Reach::new(&x1, &m1).expect("valid"),
                UpstreamEnd::Inflow(inflow.clone()),
                DownstreamEnd::Junction(0),
            ),
            channel(
                "tributary",
                Reach::new(&xt, &trib).expect("valid"),
                UpstreamEnd::Inflow(Series::constant(0.0).expect("valid")),
                DownstreamEnd::Junction(0),
            ),
            channel(
                "main lower",
                Reach::new(&x2, &m2).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Outlet,
            ),
        ],
        outlet.clone(),
        times.clone(),
    );
    let net = route_network(&p).expect("network runs");
    let xs: Vec<f64> = x1.iter().chain(&x2[1..]).copied().collect();
    let nodes: Vec<Copies> = rects(&x1, (bed(0.0), bed(3000.0)), 20.0, 0.03, 1.0)
        .into_iter()
        .chain(
            rects(&x2, (bed(3000.0), bed(6000.0)), 20.0, 0.03, 1.0)
                .into_iter()
                .skip(1),
        )
        .collect();
    let single = diffusive::route(&Problem {
        reach: Reach::new(&xs, &nodes).expect("valid"),
        upstream: inflow,
        downstream: outlet,
        laterals: vec![],
        initial: InitialState::Steady,
        start_time: 0.0,
        output_times: times,
        options: Options::default(),
    })
    .expect("single channel runs");
    let (mut dz, mut dq) = (0.0_f64, 0.0_f64);
    for (t, (zs, qs)) in single.stage.iter().zip(&single.discharge).enumerate() {
        for (c, offset) in [(0, 0usize), (2, 30)] {
            let out = &net.channels[c];
            let n = out.stage[t].len();
            for i in 0..n {
                dz = dz.max((out.stage[t][i] - zs[offset + i]).abs());
                // Node discharges at the confluence are face flows in the
                // network and face means in the single channel.
                if (c == 0 && i + 1 < n) || (c == 2 && i > 0) {
                    dq = dq.max(rel(out.discharge[t][i], qs[offset + i]));
                }
            }
        }
        // The tributary stays dry and passes nothing.
        assert!(net.channels[1].discharge[t][xt.len() - 1].abs() < 1e-6);
    }
    eprintln!("detached tributary: stage {dz:.2e} m, discharge {dq:.2e} (relative)");
    assert!(dz < 1e-3, "largest stage difference {dz} m");
    assert!(dq < 1e-3, "largest relative discharge difference {dq}");
}

/// Volume of water in the network from stages alone (m³): each node's
/// storage area times its control length, a junction once per channel
/// end (its storage is the sum of the ends' half segments).
fn volume(p: &NetworkProblem<'_, Copies>, stages: &[Vec<f64>]) -> f64 {
    p.network
        .channels()
        .iter()
        .zip(stages)
        .map(|(c, z)| {
            let lengths = c.reach.control_lengths();
            c.reach
                .nodes()
                .iter()
                .zip(z)
                .zip(lengths)
                .map(|((h, &z), l)| h.props(z).storage_area * l)
                .sum::<f64>()
        })
        .sum()
}

/// Exact integral of a piecewise-linear series over [0, t_end].
fn series_volume(s: &Series, t_end: f64) -> f64 {
    let n = 24_000;
    let h = t_end / n as f64;
    // Trapezoid on a grid that is a refinement of the series' own (its
    // samples are at multiples of t_end/60), so the rule is exact.
    (0..n)
        .map(|k| 0.5 * h * (s.at(k as f64 * h) + s.at((k + 1) as f64 * h)))
        .sum()
}

/// Independent volume check (continuity, common practice): inflow volume
/// (integrated from the input series) minus outflow volume (trapezoid
/// rule on the reported outlet discharge every minute) equals the change
/// of the volume computed from the reported stages, within 0.1 % of the
/// inflow; the solver's own budget too.
fn check_volume(p: &NetworkProblem<'_, Copies>, r: &NetworkResult, what: &str) {
    assert!(r.balance.error_pct.abs() < 0.1, "{what}: {:?}", r.balance);
    let t_end = r.output_times[r.output_times.len() - 1];
    let mut v_in = 0.0;
    for c in p.network.channels() {
        if let UpstreamEnd::Inflow(s) = &c.upstream {
            v_in += series_volume(s, t_end);
        }
        for l in &c.laterals {
            v_in += series_volume(&l.inflow, t_end);
        }
    }
    let q_out: Vec<f64> = r.channels[p.network.outlet()]
        .discharge
        .iter()
        .map(|row| row[row.len() - 1])
        .collect();
    let v_out: f64 = q_out
        .windows(2)
        .zip(r.output_times.windows(2))
        .map(|(q, t)| 0.5 * (q[0] + q[1]) * (t[1] - t[0]))
        .sum();
    let first: Vec<Vec<f64>> = r.channels.iter().map(|c| c.stage[0].clone()).collect();
    let last: Vec<Vec<f64>> = r
        .channels
        .iter()
        .map(|c| c.stage[c.stage.len() - 1].clone())
        .collect();
    let dv = volume(p, &last) - volume(p, &first);
    let err = 100.0 * (v_in - v_out - dv) / v_in;
    eprintln!(
        "{what}: budget {:.2e} %, independent {err:.2e} %",
        r.balance.error_pct
    );
    assert!(err.abs() < 0.1, "{what}: independent volume error {err} %");
}

/// Check: junction mass balance under 0.1 % for a flood through a
/// confluence (with a lateral inflow on the tributary) and through a loop.
#[test]
fn floods_through_a_confluence_and_a_loop_conserve_volume() {
    let (xm, xt, xd) = (
        chainage(0.0, 4000.0, 200.0),
        chainage(0.0, 3000.0, 150.0),
        chainage(4000.0, 9000.0, 250.0),
    );
    let main = rects(&xm, (40.0, 38.0), 25.0, 0.035, 1.0);
    let trib = rects(&xt, (41.0, 38.3), 10.0, 0.045, 1.0);
    let down = rects(&xd, (38.0, 35.5), 30.0, 0.035, 1.0);
    let hours = 30.0;
    let mut tributary = channel(
        "tributary",
        Reach::new(&xt, &trib).expect("valid"),
        UpstreamEnd::Inflow(flood(2.0, 60.0, 5.0 * 3600.0, hours * 3600.0)),
        DownstreamEnd::Junction(0),
    );
    tributary.laterals = vec![Lateral {
        chainage: 1200.0,
        inflow: flood(0.5, 15.0, 8.0 * 3600.0, hours * 3600.0),
    }];
    let confluence = network_problem(
        vec![
            channel(
                "main",
                Reach::new(&xm, &main).expect("valid"),
                UpstreamEnd::Inflow(flood(8.0, 200.0, 8.0 * 3600.0, hours * 3600.0)),
                DownstreamEnd::Junction(0),
            ),
            tributary,
            channel(
                "lower",
                Reach::new(&xd, &down).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Outlet,
            ),
        ],
        DownstreamBoundary::NormalDepth {
            friction_slope: 5e-4,
        },
        every(60.0, hours),
    );
    let r = route_network(&confluence).expect("confluence runs");
    check_volume(&confluence, &r, "confluence");

    // A loop: the lower channel splits around an island and rejoins.
    let (xa, xb, xe) = (
        chainage(4000.0, 6000.0, 100.0),
        chainage(4000.0, 7000.0, 200.0),
        chainage(6000.0, 9000.0, 250.0),
    );
    let a = rects(&xa, (38.0, 37.0), 20.0, 0.035, 1.0);
    let b = rects(&xb, (38.0, 37.0), 12.0, 0.05, 1.0);
    let e = rects(&xe, (37.0, 35.5), 30.0, 0.035, 1.0);
    let looped = network_problem(
        vec![
            channel(
                "main",
                Reach::new(&xm, &main).expect("valid"),
                UpstreamEnd::Inflow(flood(8.0, 200.0, 8.0 * 3600.0, hours * 3600.0)),
                DownstreamEnd::Junction(0),
            ),
            channel(
                "channel",
                Reach::new(&xa, &a).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "back channel",
                Reach::new(&xb, &b).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "lower",
                Reach::new(&xe, &e).expect("valid"),
                UpstreamEnd::Junction(1),
                DownstreamEnd::Outlet,
            ),
        ],
        DownstreamBoundary::NormalDepth {
            friction_slope: 5e-4,
        },
        every(60.0, hours),
    );
    let r = route_network(&looped).expect("loop runs");
    check_volume(&looped, &r, "loop");
    // The split is reported at the junction: arriving equals leaving up
    // to the junction's own storage change.
    let ends = r.junction_flows(&looped.network, 0);
    assert_eq!(ends.len(), 3);
    let peak_in = ends[0].discharge.iter().fold(0.0_f64, |m, &q| m.max(q));
    for t in 0..r.output_times.len() {
        let net: f64 = ends
            .iter()
            .map(|e| {
                if e.leaves {
                    -e.discharge[t]
                } else {
                    e.discharge[t]
                }
            })
            .sum();
        assert!(net.abs() < 0.02 * peak_in, "t = {t}: {net}");
    }
}

/// Water-surface rise along a prismatic-in-steps path carrying `q`
/// steadily, integrated upstream from stage `z_down` with RK4 on the
/// diffusive-wave momentum equation dz/dx = −Q²/K(z)² (friction slope
/// equals water-surface slope; Chow 1959, gradually varied flow, from
/// memory). `nodes` give K along the path (linear between them).
fn head_loss_path(x: &[f64], nodes: &[Copies], q: f64, z_down: f64) -> f64 {
    let k = |i: usize, z: f64| nodes[i].props(z).conveyance;
    let mut z = z_down;
    for i in (0..x.len() - 1).rev() {
        let dx = x[i + 1] - x[i];
        let sub = 50;
        let h = dx / sub as f64;
        // s runs from the downstream node (0) to the upstream one (1).
        let slope = |s: f64, z: f64| {
            let kk = (1.0 - s) * k(i + 1, z) + s * k(i, z);
            q * q / (kk * kk)
        };
        for m in 0..sub {
            let s0 = m as f64 / sub as f64;
            let ds = 1.0 / sub as f64;
            let k1 = slope(s0, z);
            let k2 = slope(s0 + 0.5 * ds, z + 0.5 * h * k1);
            let k3 = slope(s0 + 0.5 * ds, z + 0.5 * h * k2);
            let k4 = slope(s0 + ds, z + h * k3);
            z += h / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4);
        }
    }
    z
}

/// Check: in a loop with one longer, rougher path, the steady split is
/// the one that makes the head loss along both paths equal, computed
/// independently: the stage at the downstream junction from the outlet
/// stage by integrating the lower channel, then the split by bisection
/// on the difference of the two paths' integrated head losses.
#[test]
fn steady_split_equalises_head_loss_along_both_paths() {
    let (xu, xa, xb, xd) = (
        chainage(0.0, 1000.0, 100.0),
        chainage(1000.0, 3000.0, 100.0),
        chainage(1000.0, 5000.0, 100.0),
        chainage(3000.0, 5000.0, 100.0),
    );
    let up = rects(&xu, (21.0, 20.0), 20.0, 0.03, 1.0);
    let a = rects(&xa, (20.0, 18.0), 10.0, 0.03, 1.0);
    let b = rects(&xb, (20.0, 18.0), 10.0, 0.05, 1.0);
    let down = rects(&xd, (18.0, 16.0), 20.0, 0.03, 1.0);
    let q = 40.0;
    let z_out = 16.0 + 2.2;
    let p = network_problem(
        vec![
            channel(
                "upper",
                Reach::new(&xu, &up).expect("valid"),
                UpstreamEnd::Inflow(Series::constant(q).expect("valid")),
                DownstreamEnd::Junction(0),
            ),
            channel(
                "short smooth",
                Reach::new(&xa, &a).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "long rough",
                Reach::new(&xb, &b).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "lower",
                Reach::new(&xd, &down).expect("valid"),
                UpstreamEnd::Junction(1),
                DownstreamEnd::Outlet,
            ),
        ],
        DownstreamBoundary::FixedStage { stage: z_out },
        vec![0.0, 3600.0],
    );
    let r = route_network(&p).expect("runs");
    let q_a = r.channels[1].discharge[1][5];
    let q_b = r.channels[2].discharge[1][5];
    assert!(rel(q_a + q_b, q) < 1e-6, "{q_a} + {q_b}");

    let z_j1 = head_loss_path(&xd, &down, q, z_out);
    let gap = |qa: f64| head_loss_path(&xa, &a, qa, z_j1) - head_loss_path(&xb, &b, q - qa, z_j1);
    // gap rises with qa: bisection.
    let (mut lo, mut hi) = (0.0, q);
    for _ in 0..80 {
        let mid = 0.5 * (lo + hi);
        if gap(mid) > 0.0 {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    let want = 0.5 * (lo + hi);
    let z_j0 = head_loss_path(&xa, &a, want, z_j1);
    eprintln!(
        "path split: short path {q_a:.4} vs {want:.4} m³/s; junctions {:.4}/{:.4} vs {z_j0:.4}/{z_j1:.4} m",
        r.junction_stage[1][0], r.junction_stage[1][1]
    );
    assert!(rel(q_a, want) < 1e-3, "short path {q_a} vs {want} m³/s");
    assert!(
        (r.junction_stage[1][1] - z_j1).abs() < 2e-3,
        "{} vs {z_j1}",
        r.junction_stage[1][1]
    );
    assert!(
        (r.junction_stage[1][0] - z_j0).abs() < 2e-3,
        "{} vs {z_j0}",
        r.junction_stage[1][0]
    );
    // The longer, rougher path carries well under half.
    assert!(want > 0.6 * q, "{want}");
}

/// Check: a side channel whose bed lies above the main channel's banks
/// wets and dries through a flood with no NaN, no negative depth, and a
/// volume balance under 0.1 % (continuity, common practice).
#[test]
fn dry_side_channel_wets_and_dries_through_a_flood() {
    let (xu, xm, xs, xd) = (
        chainage(0.0, 2000.0, 100.0),
        chainage(2000.0, 5000.0, 100.0),
        chainage(2000.0, 6500.0, 150.0),
        chainage(5000.0, 8000.0, 150.0),
    );
    let bed = |x: f64| 50.0 - 5e-4 * x;
    let up = rects(&xu, (bed(0.0), bed(2000.0)), 15.0, 0.035, 1.0);
    let main = rects(&xm, (bed(2000.0), bed(5000.0)), 15.0, 0.035, 1.0);
    // Bankfull is 3 m: the floodplain path starts and ends 3 m up.
    let side = rects(&xs, (bed(2000.0) + 3.0, bed(5000.0) + 3.0), 60.0, 0.07, 1.0);
    let down = rects(&xd, (bed(5000.0), bed(8000.0)), 15.0, 0.035, 1.0);
    let hours = 36.0;
    let p = network_problem(
        vec![
            channel(
                "upper",
                Reach::new(&xu, &up).expect("valid"),
                UpstreamEnd::Inflow(flood(5.0, 260.0, 8.0 * 3600.0, hours * 3600.0)),
                DownstreamEnd::Junction(0),
            ),
            channel(
                "main",
                Reach::new(&xm, &main).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "floodplain path",
                Reach::new(&xs, &side).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "lower",
                Reach::new(&xd, &down).expect("valid"),
                UpstreamEnd::Junction(1),
                DownstreamEnd::Outlet,
            ),
        ],
        DownstreamBoundary::NormalDepth {
            friction_slope: 5e-4,
        },
        every(300.0, hours),
    );
    let r = route_network(&p).expect("wetting and drying run");
    for (c, (out, ch)) in r.channels.iter().zip(p.network.channels()).enumerate() {
        let n = ch.reach.len();
        for row in out.stage.iter().chain(&out.discharge) {
            assert!(row.iter().all(|v| v.is_finite()), "channel {c}");
        }
        for row in &out.stage {
            for (i, (z, node)) in row.iter().zip(ch.reach.nodes()).enumerate() {
                // A junction end above the junction's water is simply dry.
                let junction_end = (i == 0 && matches!(ch.upstream, UpstreamEnd::Junction(_)))
                    || (i + 1 == n && ch.downstream != DownstreamEnd::Outlet);
                if !junction_end {
                    assert!(
                        *z >= node.bed_elevation(),
                        "channel {c} node {i}: negative depth"
                    );
                }
            }
        }
    }
    let side_q: Vec<f64> = r.channels[2]
        .discharge
        .iter()
        .map(|row| row[row.len() / 2])
        .collect();
    let peak = side_q.iter().fold(0.0_f64, |m, &q| m.max(q));
    assert!(side_q[0].abs() < 1e-6, "dry at the start: {}", side_q[0]);
    eprintln!(
        "side channel: peak {peak:.2} m³/s, start {:.1e}, end {:.2e}",
        side_q[0],
        side_q[side_q.len() - 1]
    );
    assert!(peak > 10.0, "the floodplain path carries the flood: {peak}");
    assert!(
        side_q[side_q.len() - 1] < 0.01 * peak,
        "it drains: {}",
        side_q[side_q.len() - 1]
    );
    check_volume(&p, &r, "side channel");
}

#[test]
fn malformed_networks_are_refused() {
    let x = chainage(0.0, 500.0, 100.0);
    let nodes = rects(&x, (10.0, 9.5), 10.0, 0.035, 1.0);
    let reach = Reach::new(&x, &nodes).expect("valid");
    let q = || UpstreamEnd::Inflow(Series::constant(1.0).expect("valid"));
    let make = |ends: Vec<(UpstreamEnd, DownstreamEnd)>| {
        Network::new(
            ends.into_iter()
                .map(|(u, d)| channel("c", reach, u, d))
                .collect(),
        )
        .err()
    };
    assert_eq!(make(vec![]), Some(NetworkError::Empty));
    assert_eq!(
        make(vec![
            (q(), DownstreamEnd::Junction(0)),
            (UpstreamEnd::Junction(0), DownstreamEnd::Junction(1))
        ]),
        Some(NetworkError::NoOutlet)
    );
    assert_eq!(
        make(vec![
            (q(), DownstreamEnd::Outlet),
            (q(), DownstreamEnd::Outlet)
        ]),
        Some(NetworkError::SeveralOutlets {
            first: 0,
            second: 1
        })
    );
    assert_eq!(
        make(vec![
            (q(), DownstreamEnd::Junction(0)),
            (UpstreamEnd::Junction(0), DownstreamEnd::Junction(0)),
            (UpstreamEnd::Junction(0), DownstreamEnd::Outlet)
        ]),
        Some(NetworkError::SelfLoop {
            channel: 1,
            junction: 0
        })
    );
    assert_eq!(
        make(vec![
            (q(), DownstreamEnd::Junction(1)),
            (UpstreamEnd::Junction(1), DownstreamEnd::Outlet)
        ]),
        Some(NetworkError::LonelyJunction {
            junction: 0,
            ends: 0
        })
    );
    assert_eq!(
        make(vec![
            (q(), DownstreamEnd::Junction(0)),
            (UpstreamEnd::Junction(0), DownstreamEnd::Outlet),
            (q(), DownstreamEnd::Junction(1)),
            (UpstreamEnd::Junction(1), DownstreamEnd::Junction(2)),
            (UpstreamEnd::Junction(1), DownstreamEnd::Junction(2))
        ]),
        Some(NetworkError::Disconnected { channel: 2 })
    );
    // TR-BDF2 is refused for networks.
    let mut p = network_problem(
        vec![channel("c", reach, q(), DownstreamEnd::Outlet)],
        DownstreamBoundary::NormalDepth {
            friction_slope: 1e-3,
        },
        vec![0.0],
    );
    p.options.scheme = diffusive::TimeScheme::TrBdf2;
    assert!(matches!(
        route_network(&p),
        Err(NetworkError::Routing(RoutingError::InvalidOption {
            name: "scheme",
            ..
        }))
    ));
}

/// A run restarted from its own saved state at 6 h ends where the whole
/// run ends (a restart must not lose or invent water; the two take
/// different step sequences, so they agree to the scheme's accuracy, as
/// the single-channel hot-start check allows).
#[test]
fn hot_start_continues_a_network_run() {
    let (xu, xa, xb, xd) = (
        chainage(0.0, 1000.0, 100.0),
        chainage(1000.0, 3000.0, 100.0),
        chainage(1000.0, 5000.0, 200.0),
        chainage(3000.0, 5000.0, 100.0),
    );
    let up = rects(&xu, (21.0, 20.0), 20.0, 0.03, 1.0);
    let a = rects(&xa, (20.0, 18.0), 10.0, 0.03, 1.0);
    let b = rects(&xb, (20.5, 18.5), 10.0, 0.05, 1.0);
    let down = rects(&xd, (18.0, 16.0), 20.0, 0.03, 1.0);
    let inflow = flood(5.0, 90.0, 4.0 * 3600.0, 12.0 * 3600.0);
    let mut p = network_problem(
        vec![
            channel(
                "upper",
                Reach::new(&xu, &up).expect("valid"),
                UpstreamEnd::Inflow(inflow),
                DownstreamEnd::Junction(0),
            ),
            channel(
                "short",
                Reach::new(&xa, &a).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "long",
                Reach::new(&xb, &b).expect("valid"),
                UpstreamEnd::Junction(0),
                DownstreamEnd::Junction(1),
            ),
            channel(
                "lower",
                Reach::new(&xd, &down).expect("valid"),
                UpstreamEnd::Junction(1),
                DownstreamEnd::Outlet,
            ),
        ],
        DownstreamBoundary::NormalDepth {
            friction_slope: 1e-3,
        },
        vec![12.0 * 3600.0],
    );
    let full = route_network(&p).expect("whole run");
    p.output_times = vec![6.0 * 3600.0];
    let first = route_network(&p).expect("first half");
    p.initial = NetworkInitial::Hot(first.final_state.clone());
    p.start_time = 6.0 * 3600.0;
    p.output_times = vec![12.0 * 3600.0];
    let second = route_network(&p).expect("second half");
    let mut worst = 0.0_f64;
    for (a, b) in second
        .final_state
        .iter()
        .flatten()
        .zip(full.final_state.iter().flatten())
    {
        worst = worst.max((a - b).abs());
    }
    assert!(worst < 0.03, "restart differs by {worst} m");
    // A hot start of the wrong shape is refused.
    p.initial = NetworkInitial::Hot(vec![vec![20.0; 3]]);
    assert!(matches!(
        route_network(&p),
        Err(NetworkError::Routing(RoutingError::LengthMismatch { .. }))
    ));
}

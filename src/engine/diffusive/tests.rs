//! Whole runs of the diffusive solver: input rejection, drying and
//! wetting, steep and flat reaches, stage boundaries, warnings, and
//! randomised irregular reaches.

use super::test_support::{all_finite, hourly, hydrograph, normal_depth_problem, problem};
use super::*;
use crate::engine::series::Series;
use crate::engine::test_sections::{Rect, Vee, uniform_rect};

#[test]
fn rejects_invalid_inputs() {
    let (x, nodes) = uniform_rect(5, 100.0, 1e-3, 10.0);
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
    let mut p = normal_depth_problem(reach, Series::constant(0.0).expect("valid"), 2e-3, 6);
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
    fixed_stage_budget(Options::default());
}

/// TR-BDF2 closes the stage boundary's outflow at each of its two stages
/// from that stage's own continuity equation, and weights the three
/// levels' flows as its formulas do, so the budget closes as for θ.
#[test]
fn fixed_stage_outflow_closes_mass_balance_with_trbdf2() {
    fixed_stage_budget(Options {
        scheme: TimeScheme::TrBdf2,
        dt_max: 3600.0,
        ..Options::default()
    });
}

fn fixed_stage_budget(options: Options) {
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
    p.options = options;
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
fn steep_reach_warns_about_froude() {
    let (x, nodes) = uniform_rect(41, 100.0, 2e-2, 10.0);
    let reach = Reach::new(&x, &nodes).expect("valid");
    let p = normal_depth_problem(
        reach,
        hydrograph(20.0, 150.0, 2.0 * 3600.0, 6.0 * 3600.0),
        2e-2,
        6,
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
                Series::new(vec![0.0, 43200.0], vec![bed_end + 1.0, bed_end + 3.0]).expect("valid"),
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

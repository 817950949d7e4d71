//! The ensemble checks: zero spread reproduces the deterministic run bit
//! for bit, probabilities never rise with a level's elevation, percentiles
//! stay inside the members, a seed reproduces its answer, and in the
//! linear regime the crest rise follows the peak factor (Hayami 1951).

use chrono::{DateTime, Duration, Utc};

use super::{
    EnsembleInput, EnsembleSpec, design::design, perturb::RatedInflow, run_ensemble,
    summary::EnsembleSummary,
};
use crate::forecast::{
    hydrograph::Hydrograph,
    level::Trace,
    run::{self, Prepared, RunOutput},
    spec::ReachSpec,
};

fn t0() -> DateTime<Utc> {
    DateTime::from_timestamp(1_790_000_000, 0).expect("valid")
}

/// A wide, uniform 20 km channel (invented): 200 m bed, 1:2 banks,
/// n = 0.03, slope 5e-4, with one point at 10 km and thresholds every
/// 5 cm from 15.75 m.
fn reach(ensemble: EnsembleSpec) -> ReachSpec {
    let thresholds: Vec<serde_json::Value> = (0..14)
        .map(|k| {
            let z = 15.75 + 0.05 * f64::from(k);
            serde_json::json!({"id": format!("t{k:02}"), "name": format!("T{k:02}"), "elevation": z})
        })
        .collect();
    let section = |name: &str, x: f64, bed: f64| {
        serde_json::json!({"name": name, "chainage": x, "geometry": {"shape": "trapezoid",
            "bed_elevation": bed, "bottom_width": 200, "side_slope": 2, "n": 0.03}})
    };
    let doc = serde_json::json!({
        "name": "Ensemble test channel (invented)",
        "sections": [section("A", 0.0, 20.0), section("B", 20_000.0, 10.0)],
        "max_node_spacing": 250,
        "downstream": {"kind": "normal_depth", "friction_slope": 0.0005},
        "points": [{"name": "Mid", "chainage": 10_000, "kind": "other", "thresholds": thresholds}],
        "routing": {"output_interval_s": 900, "dt_max_s": 300},
    });
    let mut spec = ReachSpec::from_json(&doc.to_string()).expect("spec");
    spec.ensemble = ensemble;
    spec
}

/// 100 m³/s, then from hour 2 a smooth pulse of `rise` peaking at hour 10.
fn inflow(rise: f64) -> Hydrograph {
    let q = |h: f64| {
        let x = (h - 2.0) / 8.0;
        let shape = if x > 0.0 {
            x.powi(3) * (3.0 * (1.0 - x)).exp()
        } else {
            0.0
        };
        100.0 + rise * shape
    };
    Hydrograph::parse(
        (0..=40)
            .map(|h| (t0() + Duration::hours(h), q(h as f64)))
            .collect(),
    )
    .expect("valid")
}

fn spreads(members: usize, peak: [f64; 2], shift_h: f64, n: [f64; 2]) -> EnsembleSpec {
    EnsembleSpec {
        members,
        peak_scale: peak,
        timing_shift_hours: shift_h,
        manning_factor: n,
        rating_factor: [1.0, 1.0],
        ..EnsembleSpec::default()
    }
}

fn ensemble(spec: &ReachSpec, inflow: &Hydrograph, seed: u64) -> (RunOutput, EnsembleSummary) {
    let prepared = Prepared::new(spec).expect("prepared");
    let det = run::run(spec, inflow, None).expect("deterministic run");
    let input = EnsembleInput {
        spec,
        settings: &spec.ensemble,
        prepared: &prepared,
        inflow,
        traces: &[],
        issued: t0() + Duration::hours(1),
        rated: RatedInflow::None,
        seed,
        method: None,
    };
    let summary = run_ensemble(&input, &det.points)
        .expect("routes")
        .expect("on");
    (det, summary)
}

/// Zero spread: every member is the deterministic run, so every
/// percentile equals its stage exactly and each level's probability is 1
/// where it is exceeded and 0 where it is not.
#[test]
fn zero_spread_reproduces_the_deterministic_run_bit_for_bit() {
    let spec = reach(spreads(6, [1.0, 1.0], 0.0, [1.0, 1.0]));
    let (det, s) = ensemble(&spec, &inflow(150.0), 3);
    let (p, r) = (&det.points[0], &s.points[0]);
    for band in &r.stage {
        let same = band
            .stage
            .iter()
            .zip(&p.stage)
            .all(|(a, b)| a.to_bits() == b.to_bits());
        assert!(
            same,
            "p{} differs from the deterministic stage",
            band.percentile
        );
    }
    let issued = t0() + Duration::hours(1);
    let ahead = Trace::new(&p.times, &p.stage).ahead(issued);
    for (l, c) in p.levels.iter().zip(&r.levels) {
        let reached = l.seen_on(&ahead).exceeded;
        assert_eq!(c.probability, if reached { 1.0 } else { 0.0 }, "{}", l.id);
    }
    assert_eq!(r.crest.min.to_bits(), r.crest.max.to_bits());
}

/// A member above a higher level is above every lower one, so the share
/// never rises with elevation; percentiles lie between the members'
/// extremes and in order.
#[test]
fn probability_is_monotone_and_percentiles_are_bounded() {
    let spec = reach(spreads(24, [0.5, 1.5], 2.0, [0.85, 1.15]));
    let (_, s) = ensemble(&spec, &inflow(150.0), 17);
    let r = &s.points[0];
    let p: Vec<f64> = r.levels.iter().map(|c| c.probability).collect();
    assert!(p.windows(2).all(|w| w[1] <= w[0]), "{p:?}");
    assert!(
        p.iter().any(|&x| x > 0.0 && x < 1.0),
        "some level is uncertain: {p:?}"
    );
    for c in &r.levels {
        assert_eq!(c.probability, c.members_reaching as f64 / s.members as f64);
        if c.members_reaching > 0 {
            assert!(c.earliest_first_above <= c.median_first_above);
        }
    }
    let (lo, mid, hi) = (&r.stage[0].stage, &r.stage[1].stage, &r.stage[2].stage);
    for k in 0..lo.len() {
        assert!(lo[k] <= mid[k] && mid[k] <= hi[k], "order at {k}");
    }
    for q in &r.crest.percentiles {
        assert!(q.stage >= r.crest.min && q.stage <= r.crest.max);
    }
    // The profile's band: ordered at every node, and at the node where the
    // point sits (10 km, node 40 at 250 m spacing) the same crests as the
    // point's.
    let band = &s.node_crest;
    assert_eq!(band.len(), 3);
    for j in 0..band[0].stage.len() {
        assert!(band[0].stage[j] <= band[1].stage[j] && band[1].stage[j] <= band[2].stage[j]);
    }
    for (b, q) in band.iter().zip(&r.crest.percentiles) {
        assert!(
            (b.stage[40] - q.stage).abs() < 1e-9,
            "{} vs {}",
            b.stage[40],
            q.stage
        );
    }
}

#[test]
fn the_same_seed_gives_the_same_answer() {
    let spec = reach(spreads(8, [0.7, 1.3], 2.0, [0.9, 1.1]));
    let h = inflow(150.0);
    let (_, a) = ensemble(&spec, &h, 99);
    let (_, b) = ensemble(&spec, &h, 99);
    let (_, c) = ensemble(&spec, &h, 100);
    assert_eq!(a, b);
    assert_ne!(a.points, c.points);
}

/// Linear regime: a small wave (5 % of the base flow) on a wide channel
/// routes linearly (Hayami 1951: the linearised diffusion-wave equation,
/// whose solution scales with the inflow perturbation). With the rise
/// scaled by a factor uniform on [0.5, 1.5], the crest-rise percentiles
/// are the factor's percentiles times the deterministic crest rise,
/// within 3 %.
#[test]
fn crest_rise_follows_the_peak_factor_in_the_linear_regime() {
    let es = spreads(20, [0.5, 1.5], 0.0, [1.0, 1.0]);
    let spec = reach(es.clone());
    let (det, s) = ensemble(&spec, &inflow(5.0), 5);
    let p = &det.points[0];
    let issued = t0() + Duration::hours(1);
    let ahead = Trace::new(&p.times, &p.stage).ahead(issued);
    let base = ahead.stage_now();
    let rise = ahead.crest().expect("crest").stage - base;
    assert!(rise > 0.01, "the wave is felt: {rise}");
    let mut factors: Vec<f64> = design(&es, 5).iter().map(|m| m.peak_scale).collect();
    let probs: Vec<f64> = es.percentiles.iter().map(|p| p / 100.0).collect();
    let want = super::quantile::quantiles(&mut factors, &probs).expect("factors");
    for (q, f) in s.points[0].crest.percentiles.iter().zip(want) {
        let got = (q.stage - base) / rise;
        assert!(
            (got / f - 1.0).abs() < 0.03,
            "p{}: {got} vs {f}",
            q.percentile
        );
    }
}

/// Uploaded traces replace the inflow perturbation: with the main series
/// and two traces as the scenarios and no n or rating spread, the members
/// are the three deterministic runs (each routed on its own here), the
/// crest range runs from the low trace's crest to the high one's bit for
/// bit, and each level's probability is the share of those runs that
/// reach it, though the reach's inflow spreads are wide.
#[test]
fn uploaded_traces_are_the_scenarios() {
    let spec = reach(spreads(7, [0.5, 1.5], 3.0, [1.0, 1.0]));
    let (main, low, high) = (inflow(150.0), inflow(100.0), inflow(220.0));
    let prepared = Prepared::new(&spec).expect("prepared");
    let runs: Vec<RunOutput> = [&main, &low, &high]
        .iter()
        .map(|h| run::run(&spec, h, None).expect("routes"))
        .collect();
    let settings = EnsembleSpec {
        members: super::spec::member_count(7, 3),
        ..spec.ensemble.clone()
    };
    assert_eq!(settings.members, 6);
    let traces = [low, high];
    let issued = t0() + Duration::hours(1);
    let input = EnsembleInput {
        spec: &spec,
        settings: &settings,
        prepared: &prepared,
        inflow: &main,
        traces: &traces,
        issued,
        rated: RatedInflow::None,
        seed: 11,
        method: None,
    };
    let s = run_ensemble(&input, &runs[0].points)
        .expect("routes")
        .expect("on");
    assert_eq!(s.source, super::summary::MemberSource::Traces);
    assert_eq!(s.members, 6);
    let crest = |r: &RunOutput| {
        let p = &r.points[0];
        Trace::new(&p.times, &p.stage)
            .ahead(issued)
            .crest()
            .expect("crest")
            .stage
    };
    let range = &s.points[0].crest;
    assert_eq!(range.min.to_bits(), crest(&runs[1]).to_bits());
    assert_eq!(range.max.to_bits(), crest(&runs[2]).to_bits());
    for (k, c) in s.points[0].levels.iter().enumerate() {
        let reaching = runs
            .iter()
            .filter(|r| {
                let p = &r.points[0];
                p.levels[k]
                    .seen_on(&Trace::new(&p.times, &p.stage).ahead(issued))
                    .exceeded
            })
            .count();
        assert_eq!(c.probability, reaching as f64 / 3.0, "{}", c.id);
    }
}

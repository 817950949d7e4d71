//! The check of the calibration issue: synthetic observations made with a
//! known multiplier, plus seeded noise, give that multiplier back.

use chrono::{DateTime, Duration, TimeZone, Utc};

use super::*;
use crate::forecast::ensemble::rng::SplitMix64;

fn t0() -> DateTime<Utc> {
    Utc.with_ymd_and_hms(2026, 3, 14, 0, 0, 0)
        .single()
        .expect("time")
}

fn hours(h: f64) -> DateTime<Utc> {
    t0() + Duration::seconds((h * 3600.0) as i64)
}

/// An invented reach of `sections` with one gauged point at 6 km.
fn reach(sections: serde_json::Value) -> ReachSpec {
    let doc = serde_json::json!({
        "name": "Calibration test reach (invented)",
        "sections": sections,
        "downstream": {"kind": "normal_depth", "friction_slope": 0.0005},
        "points": [{"id": "mill-gauge", "name": "Mill gauge", "chainage": 6000, "kind": "gauge"}],
        "max_node_spacing": 500
    });
    ReachSpec::from_json(&doc.to_string()).expect("spec")
}

fn trapezoids() -> ReachSpec {
    let s = |name: &str, x: f64, bed: f64| {
        serde_json::json!({"name": name, "chainage": x, "geometry": {"shape": "trapezoid",
            "bed_elevation": bed, "bottom_width": 15, "side_slope": 2, "n": 0.035}})
    };
    reach(serde_json::json!([
        s("A", 0.0, 12.0),
        s("B", 6000.0, 9.0),
        s("C", 12000.0, 6.0)
    ]))
}

/// A base flow and two floods: the first peak in the fit window, the
/// second in the held-out one.
fn inflow(peak: f64) -> Hydrograph {
    let q = |h: f64| {
        let bump = |at: f64, size: f64| size * (-((h - at) / 4.0).powi(2)).exp();
        20.0 + bump(14.0, peak) + bump(40.0, 0.75 * peak)
    };
    Hydrograph::parse(
        (0..=60)
            .map(|h| (hours(f64::from(h)), q(f64::from(h))))
            .collect(),
    )
    .expect("inflow")
}

/// A standard normal deviate by the Box–Muller transform (Box and Muller
/// 1958), from two uniforms of the seeded generator.
fn normal(rng: &mut SplitMix64) -> f64 {
    let u1 = 1.0 - rng.next_unit(); // in (0, 1], so the logarithm is finite
    let u2 = rng.next_unit();
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

/// The stage at the point every 30 min, routed with `truth`, plus
/// Gaussian noise of standard deviation `sd` (m).
fn observations(
    spec: &ReachSpec,
    flow: &Hydrograph,
    truth: RoughnessMultipliers,
    sd: f64,
) -> Vec<(DateTime<Utc>, f64)> {
    let m = modelled(spec, flow, truth, "mill-gauge")
        .expect("routes")
        .expect("point");
    let mut rng = SplitMix64::new(12);
    (0..=120)
        .filter_map(|k| {
            let t = hours(f64::from(k) * 0.5);
            Some((t, m.at(t)? + sd * normal(&mut rng)))
        })
        .collect()
}

fn problem<'a>(
    spec: &'a ReachSpec,
    flow: &'a Hydrograph,
    observed: &'a [(DateTime<Utc>, f64)],
) -> Problem<'a> {
    Problem {
        spec,
        inflow: flow,
        observed,
        point: "mill-gauge",
        fit: Window {
            from: hours(4.0),
            to: hours(27.0),
        },
        held_out: Window {
            from: hours(28.0),
            to: hours(58.0),
        },
        bounds: (0.5, 2.0),
    }
}

/// The check: a channel multiplier of 1.25 is recovered within
/// 3 % from observations with 2 cm noise; the held-out RMSE falls to the
/// noise's order and the NSE rises.
#[test]
fn recovers_a_known_channel_multiplier() {
    let spec = trapezoids();
    let flow = inflow(120.0);
    let truth = RoughnessMultipliers {
        channel: 1.25,
        floodplain: 1.0,
    };
    let obs = observations(&spec, &flow, truth, 0.02);
    let c = calibrate(&problem(&spec, &flow, &obs)).expect("calibrates");
    eprintln!("{}", report::summary(&c));
    assert!(
        matches!(c.fitted, Fitted::ChannelOnly { .. }),
        "trapezoids have one n"
    );
    let err = (c.after.multipliers.channel / 1.25 - 1.0).abs();
    assert!(
        err < 0.03,
        "recovered {} ({:.2} %)",
        c.after.multipliers.channel,
        100.0 * err
    );
    let (b, a) = (c.before.held_out, c.after.held_out);
    let (rb, ra) = (b.rmse.expect("rmse"), a.rmse.expect("rmse"));
    assert!(ra < rb && ra < 0.04, "held-out RMSE {rb} → {ra}");
    assert!(a.nse.expect("nse") > b.nse.expect("nse"));
    assert_eq!(c.proposed.roughness, c.after.multipliers);
}

/// Overlapping windows and a point the reach lacks are refused.
#[test]
fn refuses_overlapping_windows_and_unknown_points() {
    let spec = trapezoids();
    let flow = inflow(60.0);
    let obs = vec![(hours(10.0), 10.0), (hours(30.0), 10.0)];
    let mut p = problem(&spec, &flow, &obs);
    p.held_out = Window {
        from: hours(20.0),
        to: hours(40.0),
    };
    assert!(matches!(calibrate(&p), Err(CalibrateError::Setup(_))));
    let mut q = problem(&spec, &flow, &obs);
    q.point = "nowhere";
    assert_eq!(
        calibrate(&q),
        Err(CalibrateError::NoPoint("nowhere".into()))
    );
}

/// Invented surveyed sections: a 20 m wide, 2.5 m deep channel between
/// floodplains 80 m wide, rougher on the right.
fn compound() -> ReachSpec {
    let s = |name: &str, x: f64, bed: f64| {
        let p = |st: f64, z: f64| [st, bed + z];
        serde_json::json!({"name": name, "chainage": x, "geometry": {"shape": "station_elevation",
            "points": [p(0.0, 4.0), p(80.0, 2.5), p(82.0, 0.0), p(102.0, 0.0), p(104.0, 2.5), p(184.0, 4.0)],
            "left_bank": 80, "right_bank": 104, "n_left": 0.06, "n_channel": 0.035, "n_right": 0.07}})
    };
    reach(serde_json::json!([
        s("A", 0.0, 12.0),
        s("B", 6000.0, 9.0),
        s("C", 12000.0, 6.0)
    ]))
}

/// Floods well over the banks in both windows: both multipliers are
/// fitted, and each is recovered (the channel's within 3 %; the
/// floodplain's, seen only near the crest, within 10 %).
#[test]
fn recovers_channel_and_floodplain_multipliers_apart() {
    let spec = compound();
    let flow = inflow(200.0);
    let truth = RoughnessMultipliers {
        channel: 1.2,
        floodplain: 0.8,
    };
    let obs = observations(&spec, &flow, truth, 0.02);
    let c = calibrate(&problem(&spec, &flow, &obs)).expect("calibrates");
    eprintln!("{}", report::summary(&c));
    assert_eq!(c.fitted, Fitted::Separately);
    let m = c.after.multipliers;
    assert!(
        (m.channel / 1.2 - 1.0).abs() < 0.03,
        "channel {}",
        m.channel
    );
    assert!(
        (m.floodplain / 0.8 - 1.0).abs() < 0.10,
        "floodplain {}",
        m.floodplain
    );
    let (rb, ra) = (c.before.held_out.rmse, c.after.held_out.rmse);
    assert!(ra < rb, "held-out RMSE {rb:?} → {ra:?}");
}

/// A flood that stays below the banks says nothing of the floodplain's
/// n: one multiplier is fitted, and the result says why.
#[test]
fn in_bank_flows_fit_the_channel_alone() {
    let spec = compound();
    let flow = inflow(25.0);
    let truth = RoughnessMultipliers {
        channel: 0.9,
        floodplain: 1.0,
    };
    let obs = observations(&spec, &flow, truth, 0.01);
    let c = calibrate(&problem(&spec, &flow, &obs)).expect("calibrates");
    let Fitted::ChannelOnly { reason } = &c.fitted else {
        panic!(
            "in-bank flows cannot separate the floodplain: {:?}",
            c.fitted
        );
    };
    assert!(reason.contains("stays in the channel"), "{reason}");
    assert_eq!(c.after.multipliers.floodplain, 1.0, "kept as it was");
    assert!((c.after.multipliers.channel / 0.9 - 1.0).abs() < 0.03);
}

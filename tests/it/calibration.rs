//! `POST /api/reaches/{reach}/calibration` through the real HTTP server
//! and a real SQLite file: readings posted at an upstream gauge and at a
//! bridge gauge, the bridge's made by routing the same inflow with a known
//! channel multiplier plus seeded noise; the endpoint must give that
//! multiplier back (within 3 %, the calibration issue's check) and apply
//! nothing.

use chrono::{DateTime, Duration, Utc};
use reachcast::forecast::{
    calibrate::objective::modelled, ensemble::rng::SplitMix64, hydrograph::Hydrograph,
    multipliers::RoughnessMultipliers, spec::ReachSpec,
};
use serde_json::{Value, json};

use crate::common::{ReachApp, assert_success, body_of, bridge_reach, json_of, reach_gauge};

const REACH: &str = "cal-reach";
const UP: &str = "cal-up";
const BRIDGE: &str = "cal-bridge";
const TRUTH: f64 = 1.3;

fn reach_doc() -> Value {
    let mut doc = bridge_reach("Calibration reach (invented)", "Cal Bridge", UP);
    doc["points"][0]["gauge"] = json!(BRIDGE);
    doc
}

/// Two floods on a base flow, every 15 min for 49 h from `start`: the
/// first crest at 16 h, the second at 38 h.
fn inflow(start: DateTime<Utc>) -> Vec<(DateTime<Utc>, f64)> {
    (0..=196)
        .map(|k| {
            let h = f64::from(k) / 4.0;
            let bump = |at: f64, size: f64| size * (-((h - at) / 3.0).powi(2)).exp();
            (
                start + Duration::minutes(15 * i64::from(k)),
                40.0 + bump(16.0, 140.0) + bump(38.0, 110.0),
            )
        })
        .collect()
}

/// A standard normal deviate (Box and Muller 1958) from the seeded
/// generator.
fn normal(rng: &mut SplitMix64) -> f64 {
    let u1 = 1.0 - rng.next_unit();
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * rng.next_unit()).cos()
}

fn batch(rows: impl Iterator<Item = Value>) -> Value {
    json!({"readings": rows.collect::<Vec<_>>()})
}

fn window(a: DateTime<Utc>, b: DateTime<Utc>) -> String {
    format!("{}/{}", a.to_rfc3339(), b.to_rfc3339())
}

#[tokio::test]
async fn the_endpoint_recovers_a_known_multiplier_and_applies_nothing() {
    let up_gauge = reach_gauge("Cal upstream gauge", REACH, "discharge", 19.0, 2.0);
    let s = ReachApp::start(
        |c| c.forecast.debounce_ms = 3_600_000,
        (REACH, &reach_doc()),
        (UP, &up_gauge),
    )
    .await;
    let mut bridge = reach_gauge("Cal bridge gauge", REACH, "stage", 10.0, 3.0);
    bridge["chainage_m"] = json!(5000.0);
    body_of(s.app.put_gauge(&s.keys.admin, BRIDGE, &bridge).await, 201).await;
    let bridge_key = s.app.key(reachcast::auth::Role::Gauge, &[BRIDGE]).await;

    let secs = Utc::now().timestamp();
    let now = DateTime::from_timestamp(secs - secs % 900, 0).expect("a quarter hour");
    let start = now - Duration::hours(50);
    let flow = inflow(start);
    let rows = flow
        .iter()
        .map(|(t, q)| json!({"time": t.to_rfc3339(), "discharge": q}));
    assert_success(s.app.post_readings(&s.keys.gauge, UP, &batch(rows)).await).await;

    // What the bridge gauge "saw": the reach routed with the known
    // multiplier, plus 2 cm of seeded Gaussian noise.
    let spec = ReachSpec::from_json(&reach_doc().to_string()).expect("spec");
    let hydro = Hydrograph::parse(flow.clone()).expect("inflow");
    let truth = RoughnessMultipliers {
        channel: TRUTH,
        floodplain: 1.0,
    };
    let m = modelled(&spec, &hydro, truth, "cal-bridge")
        .expect("routes")
        .expect("point");
    let mut rng = SplitMix64::new(5);
    let rows = flow.iter().filter_map(|(t, _)| {
        let z = m.at(*t)? + 0.02 * normal(&mut rng);
        Some(json!({"time": t.to_rfc3339(), "stage": z}))
    });
    assert_success(s.app.post_readings(&bridge_key, BRIDGE, &batch(rows)).await).await;

    let url = format!("/api/reaches/{REACH}/calibration");
    let body = json!({
        "point": "cal-bridge",
        "fit": window(now - Duration::hours(44), now - Duration::hours(26)),
        "held_out": window(now - Duration::hours(24), now - Duration::hours(2)),
    });
    let denied = s.app.post_json(&bridge_key, &url, &body).await;
    assert_eq!(denied.status(), 403, "a gauge key may not calibrate");
    let v = json_of(s.app.post_json(&s.keys.forecaster, &url, &body).await, 200).await;
    let c = &v["calibration"];
    eprintln!("{}", v["summary"].as_str().unwrap_or_default());
    let got = c["after"]["multipliers"]["channel"]
        .as_f64()
        .expect("channel");
    assert!((got / TRUTH - 1.0).abs() < 0.03, "recovered {got}: {v}");
    assert_eq!(c["fitted"]["kind"], "channel_only", "trapezoids have one n");
    let rmse = |w: &str, when: &str| c[when][w]["rmse"].as_f64().expect("rmse");
    assert!(rmse("held_out", "after") < rmse("held_out", "before"));
    assert!(c["after"]["held_out"]["pairs"].as_u64().expect("pairs") > 50);
    assert_eq!(v["proposed"]["roughness"]["channel"].as_f64(), Some(got));
    assert_eq!(v["applied"], false);

    // Nothing applied yet: the stored reach carries no multipliers.
    let (status, stored) = s.app.get_json(&format!("/api/reaches/{REACH}")).await;
    assert_eq!(status, 200);
    assert!(!stored.to_string().contains("roughness"), "{stored}");

    // Applied by an admin's PUT, the proposal is a new reach version, and
    // a run on it records the multipliers it used.
    let put = s.app.put_reach(&s.keys.admin, REACH, &v["proposed"]).await;
    assert_success(put).await;
    let run = json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;
    let (status, detail) = s
        .app
        .get_json(&format!("/api/runs/{}", run["run_id"]))
        .await;
    assert_eq!(status, 200);
    let p = &detail["provenance"];
    assert_eq!(p["roughness"]["channel"].as_f64(), Some(got), "{p}");
    assert_eq!(p["roughness"]["floodplain"].as_f64(), Some(1.0));
    assert!(p["reach_version"].as_i64() > v["reach_version"].as_i64());

    // Overlapping windows: 422.
    let overlapping = json!({"point": "cal-bridge", "fit": body["fit"], "held_out": body["fit"]});
    let a = s
        .app
        .post_json(&s.keys.forecaster, &url, &overlapping)
        .await;
    assert_eq!(a.status(), 422);
    // Windows whose routings would exceed the forecast budgets: 422.
    let ten_years = Duration::days(3650);
    let long = json!({"point": "cal-bridge", "held_out": body["held_out"],
                      "fit": window(now - ten_years, now - Duration::hours(26))});
    let a = s.app.post_json(&s.keys.forecaster, &url, &long).await;
    let problem = json_of(a, 422).await;
    let detail = problem["detail"].as_str().unwrap_or_default();
    assert!(detail.contains("too long"), "{problem}");
    // A point the stored reach does not have: the request is well-formed,
    // the reach is not what it assumes (409).
    let elsewhere =
        json!({"point": "no-such-point", "fit": body["fit"], "held_out": body["held_out"]});
    let a = s.app.post_json(&s.keys.forecaster, &url, &elsewhere).await;
    let problem = json_of(a, 409).await;
    assert_eq!(problem["type"], "/problems/state-conflict", "{problem}");
    assert_eq!(problem["field"], "calibration", "{problem}");
    s.app.stop().await;
}

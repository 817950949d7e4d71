//! Verification end to end, through the real HTTP server on a real SQLite
//! file: forecasts at a gauged point are scored against the readings that
//! gauge reports after the runs, beside persistence, and every forecast
//! says how well its point has verified (or that it has not yet).
//!
//! The reference is arithmetic on a constructed case (no model needed to
//! know the answer): the upstream inflow is steady, so every run's stage at
//! the point is the same steady stage; the point gauge then reports that
//! stage plus 0.1 m after the runs, and 0.3 m above it before them. Every
//! forecast error is then −0.1 m and every persistence error +0.2 m, so by
//! hand: bias −0.1 m, MAE 0.1 m, persistence MAE 0.2 m, skill 1 − 0.1/0.2 =
//! 0.5.

use chrono::{DateTime, Duration, Utc};
use reachcast::auth::Role;
use serde_json::{Value, json};

use crate::common::{
    ReachApp, assert_success, body_of, bridge_reach, json_of, problem, reach_gauge,
};

pub const REACH: &str = "verify-reach";
const UPSTREAM: &str = "verify-upstream";
const POINT_GAUGE: &str = "verify-point";

async fn setup() -> ReachApp {
    let mut doc = bridge_reach("Verification reach (invented)", "Test Bridge", UPSTREAM);
    doc["points"][0]["gauge"] = json!(POINT_GAUGE);
    let upstream = reach_gauge("Upstream (invented)", REACH, "discharge", 19.0, 2.0);
    let s = ReachApp::start(
        |c| {
            // Runs only when the test asks (`wait=true`).
            c.forecast.debounce_ms = 600_000;
            c.forecast.lookback_hours = 6;
            c.forecast.horizon_hours = 6;
            // The "later" readings are posted now, with times ahead.
            c.ingest.max_future_secs = 86_400;
            c.verification.bands_hours = "0,3,6".to_owned();
            c.verification.min_runs = 2;
            c.verification.min_pairs = 10;
        },
        (REACH, &doc),
        (UPSTREAM, &upstream),
    )
    .await;
    let point = json!({"name": "Bridge gauge (invented)", "reach": REACH, "chainage_m": 5000.0,
                       "measures": "stage", "stage_min_m": 10.0, "stage_max_m": 30.0,
                       "max_rise_m_per_h": 10.0});
    body_of(
        s.app.put_gauge(&s.keys.admin, POINT_GAUGE, &point).await,
        201,
    )
    .await;
    s
}

fn stages(points: &[(DateTime<Utc>, f64)]) -> Value {
    let readings: Vec<Value> = points
        .iter()
        .map(|(t, z)| json!({"time": t.to_rfc3339(), "stage": z, "quality": "good"}))
        .collect();
    json!({ "readings": readings })
}

async fn run(s: &ReachApp) {
    assert_success(s.app.run_and_wait(&s.keys.forecaster, REACH).await).await;
}

async fn forecast_point(s: &ReachApp) -> Value {
    let (status, doc) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    assert_eq!(status, 200, "{doc}");
    doc["points"][0].clone()
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

/// The constructed case of the module comment, through three runs: run 1
/// before the point gauge says anything, run 2 after its reading 0.3 m
/// above the steady stage, then the "later" readings 0.1 m above run 2's
/// forecast, then run 3, whose pass scores runs 2 and 3 and closes run 2
/// (its window seen). Shared with the dashboard's browser test.
pub async fn verified_scenario() -> ReachApp {
    let s = setup().await;
    let now = Utc::now();
    let steady: Vec<Value> = (0..=24)
        .map(|k| {
            let t = now - Duration::minutes(15 * (24 - k));
            json!({"time": t.to_rfc3339(), "discharge": 40.0, "quality": "good"})
        })
        .collect();
    let upstream_key = s.keys.gauge.clone();
    assert_success(
        s.app
            .post_readings(&upstream_key, UPSTREAM, &json!({ "readings": steady }))
            .await,
    )
    .await;

    // Run 1: the point gauge has said nothing yet, so nothing is verified.
    run(&s).await;
    let p = forecast_point(&s).await;
    assert_eq!(p["verification"]["status"], "not_yet_verified", "{p}");
    assert_eq!(p["verification"]["status_text"], "not yet verified");
    let steady_stage = num(&p["current_stage"]);

    // Before run 2: the point gauge reads 0.3 m above the steady stage
    // (persistence will hold it).
    let point_key = s.app.key(Role::Gauge, &[POINT_GAUGE]).await;
    let before = stages(&[(Utc::now() - Duration::minutes(1), steady_stage + 0.3)]);
    assert_success(s.app.post_readings(&point_key, POINT_GAUGE, &before).await).await;
    run(&s).await;
    let p = forecast_point(&s).await;
    let times: Vec<DateTime<Utc>> = p["times"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t.as_str().unwrap().parse().unwrap())
        .collect();
    let stage: Vec<f64> = p["stage"].as_array().unwrap().iter().map(num).collect();
    // "Later": 0.1 m above run 2's forecast at its output times from 20 min
    // after now to its end (the margin keeps them after run 3's issue).
    let from = Utc::now() + Duration::minutes(20);
    let later: Vec<(DateTime<Utc>, f64)> = times
        .iter()
        .zip(&stage)
        .filter(|(t, _)| **t >= from)
        .map(|(t, z)| (*t, z + 0.1))
        .collect();
    assert!(later.len() > 30, "six hours at 10 min");
    assert_success(
        s.app
            .post_readings(&point_key, POINT_GAUGE, &stages(&later))
            .await,
    )
    .await;

    // Run 3's pass scores runs 2 and 3 and closes run 2 (its window seen).
    run(&s).await;
    s
}

#[tokio::test]
async fn forecasts_are_scored_against_what_the_point_gauge_saw_later() {
    let s = verified_scenario().await;
    let (status, v) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/verification"))
        .await;
    assert_eq!(status, 200, "{v}");
    assert!(v["caution"].as_str().unwrap().contains("Advisory"));
    assert_eq!(v["bands_hours"], json!([0, 3, 6]));
    let point = &v["points"][0];
    assert_eq!(point["status"], "verified", "{point}");
    for band in point["bands"].as_array().unwrap() {
        assert_eq!(band["runs"], 2, "{band}");
        assert!(band["pairs"].as_u64().unwrap() >= 20, "{band}");
        assert_eq!(band["status"], "verified");
        let close = |v: &Value, want: f64, tol: f64| {
            assert!((num(v) - want).abs() < tol, "{v} vs {want}: {band}");
        };
        close(&band["model"]["bias_m"], -0.1, 0.005);
        close(&band["model"]["mae_m"], 0.1, 0.005);
        close(&band["persistence"]["mae_m"], 0.2, 0.005);
        close(&band["skill_mae"], 0.5, 0.03);
        close(&band["skill_rmse"], 0.5, 0.03);
    }
    let events = &point["events"];
    assert_eq!(
        events["events"], 1,
        "run 2 closed; run 3's window is not over"
    );
    let level = |id: &str| {
        events["levels"]
            .as_array()
            .unwrap()
            .iter()
            .find(|l| l["id"] == id)
            .unwrap_or_else(|| panic!("no level {id}: {events}"))
            .clone()
    };
    // "low" (16.0 m) lies below the steady stage (~16.8 m by Manning for
    // 40 m³/s; both exceed it), "high" (17.5 m) above both.
    assert_eq!(level("low")["hits"], 1, "{events}");
    assert_eq!(level("high")["correct_negatives"], 1, "{events}");

    // Every forecast carries its point's verification.
    let p = forecast_point(&s).await;
    let brief = &p["verification"];
    assert_eq!(brief["status"], "verified", "{brief}");
    assert!((num(&brief["bands"][0]["mae_m"]) - 0.1).abs() < 0.005);

    // Run 3 was opened before any history was tallied: its correction is
    // off and says why; the raw model stays the forecast.
    let c = &p["corrected"];
    assert_eq!(c["on"], false, "{c}");
    assert!(
        c["reason"]
            .as_str()
            .unwrap()
            .contains("no verified history"),
        "{c}"
    );
    assert_eq!(c["stage"], Value::Null);
    assert!((num(&c["initial_error"]) - 0.3).abs() < 0.005, "{c}");

    // Run 4 is opened on the history of runs 2 and 3 (errors +0.1 m after
    // an issue-time error of +0.3 m): correcting would have cut the RMSE
    // below the raw model's 0.1 m and persistence's 0.2 m, so it is on, and
    // its series is the raw one plus e0·φ^L (recomputed here).
    run(&s).await;
    let p = forecast_point(&s).await;
    let c = &p["corrected"];
    assert_eq!(c["on"], true, "{c}");
    assert!(c["reason"].as_str().unwrap().starts_with("on:"), "{c}");
    let (e0, phi) = (num(&c["initial_error"]), num(&c["decay_per_hour"]));
    assert!((0.0..=1.0).contains(&phi));
    let corrected: Vec<f64> = c["stage"].as_array().unwrap().iter().map(num).collect();
    let raw: Vec<f64> = p["stage"].as_array().unwrap().iter().map(num).collect();
    assert_eq!(corrected.len(), raw.len());
    let last = raw.len() - 1;
    let run_started: DateTime<Utc> = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await
        .1["run"]["started_at"]
        .as_str()
        .unwrap()
        .parse()
        .unwrap();
    let end: DateTime<Utc> = p["times"][last].as_str().unwrap().parse().unwrap();
    let lead_h = (end - run_started).num_milliseconds() as f64 / 3.6e6;
    let want = raw[last] + e0 * phi.powf(lead_h);
    assert!(
        (corrected[last] - want).abs() < 1e-3,
        "{} vs {want}",
        corrected[last]
    );
    assert_eq!(
        corrected[0], raw[0],
        "before the issue time nothing changes"
    );

    // The CSV: a header and one row per point and band, each advisory.
    let res = s
        .app
        .get(&format!("/api/reaches/{REACH}/verification?format=csv"))
        .await;
    let text = body_of(res, 200).await;
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 3, "{text}");
    assert!(lines[0].starts_with("reach,point,gauge,from_h,to_h,status"));
    assert!(lines[1].contains(",verified,"), "{text}");
    assert!(lines[1..].iter().all(|l| l.contains("Advisory")));
    s.app.stop().await;
}

#[tokio::test]
async fn a_bad_window_is_refused_naming_the_parameter() {
    let s = setup().await;
    let res = s
        .app
        .get(&format!("/api/reaches/{REACH}/verification?days=0"))
        .await;
    let p = problem(res, 422).await;
    assert_eq!(p["field"], "days");
    let res = s.app.get("/api/reaches/no-such/verification").await;
    let _ = json_of(res, 404).await;
    s.app.stop().await;
}

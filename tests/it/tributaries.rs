//! Gauged tributaries through the real HTTP server on a real SQLite file:
//! a lateral inflow that names a gauge takes its hydrograph from that
//! gauge's readings, says so in the run's provenance, marks the forecast
//! stale when that gauge is silent, and falls back to the reach's own
//! hydrograph (or fails naming the tributary) when the gauge is unusable.
//!
//! Reference: continuity (common practice). In steady flow the bridge,
//! downstream of the confluence, carries the upstream 40 m³/s plus the
//! tributary's 20 m³/s.

use chrono::{Duration, Utc};
use serde_json::{Value, json};

use crate::common::{
    ReachApp, assert_success, body_of, bridge_reach, reach_gauge, steady_discharge,
};

const REACH: &str = "tributary-reach";
const UPSTREAM: &str = "tributary-upstream";
const TRIBUTARY: &str = "mill-brook";

fn doc(lateral: Value) -> Value {
    let mut d = bridge_reach("Tributary reach (invented)", "Test Bridge", UPSTREAM);
    d["laterals"] = json!([lateral]);
    d
}

async fn setup(lateral: Value) -> ReachApp {
    let upstream = reach_gauge("Upstream (invented)", REACH, "discharge", 19.0, 2.0);
    let s = ReachApp::start(
        |c| {
            c.forecast.debounce_ms = 600_000;
            c.forecast.lookback_hours = 6;
            c.forecast.horizon_hours = 6;
            c.forecast.stale_after_minutes = 60;
        },
        (REACH, &doc(lateral)),
        (UPSTREAM, &upstream),
    )
    .await;
    let trib = json!({"name": "Mill Brook gauge (invented)", "reach": REACH, "chainage_m": 2000.0,
                      "measures": "discharge", "stage_min_m": 0.0, "stage_max_m": 30.0,
                      "max_rise_m_per_h": 2.0, "discharge_max_m3s": 500.0});
    body_of(s.app.put_gauge(&s.keys.admin, TRIBUTARY, &trib).await, 201).await;
    s
}

/// Runs and returns (forecast, run) of the new run.
async fn run_once(s: &ReachApp) -> (Value, Value) {
    let res = s.app.run_and_wait(&s.keys.forecaster, REACH).await;
    let summary: Value = res.json().await.expect("summary");
    let (_, run) = s
        .app
        .get_json(&format!("/api/runs/{}", summary["run_id"]))
        .await;
    let (_, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    (f, run)
}

#[tokio::test]
async fn a_gauged_tributary_feeds_the_forecast_and_its_silence_is_reported() {
    let s = setup(json!({"name": "Mill Brook", "chainage": 2000.0, "gauge": TRIBUTARY})).await;
    let now = Utc::now();
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, UPSTREAM, &steady_discharge(40.0, now))
            .await,
    )
    .await;
    let trib_key = s.app.key(reachcast::auth::Role::Gauge, &[TRIBUTARY]).await;
    assert_success(
        s.app
            .post_readings(&trib_key, TRIBUTARY, &steady_discharge(20.0, now))
            .await,
    )
    .await;
    let (f, run) = run_once(&s).await;
    assert_eq!(run["status"], "ok", "{run}");
    let q = f["points"][0]["peak_discharge"].as_f64().expect("peak");
    assert!(
        (q - 60.0).abs() < 1.0,
        "40 + 20 m³/s below the confluence: {q}"
    );
    let lat = &run["provenance"]["laterals"][0];
    assert_eq!(lat["gauge"], TRIBUTARY);
    assert!(
        lat["inflow"]["observed_count"].as_u64().unwrap_or(0) >= 20,
        "{lat}"
    );
    assert_eq!(f["freshness"]["stale"], false, "{}", f["freshness"]);

    // The tributary gauge falls silent: its last reading two hours old.
    let old = now - Duration::hours(2);
    let s2 = setup(json!({"name": "Mill Brook", "chainage": 2000.0, "gauge": TRIBUTARY})).await;
    assert_success(
        s2.app
            .post_readings(&s2.keys.gauge, UPSTREAM, &steady_discharge(40.0, now))
            .await,
    )
    .await;
    let key2 = s2.app.key(reachcast::auth::Role::Gauge, &[TRIBUTARY]).await;
    assert_success(
        s2.app
            .post_readings(&key2, TRIBUTARY, &steady_discharge(20.0, old))
            .await,
    )
    .await;
    let (f, _) = run_once(&s2).await;
    let reasons = f["freshness"]["reasons"].to_string();
    assert_eq!(f["freshness"]["stale"], true, "{reasons}");
    assert!(reasons.contains("Mill Brook (mill-brook)"), "{reasons}");
    s.app.stop().await;
    s2.app.stop().await;
}

#[tokio::test]
async fn an_unusable_tributary_gauge_falls_back_or_fails_naming_the_tributary() {
    // A gauge that has never reported, with a hydrograph of its own (10 m³/s).
    let own = json!([{"time": "2020-01-01T00:00:00Z", "discharge": 10.0}]);
    let s = setup(
        json!({"name": "Mill Brook", "chainage": 2000.0, "gauge": TRIBUTARY,
                         "inflow": own}),
    )
    .await;
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, UPSTREAM, &steady_discharge(40.0, Utc::now()))
            .await,
    )
    .await;
    let (f, run) = run_once(&s).await;
    assert_eq!(run["status"], "ok", "{run}");
    let fallback = run["provenance"]["laterals"][0]["fallback"].to_string();
    assert!(fallback.contains("own hydrograph"), "{fallback}");
    let q = f["points"][0]["peak_discharge"].as_f64().expect("peak");
    assert!((q - 50.0).abs() < 1.0, "40 + 10 m³/s: {q}");
    s.app.stop().await;

    // Without a hydrograph of its own the run fails, naming the tributary.
    let s = setup(json!({"name": "Mill Brook", "chainage": 2000.0, "gauge": TRIBUTARY})).await;
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, UPSTREAM, &steady_discharge(40.0, Utc::now()))
            .await,
    )
    .await;
    let res = s.app.run_and_wait(&s.keys.forecaster, REACH).await;
    let summary: Value = res.json().await.expect("summary");
    assert_eq!(summary["status"], "failed");
    assert!(
        summary["error"]
            .as_str()
            .unwrap_or_default()
            .contains("laterals[0] (Mill Brook)"),
        "{summary}"
    );
    s.app.stop().await;
}

#[tokio::test]
async fn an_upload_names_its_tributary() {
    // A tributary gauge that has never reported, and no hydrograph of its
    // own: the upload for that tributary (15 m³/s) is what it carries.
    let s = setup(json!({"name": "Mill Brook", "chainage": 2000.0, "gauge": TRIBUTARY})).await;
    let now = Utc::now();
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, UPSTREAM, &steady_discharge(40.0, now))
            .await,
    )
    .await;
    let series: Vec<Value> = (-7..=7)
        .map(|h| json!({"time": (now + Duration::hours(h)).to_rfc3339(), "discharge": 15.0}))
        .collect();
    let body = json!({"reason": "tributary forecast (invented)", "series": series});
    let path = |q: &str| format!("/api/reaches/{REACH}/inflows{q}");
    let res = s
        .app
        .post_json(&s.keys.forecaster, &path("?boundary=Mill%20Brook"), &body)
        .await;
    let v: Value = serde_json::from_str(&body_of(res, 201).await).expect("json");
    assert_eq!(v["boundary"], "Mill Brook");
    // Not a tributary of this reach: refused naming the parameter, as a
    // conflict with the stored reach (409), not a bad value.
    let res = s
        .app
        .post_json(&s.keys.forecaster, &path("?boundary=Nowhere%20Beck"), &body)
        .await;
    let p = crate::common::problem(res, 409).await;
    assert_eq!(p["type"], "/problems/state-conflict");
    assert_eq!(p["field"], "boundary");
    // The upstream inflow has no upload: the tributary's is not mistaken
    // for it.
    let res = s.app.get(&path("/current")).await;
    assert_eq!(res.status(), 404);
    let (_, list) = s.app.get_json(&path("")).await;
    assert_eq!(list["uploads"][0]["boundary"], "Mill Brook", "{list}");
    assert_eq!(list["uploads"][0]["in_force"], true);

    let (f, run) = run_once(&s).await;
    assert_eq!(run["status"], "ok", "{run}");
    let lat = &run["provenance"]["laterals"][0];
    assert_eq!(lat["upload_version"], v["version"], "{lat}");
    let q = f["points"][0]["peak_discharge"].as_f64().expect("peak");
    assert!((q - 55.0).abs() < 1.0, "40 + 15 m³/s: {q}");
    s.app.stop().await;
}

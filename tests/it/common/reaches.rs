//! Invented reaches and gauges that several areas set up the same way, and
//! a fresh app serving one of them.

use reachcast::config::Config;
use serde_json::{Value, json};

use super::{Keys, TestApp, body_of, spawn_app_with, test_config};

/// A fresh app on its own temporary data directory with one reach and its
/// gauge created, and one key of each role.
pub struct ReachApp {
    pub app: TestApp,
    pub keys: Keys,
    pub dir: tempfile::TempDir,
}

impl ReachApp {
    /// Starts the app with the test configuration changed by `change`, then
    /// creates reach `reach` from `doc` and gauge `gauge` from `gauge_doc`
    /// (each a 201), the gauge key being for `gauge`.
    pub async fn start(
        change: impl FnOnce(&mut Config),
        (reach, doc): (&str, &Value),
        (gauge, gauge_doc): (&str, &Value),
    ) -> ReachApp {
        let dir = tempfile::tempdir().expect("temp dir");
        let mut config = test_config(dir.path());
        change(&mut config);
        let app = spawn_app_with(config).await;
        let keys = app.keys(gauge).await;
        body_of(app.put_reach(&keys.admin, reach, doc).await, 201).await;
        body_of(app.put_gauge(&keys.admin, gauge, gauge_doc).await, 201).await;
        ReachApp { app, keys, dir }
    }
}

/// An invented 10 km trapezoidal reach (bottom 15 m, sides 1:2, n 0.035,
/// bed falling from 20 m to 10 m: slope 0.001) with the bridge `point` at
/// mid-reach (low chord 19.5 m, deck 20.5 m) and two thresholds, "low"
/// (16.0 m) and "high" (17.5 m); `gauge` is its upstream gauge; output
/// every 10 minutes, on a +01:00 clock.
pub fn bridge_reach(name: &str, point: &str, gauge: &str) -> Value {
    json!({
        "name": name,
        "sections": [
            {"name": "KM0", "chainage": 0, "geometry": {"shape": "trapezoid", "bed_elevation": 20.0,
             "bottom_width": 15.0, "side_slope": 2.0, "n": 0.035}},
            {"name": "KM10", "chainage": 10000, "geometry": {"shape": "trapezoid", "bed_elevation": 10.0,
             "bottom_width": 15.0, "side_slope": 2.0, "n": 0.035}}
        ],
        "max_node_spacing": 250,
        "downstream": {"kind": "normal_depth", "friction_slope": 0.001},
        "points": [{"name": point, "chainage": 5000, "kind": "bridge",
                    "low_chord": 19.5, "deck": 20.5,
                    "thresholds": [{"name": "low", "elevation": 16.0},
                                   {"name": "high", "elevation": 17.5}]}],
        "routing": {"output_interval_s": 600},
        "service": {"upstream_gauge": gauge, "time_zone": "+01:00"}
    })
}

/// A gauge at the upstream end (chainage 0) of `reach`, measuring
/// `measures`, with stages plausible from `stage_min_m` to 30 m and rising
/// at most `max_rise_m_per_h`.
pub fn reach_gauge(
    name: &str,
    reach: &str,
    measures: &str,
    stage_min_m: f64,
    max_rise_m_per_h: f64,
) -> Value {
    json!({"name": name, "reach": reach, "chainage_m": 0.0, "measures": measures,
           "stage_min_m": stage_min_m, "stage_max_m": 30.0,
           "max_rise_m_per_h": max_rise_m_per_h})
}

/// A gauge on no reach: stage 0..10 m, 1 m/h, both quantities.
pub fn gauge_body(name: &str) -> Value {
    json!({
        "name": name,
        "measures": "both",
        "stage_min_m": 0.0,
        "stage_max_m": 10.0,
        "max_rise_m_per_h": 1.0,
        "discharge_max_m3s": 500.0,
    })
}

/// A triangular flood, hourly for 24 h from `now`: 40 m³/s now, `peak` at
/// 6 h, back to 40 m³/s at 18 h, then steady.
pub fn triangular_flood(
    now: chrono::DateTime<chrono::Utc>,
    peak: f64,
) -> Vec<(chrono::DateTime<chrono::Utc>, f64)> {
    (0..=24)
        .map(|h| {
            let h = f64::from(h);
            let q = if h <= 6.0 {
                40.0 + (peak - 40.0) * h / 6.0
            } else if h <= 18.0 {
                peak - (peak - 40.0) * (h - 6.0) / 12.0
            } else {
                40.0
            };
            (now + chrono::Duration::minutes((h * 60.0) as i64), q)
        })
        .collect()
}

/// 25 readings of a steady discharge `q`, every 15 minutes up to `end`
/// (quality good), as a readings batch.
pub fn steady_discharge(q: f64, end: chrono::DateTime<chrono::Utc>) -> Value {
    let readings: Vec<Value> = (0..=24)
        .map(|k| {
            let t = end - chrono::Duration::minutes(15 * (24 - k));
            json!({"time": t.to_rfc3339(), "discharge": q, "quality": "good"})
        })
        .collect();
    json!({ "readings": readings })
}

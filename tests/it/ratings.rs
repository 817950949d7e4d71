//! Ratings over time through the real HTTP server on a real SQLite file:
//! gaugings in, a fit that recovers the curve they were made from, a new
//! version valid from an instant and a shift, each changing what the
//! upstream gauge's stages mean to the next forecast.
//!
//! References are the curves themselves, Q = C (h − e)^b evaluated by hand:
//! the gauge's own curve gives 10 (20 − 19)^1.5 = 10 m³/s at the steady
//! stage of 20 m; the gaugings' curve 30 m³/s; with a −0.5 m shift
//! 30 · 0.5^1.5 = 10.61 m³/s. In steady flow the bridge carries the inflow.

use chrono::{Duration, Utc};
use serde_json::{Value, json};

use crate::common::{ReachApp, assert_success, body_of, bridge_reach, json_of, problem};

const REACH: &str = "rating-reach";
const GAUGE: &str = "rating-upstream";

fn power(c: f64, e: f64, b: f64) -> Value {
    json!({"kind": "power", "segments": [{"c": c, "e": e, "b": b}]})
}

async fn setup() -> ReachApp {
    let doc = bridge_reach("Rating reach (invented)", "Test Bridge", GAUGE);
    let gauge = json!({"name": "Upstream stage gauge (invented)", "reach": REACH, "chainage_m": 0.0,
                       "measures": "stage", "stage_min_m": 19.0, "stage_max_m": 30.0,
                       "max_rise_m_per_h": 2.0, "rating_curve": power(10.0, 19.0, 1.5)});
    ReachApp::start(
        |c| {
            c.forecast.debounce_ms = 600_000;
            c.forecast.lookback_hours = 6;
            c.forecast.horizon_hours = 6;
        },
        (REACH, &doc),
        (GAUGE, &gauge),
    )
    .await
}

/// The bridge's peak discharge in a fresh run.
async fn bridge_discharge(s: &ReachApp) -> f64 {
    assert_success(s.app.run_and_wait(&s.keys.forecaster, REACH).await).await;
    let (status, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    assert_eq!(status, 200, "{f}");
    f["points"][0]["peak_discharge"].as_f64().expect("peak")
}

async fn post(s: &ReachApp, path: &str, body: &Value) -> reqwest::Response {
    s.app
        .post_json(
            &s.keys.forecaster,
            &format!("/api/gauges/{GAUGE}{path}"),
            body,
        )
        .await
}

#[tokio::test]
async fn gaugings_fit_versions_and_shifts_change_what_the_stages_mean() {
    let s = setup().await;
    let now = Utc::now();
    let steady: Vec<Value> = (0..=24)
        .map(|k| {
            let t = now - Duration::minutes(15 * (24 - k));
            json!({"time": t.to_rfc3339(), "stage": 20.0, "quality": "good"})
        })
        .collect();
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, GAUGE, &json!({ "readings": steady }))
            .await,
    )
    .await;
    let q0 = bridge_discharge(&s).await;
    assert!((q0 - 10.0).abs() < 0.2, "the gauge's own curve: {q0}");

    // Gaugings of Q = 30 (h − 19)^1.5, ±1 % alternating.
    let gaugings: Vec<Value> = (0..12)
        .map(|k| {
            let h = 19.4 + 0.25 * f64::from(k);
            let q = 30.0 * (h - 19.0f64).powf(1.5) * if k % 2 == 0 { 1.01 } else { 0.99 };
            let t = now - Duration::days(20) + Duration::hours(i64::from(k));
            json!({"time": t.to_rfc3339(), "stage_m": h, "discharge_m3s": q,
                   "method": "acoustic-doppler", "quality": "good"})
        })
        .collect();
    let v = json_of(
        post(&s, "/gaugings", &json!({ "gaugings": gaugings })).await,
        201,
    )
    .await;
    assert_eq!(v["new"], 12);
    let fit = json_of(post(&s, "/ratings/fit", &json!({})).await, 200).await;
    let seg = &fit["report"]["curve"]["segments"][0];
    let q_fit = |h: f64| {
        seg["c"].as_f64().unwrap()
            * (h - seg["e"].as_f64().unwrap()).powf(seg["b"].as_f64().unwrap())
    };
    assert!((q_fit(20.0) / 30.0 - 1.0).abs() < 0.02, "{fit}");
    let devs: Vec<f64> = fit["gaugings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|g| g["deviation_pct"].as_f64().unwrap())
        .collect();
    assert_eq!(devs.len(), 12);
    assert!(devs.iter().all(|d| d.abs() < 2.0), "{devs:?}");
    // In two segments broken at 20.5 m: continuous there, each with its
    // statistics; breaks out of order name the field.
    let two = json_of(
        post(&s, "/ratings/fit", &json!({"breaks": [20.5]})).await,
        200,
    )
    .await;
    let segs = &two["report"]["curve"]["segments"];
    assert_eq!(segs[0]["upper_stage"], 20.5, "{two}");
    assert_eq!(two["report"]["segments"].as_array().map(Vec::len), Some(2));
    let q_at = |g: &Value, h: f64| {
        g["c"].as_f64().unwrap() * (h - g["e"].as_f64().unwrap()).powf(g["b"].as_f64().unwrap())
    };
    assert!((q_at(&segs[0], 20.5) / q_at(&segs[1], 20.5) - 1.0).abs() < 1e-9);
    let p = problem(
        post(&s, "/ratings/fit", &json!({"breaks": [21.0, 20.0]})).await,
        422,
    )
    .await;
    assert_eq!(p["field"], "breaks", "{p}");

    // The fitted curve as version 1, valid from three hours ago: readings
    // from then on are converted with it.
    let version = json!({"valid_from": (now - Duration::hours(3)).to_rfc3339(),
                         "curve": fit["report"]["curve"], "note": "refit after the high-flow gaugings"});
    let v = json_of(post(&s, "/ratings", &version).await, 201).await;
    assert_eq!(v["version"], 1);
    let q1 = bridge_discharge(&s).await;
    assert!((q1 - 30.0).abs() < 1.0, "the new version: {q1}");

    // A shift of −0.5 m over the same period.
    let shift = json!({"from": (now - Duration::hours(3)).to_rfc3339(), "offset_m": -0.5,
                       "reason": "bed scoured (invented)"});
    assert_success(post(&s, "/ratings/shifts", &shift).await).await;
    let q2 = bridge_discharge(&s).await;
    let want = q_fit(19.5); // the fitted curve at 20 − 0.5 m
    assert!((q2 - want).abs() < 0.05 * want, "{q2} vs {want}");

    let (_, r) = s
        .app
        .get_json(&format!("/api/gauges/{GAUGE}/ratings"))
        .await;
    assert_eq!(r["versions"].as_array().map(Vec::len), Some(1));
    assert_eq!(r["shifts"].as_array().map(Vec::len), Some(1));
    assert_eq!(r["base"]["segments"][0]["c"], 10.0);
    let csv = body_of(
        s.app
            .get(&format!("/api/gauges/{GAUGE}/gaugings?format=csv"))
            .await,
        200,
    )
    .await;
    assert!(csv.starts_with("time,stage_m,discharge_m3s,method,quality\r\n"));
    assert_eq!(csv.lines().count(), 13);
    // The export posted back as CSV replaces the same twelve: none new.
    let res = s
        .app
        .post_csv_to(
            &s.keys.forecaster,
            &format!("/api/gauges/{GAUGE}/gaugings"),
            &csv,
        )
        .await;
    let v: Value = serde_json::from_str(&body_of(res, 201).await).expect("json");
    assert_eq!(
        (v["new"].as_u64(), v["replaced"].as_u64()),
        (Some(0), Some(12)),
        "{v}"
    );
    s.app.stop().await;
}

#[tokio::test]
async fn bad_gaugings_versions_and_shifts_are_refused_naming_the_field() {
    let s = setup().await;
    let t = (Utc::now() - Duration::days(1)).to_rfc3339();
    let g = |q: f64| {
        json!({"gaugings": [{"time": t, "stage_m": 20.0, "discharge_m3s": q,
                                         "method": "current-meter", "quality": "fair"}]})
    };
    let p = problem(post(&s, "/gaugings", &g(0.0)).await, 422).await;
    assert_eq!(p["field"], "gaugings[0].discharge_m3s");
    let bad =
        "time,stage_m,discharge_m3s,method,quality\n2026-03-14T06:00:00Z,20.5,lots,adcp,good\n";
    let res = s
        .app
        .post_csv_to(
            &s.keys.forecaster,
            &format!("/api/gauges/{GAUGE}/gaugings"),
            bad,
        )
        .await;
    let p = problem(res, 422).await;
    assert_eq!(
        (p["field"].as_str(), p["row"].as_u64()),
        (Some("discharge_m3s"), Some(1))
    );
    let bad = json!({"valid_from": t, "curve": {"kind": "power", "segments": []}, "note": "x"});
    let p = problem(post(&s, "/ratings", &bad).await, 422).await;
    assert_eq!(p["field"], "curve");
    let p = problem(
        post(
            &s,
            "/ratings/shifts",
            &json!({"from": t, "offset_m": 9.0, "reason": "x"}),
        )
        .await,
        422,
    )
    .await;
    assert_eq!(p["field"], "offset_m");
    // Nothing stored to fit: the request is fine, what is stored is not
    // enough (409).
    let p = problem(post(&s, "/ratings/fit", &json!({})).await, 409).await;
    assert_eq!(p["field"], "gaugings", "no gaugings to fit");
    assert_eq!(p["type"], "/problems/state-conflict");
    let res = s
        .app
        .post_json(
            &s.keys.gauge,
            &format!("/api/gauges/{GAUGE}/ratings/shifts"),
            &json!({}),
        )
        .await;
    let _ = body_of(res, 403).await;
    s.app.stop().await;
}

/// `reachcast fit-rating` on a CSV of gaugings made from Q = 30 (h − 19)^1.5
/// (±1 %): the curve written recovers 30 m³/s at 20 m within 2 %, and a bad
/// cell stops it with exit code 2 naming the row and column.
#[test]
fn the_fit_rating_command_fits_a_csv_of_gaugings() {
    use crate::common::binary::reachcast;
    let dir = tempfile::tempdir().expect("temp dir");
    let mut csv = String::from("time,stage_m,discharge_m3s,method,quality\n");
    for k in 0..12 {
        let h = 19.4 + 0.25 * f64::from(k);
        let q = 30.0 * (h - 19.0f64).powf(1.5) * if k % 2 == 0 { 1.01 } else { 0.99 };
        csv.push_str(&format!(
            "2026-03-{:02}T06:00:00Z,{h},{q},acoustic-doppler,good\n",
            k + 1
        ));
    }
    let file = dir.path().join("gaugings.csv");
    std::fs::write(&file, &csv).expect("write");
    let curve = dir.path().join("curve.json");
    let out = reachcast()
        .args(["fit-rating", "--gaugings"])
        .arg(&file)
        .arg("--out")
        .arg(&curve)
        .output()
        .expect("run");
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(text.contains("from 12 gaugings"), "{text}");
    let c: Value =
        serde_json::from_str(&std::fs::read_to_string(&curve).expect("curve")).expect("json");
    let seg = &c["segments"][0];
    let q = seg["c"].as_f64().unwrap()
        * (20.0 - seg["e"].as_f64().unwrap()).powf(seg["b"].as_f64().unwrap());
    assert!((q / 30.0 - 1.0).abs() < 0.02, "{c}");
    std::fs::write(
        &file,
        "time,stage_m,discharge_m3s,method,quality\n2026-03-01T00:00:00Z,20,x,adcp,good\n",
    )
    .expect("write");
    let out = reachcast()
        .args(["fit-rating", "--gaugings"])
        .arg(&file)
        .output()
        .expect("run");
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("row 1, discharge_m3s"), "{err}");
}

//! Inflow uploads with extra traces (issue "How sure", part 1), through the
//! real HTTP server on a real SQLite file: a forecaster's low / most likely
//! / high sent as CSV columns is stored, listed and downloaded as sent; the
//! ensemble routes the three as its scenarios; bad traces are refused
//! naming the trace.

use chrono::{DateTime, Utc};
use serde_json::{Value, json};

use crate::common::{
    ReachApp, assert_success, body_of, bridge_reach, json_of, problem, reach_gauge,
    triangular_flood as flood,
};

const REACH: &str = "trace-reach";
const GAUGE: &str = "trace-gauge";

/// The bridge reach with no Manning's n or rating spread, so each member
/// is exactly the deterministic run of its inflow scenario.
async fn setup() -> ReachApp {
    let mut doc = bridge_reach("Trace reach (invented)", "Trace Bridge", GAUGE);
    doc["ensemble"] = json!({"members": 3, "manning_factor": [1, 1], "rating_factor": [1, 1]});
    let gauge = reach_gauge("Trace gauge", REACH, "discharge", 19.0, 2.0);
    let s = ReachApp::start(
        |c| c.forecast.debounce_ms = 600_000,
        (REACH, &doc),
        (GAUGE, &gauge),
    )
    .await;
    // Three hours of steady 40 m³/s up to now.
    let now = Utc::now();
    let readings: Vec<Value> = (0..=12)
        .map(|k| {
            let t = now - chrono::Duration::minutes(15 * (12 - k));
            json!({"time": t.to_rfc3339(), "discharge": 40.0, "quality": "good"})
        })
        .collect();
    let res = s
        .app
        .post_readings(&s.keys.gauge, GAUGE, &json!({ "readings": readings }))
        .await;
    assert_success(res).await;
    s
}

fn csv_of(columns: &[&[(DateTime<Utc>, f64)]]) -> String {
    let mut text = "time,discharge,discharge_low,discharge_high\n".to_owned();
    for k in 0..columns[0].len() {
        text.push_str(&columns[0][k].0.to_rfc3339());
        for c in columns {
            text.push_str(&format!(",{}", c[k].1));
        }
        text.push('\n');
    }
    text
}

async fn post_csv(s: &ReachApp, query: &str, body: String) -> reqwest::Response {
    reqwest::Client::new()
        .post(s.app.url(&format!("/api/reaches/{REACH}/inflows?{query}")))
        .bearer_auth(&s.keys.forecaster)
        .header("content-type", "text/csv")
        .body(body)
        .send()
        .await
        .expect("send")
}

async fn run(s: &ReachApp) -> Value {
    let r = json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;
    assert_eq!(r["status"], "ok", "{r}");
    let (_, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    f
}

fn crest(f: &Value) -> f64 {
    f["points"][0]["crest_stage"].as_f64().expect("crest")
}

/// The traces are stored and come back as sent, and the ensemble's crest
/// range runs from the low trace's crest to the high one's: each checked
/// against a deterministic run of that trace uploaded on its own (within
/// 2 cm: the runs are issued seconds apart, so their joins to the
/// observations differ slightly).
#[tokio::test]
async fn low_likely_high_traces_are_the_ensemble_scenarios() {
    let s = setup().await;
    let now = Utc::now();
    let (main, low, high) = (flood(now, 150.0), flood(now, 90.0), flood(now, 260.0));
    let sent = csv_of(&[&main, &low, &high]);
    let res = post_csv(&s, "reason=three+scenarios", sent).await;
    let created = json_of(res, 201).await;
    assert_eq!(created["traces"], json!(["low", "high"]));
    let version = created["version"].as_i64().expect("version");
    let (_, list) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/inflows"))
        .await;
    assert_eq!(list["uploads"][0]["traces"], json!(["low", "high"]));
    // The download re-uploads to the same upload.
    let csv = body_of(
        s.app
            .get(&format!(
                "/api/reaches/{REACH}/inflows/{version}?format=csv"
            ))
            .await,
        200,
    )
    .await;
    assert!(
        csv.starts_with("time,discharge,discharge_low,discharge_high\n"),
        "{csv}"
    );
    let (_, one) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/inflows/{version}"))
        .await;
    assert_eq!(one["traces"][1]["name"], "high");
    assert_eq!(one["traces"][1]["series"][6]["discharge"], 260.0);
    let f = run(&s).await;
    let e = &f["run"]["ensemble"];
    assert_eq!(e["status"], "ready", "{e}");
    assert_eq!(e["source"], "traces");
    assert_eq!(e["traces"], json!(["low", "high"]));
    assert_eq!(e["members_used"], 3);
    let range = &f["points"][0]["ensemble"]["crest"];
    let (lo, hi) = (
        range["min"].as_f64().unwrap(),
        range["max"].as_f64().unwrap(),
    );
    assert!(
        lo < crest(&f) && crest(&f) < hi,
        "{lo} < {} < {hi}",
        crest(&f)
    );
    // Each trace alone, as a single-series upload.
    for (trace, want) in [(&high, hi), (&low, lo)] {
        let body = json!({"reason": "one trace alone", "series":
            trace.iter().map(|(t, q)| json!({"time": t.to_rfc3339(), "discharge": q})).collect::<Vec<_>>()});
        assert_success(s.app.post_inflow(&s.keys.forecaster, REACH, &body).await).await;
        let alone = run(&s).await;
        assert_eq!(alone["run"]["ensemble"]["source"], "perturbed");
        assert!(
            (crest(&alone) - want).abs() < 0.02,
            "{} vs {want}",
            crest(&alone)
        );
    }
    s.app.stop().await;
}

/// A bad trace is refused naming it, and nothing is stored.
#[tokio::test]
async fn bad_traces_are_refused_naming_the_trace() {
    let s = setup().await;
    let now = Utc::now();
    let samples = |h: &[(DateTime<Utc>, f64)]| -> Vec<Value> {
        h.iter()
            .map(|(t, q)| json!({"time": t.to_rfc3339(), "discharge": q}))
            .collect()
    };
    let main = flood(now, 150.0);
    let mut negative = samples(&flood(now, 90.0));
    negative[3]["discharge"] = json!(-1.0);
    let cases = [
        (
            json!([{"name": "Low", "series": samples(&main)}]),
            "traces[0].name",
        ),
        (
            json!([{"name": "main", "series": samples(&main)}]),
            "traces[0].name",
        ),
        (
            json!([{"name": "low", "series": negative}]),
            "traces[0].discharge",
        ),
        (
            json!([{"name": "a", "series": samples(&main)}, {"name": "b", "series": samples(&main[1..])}]),
            "traces[1]",
        ),
    ];
    for (traces, field) in cases {
        let body = json!({"reason": "bad", "series": samples(&main), "traces": traces});
        let p = problem(
            s.app.post_inflow(&s.keys.forecaster, REACH, &body).await,
            422,
        )
        .await;
        assert_eq!(p["field"], field, "{p}");
    }
    let bad_csv =
        "time,discharge,discharge_low\n2026-03-01T00:00:00Z,1,1\n2026-03-01T01:00:00Z,2,x\n";
    let p = problem(post_csv(&s, "reason=bad", bad_csv.to_owned()).await, 422).await;
    assert_eq!(
        (p["field"].as_str(), p["row"].as_i64()),
        (Some("discharge_low"), Some(2))
    );
    let (_, list) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/inflows"))
        .await;
    assert_eq!(list["uploads"], json!([]));
    s.app.stop().await;
}

//! Hindcasts through the real HTTP server and the real binary, on a real
//! SQLite file: a past instant replayed from what was known then.
//!
//! The check (the issue's): a hindcast never reads the future. Readings
//! timed after the issue time, readings received after it (new ones timed
//! before it, and a revision of one timed before it) and an upload made
//! after it leave the hindcast run for that issue time unchanged, bit for
//! bit; the same data do change a live run, so they would have mattered.

use chrono::{DateTime, Duration, Utc};
use serde_json::{Value, json};

use crate::common::{
    ReachApp, assert_success, binary::reachcast, body_of, bridge_reach, json_of, problem,
    reach_gauge,
};

const REACH: &str = "hindcast-reach";
const GAUGE: &str = "hindcast-upstream";

async fn setup() -> ReachApp {
    let doc = bridge_reach("Hindcast reach (invented)", "Test Bridge", GAUGE);
    let gauge = reach_gauge("Upstream (invented)", REACH, "discharge", 19.0, 2.0);
    ReachApp::start(
        |c| {
            c.forecast.debounce_ms = 600_000;
            c.forecast.lookback_hours = 6;
            c.forecast.horizon_hours = 6;
            c.ingest.max_future_secs = 86_400;
        },
        (REACH, &doc),
        (GAUGE, &gauge),
    )
    .await
}

fn discharges(points: &[(DateTime<Utc>, f64)]) -> Value {
    let readings: Vec<Value> = points
        .iter()
        .map(|(t, q)| json!({"time": t.to_rfc3339(), "discharge": q, "quality": "good"}))
        .collect();
    json!({ "readings": readings })
}

async fn hindcast(s: &ReachApp, body: &Value) -> reqwest::Response {
    s.app
        .post_json(
            &s.keys.forecaster,
            &format!("/api/reaches/{REACH}/hindcasts"),
            body,
        )
        .await
}

/// The stage at the bridge of run `id`, and its inflow provenance.
async fn run_stage(s: &ReachApp, id: &Value) -> (Vec<f64>, Value) {
    let (status, run) = s.app.get_json(&format!("/api/runs/{id}")).await;
    assert_eq!(status, 200, "{run}");
    let stage = run["results"]["points"][0]["stage"]
        .as_array()
        .expect("stage")
        .iter()
        .map(|v| v.as_f64().expect("number"))
        .collect();
    (stage, run["provenance"]["inflow"].clone())
}

async fn one_run(s: &ReachApp, at: DateTime<Utc>, knowledge: &str) -> Value {
    // `60.0` is an integer to JSON Schema (2020-12 validation §6.1.1), as
    // the document's `"type": "integer"` promises.
    let body = json!({"from": at.to_rfc3339(), "to": at.to_rfc3339(), "every_minutes": 60.0,
                      "knowledge": knowledge});
    let v = json_of(hindcast(s, &body).await, 200).await;
    assert!(
        v["caution"]
            .as_str()
            .unwrap_or_default()
            .contains("Advisory")
    );
    let runs = v["runs"].as_array().expect("runs");
    assert_eq!(runs.len(), 1, "{v}");
    assert_eq!(runs[0]["status"], "ok", "{v}");
    runs[0]["run_id"].clone()
}

#[tokio::test]
async fn a_hindcast_never_reads_the_future() {
    let s = setup().await;
    let t0 = Utc::now() - Duration::minutes(1);
    let known: Vec<_> = (0..=24i32)
        .map(|k| {
            (
                t0 - Duration::minutes(i64::from(15 * (24 - k))),
                40.0 + f64::from(k),
            )
        })
        .collect();
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, GAUGE, &discharges(&known))
            .await,
    )
    .await;
    // The issue time: after those readings were received.
    let issued = Utc::now();
    let first = one_run(&s, issued, "as_received").await;
    let (stage, inflow) = run_stage(&s, &first).await;

    // What was not known at the issue time: readings timed after it, a new
    // reading timed before it, a revision of one timed before it (all
    // received after it), and an upload.
    let later: Vec<_> = (1..=8)
        .map(|k| (issued + Duration::minutes(5 * k), 150.0))
        .collect();
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, GAUGE, &discharges(&later))
            .await,
    )
    .await;
    let late = discharges(&[
        (t0 - Duration::minutes(7), 90.0),
        (t0, 95.0), // was 64 m³/s: a revision
    ]);
    assert_success(s.app.post_readings(&s.keys.gauge, GAUGE, &late).await).await;
    let series: Vec<Value> = (0..=12)
        .map(|h| json!({"time": (issued + Duration::hours(h)).to_rfc3339(), "discharge": 120.0}))
        .collect();
    let upload = json!({"reason": "revised inflow after the issue time", "series": series});
    assert_success(s.app.post_inflow(&s.keys.forecaster, REACH, &upload).await).await;

    let again = one_run(&s, issued, "as_received").await;
    assert_ne!(again, first, "a new run");
    let (stage2, inflow2) = run_stage(&s, &again).await;
    assert_eq!(
        stage2, stage,
        "the hindcast for that issue time did not change"
    );
    assert_eq!(inflow2, inflow);

    // The same data change a run that may read them: "as timed" takes the
    // revision and the late reading (both timed before the issue time).
    let timed = one_run(&s, issued, "as_timed").await;
    let (stage3, _) = run_stage(&s, &timed).await;
    assert_ne!(stage3, stage, "the late data mattered");

    // Hindcast runs are never the current forecast; they are listed as such.
    let (_, runs) = s.app.get_json(&format!("/api/reaches/{REACH}/runs")).await;
    let listed: Vec<&Value> = runs["runs"].as_array().expect("runs").iter().collect();
    let hind = listed
        .iter()
        .filter(|r| r["provenance"]["hindcast"]["issued"].is_string())
        .count();
    assert_eq!(hind, 3, "{runs}");
    let res = s.app.get(&format!("/api/reaches/{REACH}/forecast")).await;
    assert_eq!(
        res.status(),
        404,
        "no live run yet: a hindcast is not served"
    );
    assert_success(s.app.run_and_wait(&s.keys.forecaster, REACH).await).await;
    let (_, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    assert!(
        f["run"]["id"].as_i64() > again.as_i64(),
        "the live run is served"
    );

    // The command line makes the same run from the same knowledge.
    let out = reachcast()
        .arg("hindcast")
        .args(["--reach", REACH, "--every-minutes", "60"])
        .args(["--from", &issued.to_rfc3339(), "--to", &issued.to_rfc3339()])
        .arg("--data-dir")
        .arg(s.dir.path())
        .env("REACHCAST_FORECAST_LOOKBACK_HOURS", "6")
        .env("REACHCAST_FORECAST_HORIZON_HOURS", "6")
        .env("REACHCAST_DEMO_ENABLED", "false")
        .output()
        .expect("run reachcast hindcast");
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        text.contains("1 runs (1 ok, 0 failed), as_received"),
        "{text}"
    );
    let id: i64 = text
        .split_whitespace()
        .nth(1)
        .and_then(|w| w.parse().ok())
        .expect("run id");
    let (stage4, _) = run_stage(&s, &json!(id)).await;
    assert_eq!(stage4, stage);
    s.app.stop().await;
}

#[tokio::test]
async fn a_bad_hindcast_is_refused_naming_the_field() {
    let s = setup().await;
    let now = Utc::now();
    let past = (now - Duration::hours(3)).to_rfc3339();
    let cases = [
        (
            json!({"from": past, "to": (now + Duration::hours(1)).to_rfc3339(), "every_minutes": 60}),
            "to",
        ),
        (
            json!({"from": now.to_rfc3339(), "to": past, "every_minutes": 60}),
            "from",
        ),
        (
            json!({"from": past, "to": past, "every_minutes": 1}),
            "every_minutes",
        ),
        (
            json!({"from": past, "to": past, "every_minutes": 60.5}),
            "every_minutes",
        ),
        (
            json!({"from": past, "to": past, "every_minutes": 60, "knowledge": "psychic"}),
            "knowledge",
        ),
        (
            json!({"from": past, "to": past, "every_minutes": 60, "extra": 1}),
            "extra",
        ),
    ];
    for (body, field) in cases {
        let p = problem(hindcast(&s, &body).await, 422).await;
        assert_eq!(p["field"], field, "{body}: {p}");
    }
    let res = s
        .app
        .post_json(
            &s.keys.gauge,
            &format!("/api/reaches/{REACH}/hindcasts"),
            &json!({}),
        )
        .await;
    let _ = body_of(res, 403).await;
    s.app.stop().await;
}

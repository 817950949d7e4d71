//! The forecast cycle end to end, through the real HTTP server on a real
//! SQLite file: readings in, scheduled and triggered runs, uploads,
//! staleness, failures, exceedances and validators.

use std::time::{Duration, Instant};

use crate::common::{
    ReachApp, TestApp, assert_success, bridge_reach, json_of, reach_gauge, spawn_app_with,
    test_config,
};
use chrono::{DateTime, Utc};
use serde_json::{Value, json};

const REACH: &str = "test-reach";
const GAUGE: &str = "test-gauge";

/// The invented test reach: a 10 km trapezoidal channel with a bridge at
/// mid-reach and two thresholds (`common::bridge_reach`).
fn reach_doc() -> Value {
    bridge_reach("Test reach (invented)", "Test Bridge", GAUGE)
}

/// `debounce_ms`: 0 lets new readings run the forecast at once; tests that
/// drive runs themselves with `wait=true` use a long debounce so no
/// background run lands between their steps.
async fn setup(stale_after_minutes: u64, debounce_ms: u64) -> ReachApp {
    let gauge = reach_gauge("Test gauge", REACH, "discharge", 19.0, 2.0);
    ReachApp::start(
        |c| {
            c.forecast.debounce_ms = debounce_ms;
            c.forecast.stale_after_minutes = stale_after_minutes;
        },
        (REACH, &reach_doc()),
        (GAUGE, &gauge),
    )
    .await
}

/// Discharge readings every 15 minutes over `hours` up to `end`, rising
/// linearly from `q0` to `q1`.
fn rising(end: DateTime<Utc>, hours: i64, q0: f64, q1: f64) -> Value {
    let n = hours * 4;
    let readings: Vec<Value> = (0..=n)
        .map(|k| {
            let t = end - chrono::Duration::minutes(15 * (n - k));
            let q = q0 + (q1 - q0) * k as f64 / n as f64;
            json!({"time": t.to_rfc3339(), "discharge": q, "quality": "good"})
        })
        .collect();
    json!({ "readings": readings })
}

async fn post_readings(s: &ReachApp, body: &Value) {
    assert_success(s.app.post_readings(&s.keys.gauge, GAUGE, body).await).await;
}

/// The latest forecast of the test reach: status and body.
async fn forecast(app: &TestApp) -> (u16, Value) {
    app.get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await
}

/// Waits (with a deadline) until the latest forecast satisfies `ok`.
async fn forecast_when(app: &TestApp, ok: impl Fn(&Value) -> bool) -> Value {
    let deadline = Instant::now() + Duration::from_secs(30);
    loop {
        let (status, body) = forecast(app).await;
        if status == 200 && ok(&body) {
            return body;
        }
        assert!(
            Instant::now() < deadline,
            "forecast never satisfied the condition: {body}"
        );
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
}

async fn run_now(s: &ReachApp) -> Value {
    json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await
}

async fn upload(s: &ReachApp, series: &[(DateTime<Utc>, f64)], reason: &str) -> i64 {
    let body = json!({
        "reason": reason,
        "series": series.iter().map(|(t, q)| json!({"time": t.to_rfc3339(), "discharge": q})).collect::<Vec<_>>(),
    });
    let res = s.app.post_inflow(&s.keys.forecaster, REACH, &body).await;
    json_of(res, 201).await["version"]
        .as_i64()
        .expect("version")
}

fn time(v: &Value) -> DateTime<Utc> {
    DateTime::parse_from_rfc3339(v.as_str().expect("time string"))
        .expect("RFC 3339")
        .with_timezone(&Utc)
}

/// Readings posted by a gauge lead, through the scheduler, to a forecast;
/// the reported first crossing of each threshold matches a crossing found
/// independently here by linear interpolation of the served stage
/// hydrograph from "now" on (the convention stated in the API docs).
#[tokio::test]
async fn readings_lead_to_a_forecast_with_consistent_crossings() {
    let s = setup(60, 0).await;
    let now = Utc::now();
    post_readings(&s, &rising(now, 6, 20.0, 180.0)).await;
    let f = forecast_when(&s.app, |f| {
        f["run"]["inflow"]["source_beyond_now"] == "persistence"
            && f["points"][0]["levels"][0]["exceeded"] == true
    })
    .await;
    assert!(
        f["caution"]
            .as_str()
            .is_some_and(|c| c.contains("not an official warning"))
    );
    let p = &f["points"][0];
    assert_eq!(p["name"], "Test Bridge");
    let served_now = time(&f["now"]);
    let times: Vec<DateTime<Utc>> = p["times"]
        .as_array()
        .expect("times")
        .iter()
        .map(time)
        .collect();
    let stage: Vec<f64> = p["stage"]
        .as_array()
        .expect("stage")
        .iter()
        .filter_map(Value::as_f64)
        .collect();
    assert_eq!(times.len(), stage.len());
    for t in p["levels"].as_array().expect("levels") {
        let z = t["elevation"].as_f64().expect("elevation");
        // Independent: first upward crossing at or after now, by linear
        // interpolation between samples.
        let mut expected: Option<DateTime<Utc>> = None;
        let at_now = {
            let i = times
                .iter()
                .position(|x| *x > served_now)
                .unwrap_or(times.len() - 1);
            let (t0, t1) = (times[i - 1], times[i]);
            let w =
                (served_now - t0).num_milliseconds() as f64 / (t1 - t0).num_milliseconds() as f64;
            stage[i - 1] + (stage[i] - stage[i - 1]) * w
        };
        if at_now > z {
            expected = Some(served_now);
        } else {
            for i in 1..times.len() {
                if times[i] <= served_now {
                    continue;
                }
                let (z0, z1) = (
                    if times[i - 1] < served_now {
                        at_now
                    } else {
                        stage[i - 1]
                    },
                    stage[i],
                );
                let t0 = if times[i - 1] < served_now {
                    served_now
                } else {
                    times[i - 1]
                };
                if z0 <= z && z1 > z {
                    let ms = (times[i] - t0).num_milliseconds() as f64 * (z - z0) / (z1 - z0);
                    expected = Some(t0 + chrono::Duration::milliseconds(ms.round() as i64));
                    break;
                }
            }
        }
        match (expected, t["first_above"].as_str()) {
            (Some(e), Some(_)) => {
                let got = time(&t["first_above"]);
                assert!(
                    (got - e).num_milliseconds().abs() <= 1000,
                    "{}: {got} vs {e}",
                    t["name"]
                );
            }
            (None, None) => {}
            (e, g) => panic!("{}: expected {e:?}, served {g:?}", t["name"]),
        }
    }
    // The bridge margins are consistent with the crest.
    let crest = p["crest_stage"].as_f64().expect("crest");
    let lc = p["low_chord_margin"].as_f64().expect("margin");
    assert!((lc - (19.5 - crest)).abs() < 1e-9);
    s.app.stop().await;
}

/// An upload supersedes the extrapolation and is superseded by a newer one;
/// withdrawing the newer brings the older back.
#[tokio::test]
async fn uploads_supersede_extrapolation_and_each_other() {
    let s = setup(60, 600_000).await;
    let now = Utc::now();
    post_readings(&s, &rising(now, 3, 20.0, 40.0)).await;
    let r = run_now(&s).await;
    assert_eq!(r["status"], "ok", "{r}");
    let (_, f0) = forecast(&s.app).await;
    assert_eq!(f0["run"]["inflow"]["source_beyond_now"], "persistence");
    // A triangular flood: 40 m³/s now, the peak 6 h ahead, back to 40 m³/s
    // at 18 h, then steady.
    let flood = |peak: f64| crate::common::triangular_flood(now, peak);
    let v1 = upload(&s, &flood(150.0), "first revision").await;
    assert_eq!(run_now(&s).await["status"], "ok");
    let (_, f1) = forecast(&s.app).await;
    assert_eq!(f1["run"]["inflow"]["source_beyond_now"], "upload");
    assert_eq!(f1["run"]["inflow"]["upload_version"], v1);
    let v2 = upload(&s, &flood(300.0), "second revision: bigger").await;
    assert_eq!(v2, v1 + 1);
    assert_eq!(run_now(&s).await["status"], "ok");
    let (_, f2) = forecast(&s.app).await;
    assert_eq!(f2["run"]["inflow"]["upload_version"], v2);
    let crest = |f: &Value| f["points"][0]["crest_stage"].as_f64().expect("crest");
    assert!(
        crest(&f2) > crest(&f1) + 0.2,
        "bigger flood, higher crest: {} vs {}",
        crest(&f2),
        crest(&f1)
    );
    assert!(crest(&f1) > crest(&f0));
    // Withdraw v2: v1 is in force again.
    let res = s
        .app
        .post(
            &s.keys.forecaster,
            &format!("/api/reaches/{REACH}/inflows/{v2}/withdraw"),
        )
        .await;
    assert_eq!(res.status(), 200);
    assert_eq!(run_now(&s).await["status"], "ok");
    let (_, f3) = forecast(&s.app).await;
    assert_eq!(f3["run"]["inflow"]["upload_version"], v1);
    assert!((crest(&f3) - crest(&f1)).abs() < 0.05);
    // Both uploads are kept for audit.
    let (_, list) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/inflows"))
        .await;
    let uploads = list["uploads"].as_array().expect("uploads");
    assert_eq!(uploads.len(), 2);
    assert_eq!(uploads[0]["withdrawn"], true);
    // A gauge key may not upload (role forecaster needed).
    let res = s
        .app
        .post_inflow(&s.keys.gauge, REACH, &json!({"reason": "x", "series": []}))
        .await;
    assert_eq!(res.status(), 403);
    s.app.stop().await;
}

/// A bad upload is refused whole, with every bad row listed.
#[tokio::test]
async fn bad_upload_lists_every_bad_row() {
    let s = setup(60, 600_000).await;
    let res = s
        .app
        .client
        .post(s.app.url(&format!("/api/reaches/{REACH}/inflows?reason=storm+update")))
        .bearer_auth(&s.keys.forecaster)
        .header("content-type", "text/csv")
        .body("time,discharge\n2026-03-01T00:00:00Z,10\n2026-03-01T01:00:00,20\n2026-03-01T02:00:00Z,-5\n")
        .send()
        .await
        .expect("upload");
    assert_eq!(res.status(), 422);
    assert_eq!(res.headers()["content-type"], "application/problem+json");
    let p: Value = res.json().await.expect("json");
    assert_eq!(p["field"], "time");
    assert_eq!(p["row"], 2);
    let errors = p["errors"].as_array().expect("errors");
    assert_eq!(errors.len(), 2);
    assert_eq!(errors[1]["row"], 3);
    assert_eq!(errors[1]["field"], "discharge");
    let (_, list) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/inflows"))
        .await;
    assert_eq!(
        list["uploads"].as_array().map(Vec::len),
        Some(0),
        "nothing stored"
    );
    s.app.stop().await;
}

/// A gauge silent longer than `forecast.stale_after_minutes` marks the
/// forecast stale; a fresh reading clears it.
#[tokio::test]
async fn silent_gauge_marks_the_forecast_stale() {
    let s = setup(60, 600_000).await;
    let now = Utc::now();
    post_readings(&s, &rising(now - chrono::Duration::hours(3), 4, 20.0, 60.0)).await;
    assert_eq!(run_now(&s).await["status"], "ok");
    let (_, f) = forecast(&s.app).await;
    assert_eq!(f["freshness"]["stale"], true, "{}", f["freshness"]);
    assert!(
        f["freshness"]["reasons"][0]
            .as_str()
            .is_some_and(|r| r.contains("silent"))
    );
    let (_, ex) = s.app.get_json("/api/exceedances").await;
    assert!(
        ex["items"]
            .as_array()
            .expect("items")
            .iter()
            .all(|i| i["stale"] == true)
    );
    post_readings(
        &s,
        &json!({"readings": [{"time": now.to_rfc3339(), "discharge": 60.0}]}),
    )
    .await;
    assert_eq!(run_now(&s).await["status"], "ok");
    let (_, f) = forecast(&s.app).await;
    assert_eq!(f["freshness"]["stale"], false, "{}", f["freshness"]);
    s.app.stop().await;
}

/// A run that fails leaves the last good forecast served, with the failure
/// reported beside it.
#[tokio::test]
async fn failed_run_keeps_the_last_good_forecast() {
    let s = setup(60, 600_000).await;
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 50.0)).await;
    let good = run_now(&s).await;
    assert_eq!(good["status"], "ok");
    // The gauge now reports stage but has no rating: the inflow cannot be
    // assembled and the run fails.
    let gauge = reach_gauge("Test gauge", REACH, "stage", 19.0, 2.0);
    let res = s.app.put_gauge(&s.keys.admin, GAUGE, &gauge).await;
    assert!(res.status().is_success());
    let bad = run_now(&s).await;
    assert_eq!(bad["status"], "failed");
    assert!(
        bad["error"].as_str().is_some_and(|e| e.contains("rating")),
        "{bad}"
    );
    let (status, f) = forecast(&s.app).await;
    assert_eq!(status, 200);
    let served = f["run"]["id"].as_i64().expect("run id");
    assert!(served >= good["run_id"].as_i64().expect("id"));
    assert!(served < bad["run_id"].as_i64().expect("id"));
    assert_eq!(f["last_failure"]["run_id"], bad["run_id"]);
    let (_, run) = s
        .app
        .get_json(&format!("/api/runs/{}", bad["run_id"]))
        .await;
    assert_eq!(run["status"], "failed");
    s.app.stop().await;
}

/// Validators: an unchanged answer costs a 304 (RFC 9110 §13.1.2
/// If-None-Match); a new run changes the exceedance answer.
#[tokio::test]
async fn etags_give_304_until_something_changes() {
    let s = setup(60, 600_000).await;
    post_readings(&s, &rising(Utc::now(), 6, 20.0, 180.0)).await;
    assert_eq!(run_now(&s).await["status"], "ok");
    let first = s.app.get("/api/exceedances").await;
    assert_eq!(first.status(), 200);
    let etag = first.headers()["etag"].to_str().expect("ascii").to_owned();
    let body: Value = first.json().await.expect("json");
    assert!(body["caution"].is_string());
    assert!(!body["items"].as_array().expect("items").is_empty());
    let again = s
        .app
        .get_with("/api/exceedances", "if-none-match", &etag)
        .await;
    assert_eq!(again.status(), 304);
    post_readings(
        &s,
        &json!({"readings": [{"time": Utc::now().to_rfc3339(), "discharge": 260.0}]}),
    )
    .await;
    assert_eq!(run_now(&s).await["status"], "ok");
    let changed = s
        .app
        .get_with("/api/exceedances", "if-none-match", &etag)
        .await;
    assert_eq!(changed.status(), 200);
    assert_ne!(changed.headers()["etag"].to_str().expect("ascii"), etag);

    let f = s.app.get(&format!("/api/reaches/{REACH}/forecast")).await;
    let fe = f.headers()["etag"].to_str().expect("ascii").to_owned();
    let f2 = s
        .app
        .get_with(
            &format!("/api/reaches/{REACH}/forecast"),
            "if-none-match",
            &fe,
        )
        .await;
    assert_eq!(f2.status(), 304);
    s.app.stop().await;
}

/// `units=us` converts lengths with 1 ft = 0.3048 m exactly (NIST SP 811)
/// and CSV carries the caution first.
#[tokio::test]
async fn us_units_and_csv() {
    let s = setup(60, 600_000).await;
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 80.0)).await;
    assert_eq!(run_now(&s).await["status"], "ok");
    let (_, si) = forecast(&s.app).await;
    let (_, us) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast?units=us"))
        .await;
    assert_eq!(us["units"]["stage"], "ft");
    let a = si["points"][0]["stage"][5].as_f64().expect("si");
    let b = us["points"][0]["stage"][5].as_f64().expect("us");
    assert!((b * 0.3048 - a).abs() < 1e-9, "{a} m vs {b} ft");
    let q = si["points"][0]["discharge"][5].as_f64().expect("si");
    let qu = us["points"][0]["discharge"][5].as_f64().expect("us");
    assert!((qu * 0.3048_f64.powi(3) - q).abs() < 1e-9);
    let csv = s
        .app
        .get(&format!("/api/reaches/{REACH}/forecast?format=csv"))
        .await
        .text()
        .await
        .expect("text");
    // One header vocabulary with `route --out`; the caution is a column
    // (RFC 4180: a rectangular table, CRLF line ends).
    // The ensemble (on by default) adds a column per percentile.
    assert!(
        csv.starts_with(
            "reach,run,point,chainage_m,time,stage_m,discharge_m3_per_s,\
             stage_p10_m,stage_p50_m,stage_p90_m,caution\r\n"
        ),
        "{}",
        &csv[..200.min(csv.len())]
    );
    let mut reader = csv::Reader::from_reader(csv.as_bytes());
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.expect("row")).collect();
    assert!(!rows.is_empty());
    assert!(
        rows.iter()
            .all(|r| r.len() == 11 && r[10].starts_with("Advisory model output"))
    );
    // Percentiles are ordered (any quantile definition is monotone in p).
    for r in &rows {
        let p: Vec<f64> = (7..10).map(|k| r[k].parse().expect("percentile")).collect();
        assert!(p[0] <= p[1] && p[1] <= p[2], "{r:?}");
    }
    let (status, bad) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast?units=imperial"))
        .await;
    // Bad query parameters are 400 everywhere (README, "Errors").
    assert_eq!(status, 400);
    assert_eq!(bad["field"], "units");
    s.app.stop().await;
}

/// A reach description with a bad field is refused naming it.
#[tokio::test]
async fn bad_reach_names_the_field() {
    let s = setup(60, 600_000).await;
    let mut doc = reach_doc();
    doc["points"][0]["thresholds"][1]["elevation"] = json!("high");
    let res = s.app.put_reach(&s.keys.admin, "other", &doc).await;
    assert_eq!(res.status(), 422);
    let p: Value = res.json().await.expect("json");
    assert_eq!(p["field"], "points[0].thresholds[1].elevation");
    // Editing a reach keeps earlier runs readable.
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 50.0)).await;
    let r = run_now(&s).await;
    let mut doc = reach_doc();
    doc["points"][0]["thresholds"][0]["name"] = json!("renamed");
    let res = s.app.put_reach(&s.keys.admin, REACH, &doc).await;
    assert_eq!(res.status(), 200);
    let (_, run) = s.app.get_json(&format!("/api/runs/{}", r["run_id"])).await;
    assert_eq!(run["reach_version"], 1);
    assert_eq!(run["results"]["points"][0]["levels"][0]["name"], "low");
    s.app.stop().await;
}

/// A reach's time zone is checked against the IANA time-zone database on
/// the server, not only in the browser: an invented zone is a 422 problem
/// naming the field; `Etc/GMT-1` (a zone of the database's `etcetera` file,
/// from memory) is stored as given.
#[tokio::test]
async fn reach_time_zone_must_be_a_known_zone() {
    let s = setup(60, 600_000).await;
    let put = async |zone: &str| {
        let mut doc = reach_doc();
        doc["service"]["time_zone"] = json!(zone);
        s.app.put_reach(&s.keys.admin, "other", &doc).await
    };
    let res = put("Mars/Olympus_Mons").await;
    assert_eq!(res.status(), 422);
    // RFC 9457 §3: the problem document's media type.
    assert_eq!(res.headers()["content-type"], "application/problem+json");
    let p: Value = res.json().await.expect("json");
    assert_eq!(p["field"], "service.time_zone");
    assert!(
        p["detail"]
            .as_str()
            .unwrap_or_default()
            .contains("Mars/Olympus_Mons"),
        "{p}"
    );
    let (status, _) = s.app.get_json("/api/reaches/other").await;
    assert_eq!(status, 404, "nothing stored");

    let res = put("Etc/GMT-1").await;
    assert_eq!(res.status(), 201);
    let (_, reach) = s.app.get_json("/api/reaches/other").await;
    assert_eq!(
        reach["document"]["service"]["time_zone"], "Etc/GMT-1",
        "{reach}"
    );
    s.app.stop().await;
}

/// Reaches can come from files at start: a new version only when a file
/// changed, and a bad file stops the start naming the file and the field.
#[tokio::test]
async fn reaches_load_from_a_folder_at_start() {
    let data = tempfile::tempdir().expect("data dir");
    let reaches = tempfile::tempdir().expect("reach dir");
    let file = reaches.path().join("from-file.json");
    std::fs::write(&file, reach_doc().to_string()).expect("write reach");
    let config = || {
        let mut c = test_config(data.path());
        c.forecast.reach_dir = reaches.path().to_owned();
        c.forecast.debounce_ms = 600_000;
        c
    };
    let version = |v: &Value| {
        v["reaches"]
            .as_array()
            .and_then(|r| r.iter().find(|r| r["id"] == "from-file"))
            .map(|r| r["version"].clone())
    };
    let app = spawn_app_with(config()).await;
    let (_, list) = app.get_json("/api/reaches").await;
    assert_eq!(version(&list), Some(json!(1)));
    app.stop().await;
    // Unchanged file: no new version on restart.
    let app = spawn_app_with(config()).await;
    let (_, list) = app.get_json("/api/reaches").await;
    assert_eq!(version(&list), Some(json!(1)));
    app.stop().await;
    // Changed file: a new version.
    let mut doc = reach_doc();
    doc["points"][0]["thresholds"][0]["elevation"] = json!(16.2);
    std::fs::write(&file, doc.to_string()).expect("write reach");
    let app = spawn_app_with(config()).await;
    let (_, list) = app.get_json("/api/reaches").await;
    assert_eq!(version(&list), Some(json!(2)));
    app.stop().await;
    // A bad file stops the start.
    doc["points"][0]["chainage"] = json!(99_999);
    std::fs::write(&file, doc.to_string()).expect("write reach");
    let err = reachcast::app::Application::build(config())
        .await
        .err()
        .expect("start refused");
    let msg = format!("{err:#}");
    assert!(
        msg.contains("from-file.json") && msg.contains("points[0].chainage"),
        "{msg}"
    );
}

/// Every time in every JSON answer has one shape, RFC 3339 UTC with
/// milliseconds and `Z` (README, "Times"; RFC 3339 §5.6 allows it). The
/// first release wrote four shapes, including nanoseconds and `+00:00`.
#[tokio::test]
async fn every_json_time_has_one_shape() {
    let s = setup(60, 600_000).await;
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 80.0)).await;
    let run = run_now(&s).await;
    assert_eq!(run["status"], "ok");
    let id = run["run_id"].as_i64().expect("run id");
    let paths = [
        format!("/api/reaches/{REACH}/forecast"),
        format!("/api/reaches/{REACH}/runs"),
        format!("/api/runs/{id}"),
        format!("/api/reaches/{REACH}"),
        "/api/reaches".to_owned(),
        "/api/exceedances".to_owned(),
    ];
    let mut seen = 0;
    for path in &paths {
        let (status, doc) = s.app.get_json(path).await;
        assert_eq!(status, 200, "{path}");
        seen += check_times(&doc, path);
    }
    assert!(seen > 100, "only {seen} times checked");
    s.app.stop().await;
}

/// Counts the strings that look like a time and asserts each has the one
/// shape `YYYY-MM-DDThh:mm:ss.sssZ`.
fn check_times(v: &serde_json::Value, path: &str) -> usize {
    match v {
        serde_json::Value::String(t)
            if t.len() >= 19
                && t.as_bytes()[10] == b'T'
                && t[..4].bytes().all(|b| b.is_ascii_digit()) =>
        {
            let b = t.as_bytes();
            let shape = t.len() == 24
                && b[4] == b'-'
                && b[7] == b'-'
                && b[13] == b':'
                && b[16] == b':'
                && b[19] == b'.'
                && b[23] == b'Z'
                && chrono::DateTime::parse_from_rfc3339(t).is_ok();
            assert!(
                shape,
                "{path}: time `{t}` is not RFC 3339 UTC with milliseconds and Z"
            );
            1
        }
        serde_json::Value::Array(a) => a.iter().map(|x| check_times(x, path)).sum(),
        serde_json::Value::Object(o) => o.values().map(|x| check_times(x, path)).sum(),
        _ => 0,
    }
}

/// Every write is audited (DEVELOPERS.md, invariants), the service's own
/// included: each finished run leaves one `forecast.run` entry by the
/// system actor, naming the run and its outcome.
#[tokio::test]
async fn every_run_is_in_the_audit_log() {
    let s = setup(60, 600_000).await;
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 80.0)).await;
    let run = run_now(&s).await;
    let id = run["run_id"].as_i64().expect("run id");
    let log = s.app.store.audit_log(200).await.expect("audit log");
    let entry = log
        .iter()
        .find(|e| e.action == "forecast.run" && e.summary["run_id"] == id)
        .unwrap_or_else(|| panic!("no audit entry for run {id}: {log:#?}"));
    assert_eq!(entry.actor, "system:forecast");
    assert_eq!(entry.key_id, None);
    assert_eq!(entry.target, REACH);
    assert_eq!(entry.summary["status"], run["status"]);
    s.app.stop().await;
}

/// RFC 9110 §12.5.5: an answer chosen by the `Accept` header says so in
/// `Vary`, or a shared cache could hand CSV to a client that asked for
/// JSON.
#[tokio::test]
async fn forecast_answers_vary_on_accept() {
    let s = setup(60, 600_000).await;
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 80.0)).await;
    assert_eq!(run_now(&s).await["status"], "ok");
    for accept in ["application/json", "text/csv"] {
        let res = s
            .app
            .get_with(&format!("/api/reaches/{REACH}/forecast"), "accept", accept)
            .await;
        assert_eq!(res.status(), 200);
        let vary = res
            .headers()
            .get_all("vary")
            .iter()
            .filter_map(|v| v.to_str().ok())
            .collect::<Vec<_>>()
            .join(",");
        assert!(
            vary.to_ascii_lowercase().contains("accept"),
            "{accept}: Vary `{vary}`"
        );
        let ctype = res.headers()["content-type"]
            .to_str()
            .unwrap_or("")
            .to_owned();
        assert!(ctype.starts_with(if accept == "text/csv" {
            "text/csv"
        } else {
            "application/json"
        }));
    }
    s.app.stop().await;
}

/// A crest is an instant of the model's own output: the first release
/// reported it 0.1–0.8 ms before its sample (so CAP text said 13:50 for
/// 13:51). Every crest time on the board is now one of the run's output
/// times, or the instant the run finished when the water is highest then.
#[tokio::test]
async fn crest_times_are_output_instants() {
    let s = setup(60, 600_000).await;
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 80.0)).await;
    let run = run_now(&s).await;
    let id = run["run_id"].as_i64().expect("run id");
    let (_, detail) = s.app.get_json(&format!("/api/runs/{id}")).await;
    let (_, board) = s.app.get_json("/api/exceedances").await;
    let items = board["items"].as_array().expect("items");
    assert!(!items.is_empty(), "the test reach has thresholds");
    for item in items {
        let point = detail["results"]["points"]
            .as_array()
            .and_then(|ps| ps.iter().find(|p| p["name"] == item["point"]))
            .expect("point of the item");
        let times = point["times"].as_array().expect("times");
        let crest = &item["crest_time"];
        assert!(
            times.contains(crest) || *crest == item["run_finished"],
            "crest {crest} is not an output instant of run {id}"
        );
    }
    s.app.stop().await;
}

/// The exceedance `ETag` changes only when the meaning does (README,
/// "Exceedances"): a second run over the same readings and the same upload
/// says the same, so a poller holding the first `ETag` gets a 304 although
/// the run id in the body moved on.
#[tokio::test]
async fn a_run_that_says_the_same_keeps_the_exceedance_etag() {
    let s = setup(60, 600_000).await;
    let now = Utc::now();
    let base = DateTime::from_timestamp(now.timestamp() / 60 * 60, 0).expect("minute");
    let h = chrono::Duration::hours;
    post_readings(&s, &rising(base, 2, 20.0, 20.0)).await;
    // A flood wave whose crest lies well ahead, then back to base flow.
    let series = [
        (base - h(1), 20.0),
        (base + h(3), 150.0),
        (base + h(9), 20.0),
        (base + h(60), 20.0),
    ];
    upload(&s, &series, "wave ahead").await;
    let first = run_now(&s).await["run_id"].clone();
    let (etag1, body1) = exceedance_board(&s).await;
    let second = run_now(&s).await["run_id"].clone();
    let (etag2, body2) = exceedance_board(&s).await;
    assert_ne!(first, second);
    assert_eq!(body1["items"][0]["run_id"], first);
    assert_eq!(body2["items"][0]["run_id"], second);
    let exceeded = body2["items"]
        .as_array()
        .expect("items")
        .iter()
        .filter(|i| i["exceeded"] == true)
        .count();
    assert!(exceeded > 0, "the wave exceeds a threshold: {body2}");
    assert!(etag1.starts_with("W/"), "{etag1}");
    assert_eq!(etag1, etag2, "same meaning, same validator");
    let res = s
        .app
        .get_with("/api/exceedances", "if-none-match", &etag1)
        .await;
    assert_eq!(res.status(), 304);
    s.app.stop().await;
}

/// The exceedance board and its `ETag`.
async fn exceedance_board(s: &ReachApp) -> (String, Value) {
    let res = s.app.get("/api/exceedances").await;
    let etag = res.headers()["etag"].to_str().expect("etag").to_owned();
    (etag, res.json().await.expect("json"))
}

/// Alerting clients can ask for part of the board: `reach=`, `exceeded=`
/// and `min_severity=` (CAP 1.2 §3.2.2 order: Minor < Moderate < Severe <
/// Extreme); each filtered answer is exactly the matching part of the whole
/// board, and a bad filter is a 400 or 404 problem naming it.
#[tokio::test]
async fn exceedance_filters_select_part_of_the_board() {
    let s = setup(60, 600_000).await;
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 80.0)).await;
    assert_eq!(run_now(&s).await["status"], "ok");
    let (_, all) = exceedance_board(&s).await;
    let all = all["items"].as_array().expect("items").clone();
    assert!(!all.is_empty());
    let rank = |v: &Value| {
        ["minor", "moderate", "severe", "extreme"]
            .iter()
            .position(|s| v == s)
    };
    type Keep<'a> = Box<dyn Fn(&Value) -> bool + 'a>;
    let cases: [(&str, Keep); 4] = [
        (
            &format!("reach={REACH}"),
            Box::new(|i: &Value| i["reach"] == REACH),
        ),
        ("exceeded=true", Box::new(|i: &Value| i["exceeded"] == true)),
        (
            "exceeded=false",
            Box::new(|i: &Value| i["exceeded"] == false),
        ),
        (
            "min_severity=moderate",
            Box::new(move |i: &Value| rank(&i["severity"]) >= Some(1)),
        ),
    ];
    for (query, keep) in &cases {
        let (status, doc) = s.app.get_json(&format!("/api/exceedances?{query}")).await;
        assert_eq!(status, 200, "{query}");
        let want: Vec<&Value> = all.iter().filter(|i| keep(i)).collect();
        let got: Vec<&Value> = doc["items"].as_array().expect("items").iter().collect();
        assert_eq!(got, want, "{query}");
    }
    let (status, p) = s.app.get_json("/api/exceedances?min_severity=dire").await;
    assert_eq!((status, p["field"].as_str()), (400, Some("min_severity")));
    let (status, p) = s.app.get_json("/api/exceedances?reach=nowhere").await;
    assert_eq!((status, p["field"].as_str()), (404, Some("reach")));
    s.app.stop().await;
}

/// Numerical settings are checked against each other and against the run
/// budgets when the reach is stored: a largest step below the solver's
/// first step runs (it used to fail every run), one below its smallest
/// step and an output interval that would store millions of values are
/// refused naming the field and the budget.
#[tokio::test]
async fn costly_or_unrunnable_numbers_are_refused_at_put() {
    let s = setup(60, 600_000).await;
    let mut doc = reach_doc();
    doc["routing"]["dt_max_s"] = json!(30.0);
    assert_eq!(
        s.app.put_reach(&s.keys.admin, REACH, &doc).await.status(),
        200
    );
    post_readings(&s, &rising(Utc::now(), 3, 20.0, 50.0)).await;
    let r = run_now(&s).await;
    assert_eq!(r["status"], "ok", "{r}");

    doc["routing"]["dt_max_s"] = json!(0.1);
    let p = crate::common::problem(s.app.put_reach(&s.keys.admin, REACH, &doc).await, 422).await;
    assert_eq!(p["field"], "routing.dt_max_s");

    let mut doc = reach_doc();
    doc["routing"]["output_interval_s"] = json!(1.0);
    let p = crate::common::problem(s.app.put_reach(&s.keys.admin, REACH, &doc).await, 422).await;
    assert_eq!(p["field"], "routing.output_interval_s");
    assert_eq!(p["budget"], "forecast.max_output_values");
    s.app.stop().await;
}

/// The document promises a query `reason` of 1 to 500 characters; a JSON
/// upload with a `reason` query outside that is refused naming it, as a
/// CSV upload is (found by property-based fuzzing from the OpenAPI
/// document: it used to be accepted and ignored).
#[tokio::test]
async fn an_upload_reason_in_the_query_is_checked_for_json_bodies_too() {
    let s = setup(60, 600_000).await;
    let now = Utc::now();
    let body = json!({"reason": "storm update", "series": [
        {"time": now.to_rfc3339(), "discharge": 25.0},
        {"time": (now + chrono::Duration::hours(1)).to_rfc3339(), "discharge": 30.0}]});
    for reason in [String::new(), "x".repeat(501)] {
        let res = reqwest::Client::new()
            .post(s.app.url(&format!("/api/reaches/{REACH}/inflows")))
            .query(&[("reason", reason.as_str())])
            .bearer_auth(&s.keys.forecaster)
            .json(&body)
            .send()
            .await
            .expect("post");
        let p = crate::common::problem(res, 422).await;
        assert_eq!(p["field"], "reason");
    }
    s.app.stop().await;
}

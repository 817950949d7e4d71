//! The API behind the dashboard's forecaster panel: the upload in force as
//! CSV (round trip bit for bit), the dry-run preview of the join with the
//! observed inflow, the in-force mark and key names in the uploads list,
//! and `GET /api/keys/self`. Real server, real SQLite file, over HTTP.

use chrono::{DateTime, SecondsFormat, Utc};
use serde_json::{Value, json};

use crate::common::{ReachApp, TestApp, body_of, bridge_reach, json_of, problem, reach_gauge};

const REACH: &str = "tansy-beck";
const GAUGE: &str = "tansy-upper";
const KEY_NAME: &str = "Orla Penhallow (invented forecaster)";

async fn start() -> (ReachApp, String) {
    let s = ReachApp::start(
        |c| c.forecast.debounce_ms = 0,
        (
            REACH,
            &bridge_reach("Tansy Beck (invented)", "Mill Bridge", GAUGE),
        ),
        (
            GAUGE,
            &reach_gauge("Tansy upper gauge", REACH, "both", 10.0, 5.0),
        ),
    )
    .await;
    let key = reachcast::auth::generate_key().expect("random key");
    s.app
        .store
        .create_key(&key, KEY_NAME, reachcast::auth::Role::Forecaster, &[])
        .await
        .expect("create key");
    (s, key.token)
}

fn text(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Millis, true)
}

async fn post_csv(app: &TestApp, key: &str, query: &str, csv: &str) -> reqwest::Response {
    app.client
        .post(app.url(&format!("/api/reaches/{REACH}/inflows?{query}")))
        .bearer_auth(key)
        .header("content-type", "text/csv")
        .body(csv.to_owned())
        .send()
        .await
        .expect("upload")
}

async fn download(app: &TestApp, version: &str) -> String {
    let res = app
        .get_with(
            &format!("/api/reaches/{REACH}/inflows/{version}"),
            "accept",
            "text/csv",
        )
        .await;
    assert!(
        res.headers()["content-type"]
            .to_str()
            .unwrap_or_default()
            .starts_with("text/csv"),
        "{:?}",
        res.headers()
    );
    body_of(res, 200).await
}

/// (time text, discharge bits) of each data line of a `time,discharge` CSV,
/// read with Rust's own `f64` parser (the independent reading).
fn values(csv: &str) -> Vec<(DateTime<Utc>, u64)> {
    csv.lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| {
            let (t, q) = l.split_once(',').expect("two columns");
            let t = DateTime::parse_from_rfc3339(t).expect("time").to_utc();
            (t, q.trim().parse::<f64>().expect("number").to_bits())
        })
        .collect()
}

#[tokio::test]
async fn the_upload_in_force_downloads_as_csv_that_round_trips_bit_for_bit() {
    let (s, key) = start().await;
    let t0 = Utc::now();
    // Values with no short binary form: the download must give the same bits.
    let sent = format!(
        "time,discharge\n{},0.30000000000000004\n{},33.333333333333336\n{},1e-7\n{},123456.78901234567\n",
        text(t0),
        text(t0 + chrono::Duration::hours(1)),
        text(t0 + chrono::Duration::hours(2)),
        text(t0 + chrono::Duration::hours(3)),
    );
    let v1 = json_of(post_csv(&s.app, &key, "reason=first", &sent).await, 201).await;
    assert_eq!(v1["version"], 1);
    let got = download(&s.app, "current").await;
    assert_eq!(values(&got), values(&sent), "download:\n{got}");
    // Re-upload the download: a new version with the same bits again.
    let v2 = json_of(post_csv(&s.app, &key, "reason=again", &got).await, 201).await;
    assert_eq!(v2["version"], 2);
    let again = download(&s.app, "2").await;
    assert_eq!(values(&again), values(&sent));
    assert_eq!(again, got, "the same text both times");
    // JSON form of an older version, and the problems for bad versions.
    let (status, one) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/inflows/1"))
        .await;
    assert_eq!(status, 200, "{one}");
    assert_eq!(one["upload"]["version"], 1);
    assert_eq!(one["upload"]["in_force"], false);
    assert_eq!(one["series"].as_array().map(Vec::len), Some(4));
    let p = problem(
        s.app.get(&format!("/api/reaches/{REACH}/inflows/99")).await,
        404,
    )
    .await;
    assert_eq!(p["field"], "version", "{p}");
    let res = s
        .app
        .get(&format!("/api/reaches/{REACH}/inflows/newest"))
        .await;
    assert!(res.status().is_client_error());
    let p: Value = res.json().await.expect("problem");
    assert_eq!(p["field"], "version", "{p}");
    s.app.stop().await;
}

#[tokio::test]
async fn the_list_marks_the_upload_in_force_and_names_the_key() {
    let (s, key) = start().await;
    let t0 = Utc::now();
    let csv = format!(
        "time,discharge\n{},10\n{},20\n",
        text(t0),
        text(t0 + chrono::Duration::hours(6))
    );
    for reason in ["one", "two", "three"] {
        body_of(
            post_csv(&s.app, &key, &format!("reason={reason}"), &csv).await,
            201,
        )
        .await;
    }
    // Withdraw the newest: the forecast then uses v2 (the newest not
    // withdrawn, `Store::newest_upload`), and the list must say so.
    let res = s
        .app
        .post(&key, &format!("/api/reaches/{REACH}/inflows/3/withdraw"))
        .await;
    body_of(res, 200).await;
    let (_, list) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/inflows"))
        .await;
    let uploads = list["uploads"].as_array().expect("uploads");
    let in_force: Vec<&Value> = uploads.iter().filter(|u| u["in_force"] == true).collect();
    assert_eq!(in_force.len(), 1, "{list}");
    assert_eq!(in_force[0]["version"], 2);
    assert!(
        uploads.iter().all(|u| u["uploaded_by_name"] == KEY_NAME),
        "{list}"
    );
    // The run agrees: it uses the version the list marks.
    let run = json_of(s.app.run_and_wait(&key, REACH).await, 200).await;
    let (_, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    assert_eq!(run["status"], "ok", "{run}");
    assert_eq!(f["run"]["inflow"]["upload_version"], 2);
    s.app.stop().await;
}

/// Readings every 15 min for 3 h up to `t_end`, discharge 20 + 10 k.
async fn post_readings(s: &ReachApp, t_end: DateTime<Utc>) {
    let readings: Vec<Value> = (0..=12_i32)
        .map(|k| {
            let t = t_end - chrono::Duration::minutes(15 * i64::from(12 - k));
            json!({"time": text(t), "stage": 15.0 + 0.05 * f64::from(k),
                   "discharge": 20.0 + 10.0 * f64::from(k), "quality": "good"})
        })
        .collect();
    let res = s
        .app
        .post_readings(&s.keys.gauge, GAUGE, &json!({ "readings": readings }))
        .await;
    body_of(res, 200).await;
}

#[tokio::test]
async fn a_dry_run_reports_the_join_and_stores_nothing() {
    let (s, key) = start().await;
    let last = DateTime::from_timestamp(Utc::now().timestamp() - 60, 0).expect("time");
    post_readings(&s, last).await;
    // An upload covering the last reading: 100 m³/s 30 min before it,
    // 200 m³/s 30 min after. By hand (linear interpolation halfway):
    // 150 at the last reading, whose discharge is 20 + 10 × 12 = 140.
    let csv = format!(
        "time,discharge\n{},100\n{},200\n{},180\n",
        text(last - chrono::Duration::minutes(30)),
        text(last + chrono::Duration::minutes(30)),
        text(last + chrono::Duration::hours(6)),
    );
    let r = json_of(
        post_csv(&s.app, &key, "reason=preview&dry_run=true", &csv).await,
        200,
    )
    .await;
    let j = &r["join"];
    assert_eq!(r["stored"], false);
    assert_eq!(j["used"], true, "{r}");
    assert_eq!(j["last_observed"]["time"], text(last));
    assert_eq!(j["last_observed"]["discharge"], 140.0);
    assert_eq!(j["upload_at_join"], 150.0);
    assert_eq!(j["jump"], 10.0);
    let rel = j["jump_relative"].as_f64().expect("relative");
    assert!((rel - 10.0 / 150.0).abs() < 1e-12, "{rel}");
    assert_eq!(j["observed"].as_array().map(Vec::len), Some(13));

    // An upload starting 1 h after the last reading meets it with its
    // first sample: 300 against 140, a jump of 160 = 53 % of 300, above
    // the run's 25 % warning.
    let late = format!(
        "time,discharge\n{},300\n{},250\n",
        text(last + chrono::Duration::hours(1)),
        text(last + chrono::Duration::hours(4)),
    );
    let r = json_of(
        post_csv(&s.app, &key, "reason=late&dry_run=true", &late).await,
        200,
    )
    .await;
    let j = &r["join"];
    assert_eq!(j["upload_at_join"], 300.0, "{r}");
    assert_eq!(j["jump"], 160.0);
    assert!((j["jump_relative"].as_f64().expect("relative") - 160.0 / 300.0).abs() < 1e-12);
    assert!(
        j["warnings"].to_string().contains("not blended"),
        "the run's own mismatch warning: {j}"
    );
    // A bad row is refused as it would be without dry_run.
    let bad = format!("time,discharge\n{},x\n", text(last));
    let p = problem(
        post_csv(&s.app, &key, "reason=bad&dry_run=true", &bad).await,
        422,
    )
    .await;
    assert_eq!(p["field"], "discharge");

    // Nothing was stored: no upload, and no upload in the audit log.
    let (_, list) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/inflows"))
        .await;
    assert_eq!(list["uploads"], json!([]), "{list}");
    s.app.stop().await;
}

#[tokio::test]
async fn keys_self_names_the_key_or_refuses_it() {
    let (s, key) = start().await;
    let (status, me) = {
        let res = s.app.get_as(&key, "/api/keys/self").await;
        let status = res.status().as_u16();
        (status, res.json::<Value>().await.expect("json"))
    };
    assert_eq!(status, 200, "{me}");
    assert_eq!(me["name"], KEY_NAME);
    assert_eq!(me["role"], "forecaster");
    let p = problem(s.app.get("/api/keys/self").await, 401).await;
    assert_eq!(p["type"], "/problems/unauthorized");
    // The right id with a wrong secret (last hex digit changed).
    let flip = if key.ends_with('0') { '1' } else { '0' };
    let forged = format!("{}{flip}", &key[..key.len() - 1]);
    let p = problem(s.app.get_as(&forged, "/api/keys/self").await, 401).await;
    assert!(
        p["detail"].as_str().unwrap_or_default().contains("unknown"),
        "{p}"
    );
    s.app.stop().await;
}

/// The panel sends a pasted JSON list as `{"reason": …, "series": <the
/// text>}` with nothing added after the first line, so a syntax error's
/// line in the problem is the line of the box (the JS side is checked in
/// tests/js/panel.test.mjs).
#[tokio::test]
async fn a_json_syntax_error_names_the_line_as_the_box_counts_it() {
    let (s, key) = start().await;
    // Line 3 of the box lacks the comma after the discharge value.
    let boxed = "[\n {\"time\": \"2026-03-14T06:00:00Z\", \"discharge\": 1},\n {\"time\": \"2026-03-14T07:00:00Z\", \"discharge\": 2 \"x\": 1}\n]";
    let body = format!("{{\"reason\": \"storm\", \"series\": {boxed}}}");
    let res = s
        .app
        .client
        .post(
            s.app
                .url(&format!("/api/reaches/{REACH}/inflows?dry_run=true")),
        )
        .bearer_auth(&key)
        .header("content-type", "application/json")
        .body(body)
        .send()
        .await
        .expect("upload");
    let p = problem(res, 400).await;
    assert_eq!(p["type"], "/problems/malformed-json", "{p}");
    assert_eq!(p["line"], 3, "{p}");
    s.app.stop().await;
}

//! Storage and ingest through a real HTTP server on a real SQLite file:
//! readings (JSON and CSV), idempotency, revisions, the rate-of-rise flag,
//! paging, keys and roles, problem documents.

use crate::common::{
    TestApp, assert_wire_time, gauge_body, make_key, open_store, problem, spawn_app,
    spawn_app_with, test_config,
};
use serde_json::{Value, json};

/// An app with one gauge `alder-weir`, an admin key, a gauge key for it and
/// a forecaster key.
struct Fixture {
    app: TestApp,
    admin: String,
    logger: String,
    forecaster: String,
    _dir: tempfile::TempDir,
}

async fn fixture() -> Fixture {
    let dir = tempfile::tempdir().expect("temp dir");
    let admin = make_key(dir.path(), "admin", &[]).await;
    let logger = make_key(dir.path(), "gauge", &["alder-weir"]).await;
    let forecaster = make_key(dir.path(), "forecaster", &[]).await;
    let app = spawn_app(dir.path()).await;
    let res = app
        .put_gauge(&admin, "alder-weir", &gauge_body("Alder Weir"))
        .await;
    assert_eq!(res.status(), 201);
    Fixture {
        app,
        admin,
        logger,
        forecaster,
        _dir: dir,
    }
}

impl Fixture {
    /// Posts a JSON batch for `alder-weir` with the gauge key; the report.
    async fn post(&self, body: &Value) -> Value {
        self.app
            .post_readings(&self.logger, "alder-weir", body)
            .await
            .json()
            .await
            .expect("json")
    }

    /// `member` and `for_forecast` of every reading of `alder-weir`,
    /// oldest first.
    async fn flags(&self, member: &str) -> Vec<(String, bool)> {
        let (_, page) = self
            .app
            .get_json("/api/gauges/alder-weir/readings?order=oldest")
            .await;
        page["readings"]
            .as_array()
            .expect("readings")
            .iter()
            .map(|r| {
                (
                    r[member].as_str().expect("member").to_owned(),
                    r["for_forecast"].as_bool().expect("bool"),
                )
            })
            .collect()
    }

    /// `POST …/readings/{time}/confirm` of `alder-weir` with `key`.
    async fn confirm(&self, key: &str, time: &str) -> reqwest::Response {
        self.app
            .post(
                key,
                &format!("/api/gauges/alder-weir/readings/{time}/confirm"),
            )
            .await
    }
}

fn owned(pairs: &[(&str, bool)]) -> Vec<(String, bool)> {
    pairs.iter().map(|(s, b)| ((*s).to_owned(), *b)).collect()
}

/// The JSON report of a batch.
async fn report(res: reqwest::Response) -> Value {
    res.json().await.expect("json")
}

fn reading(time: &str, stage: f64) -> Value {
    json!({"time": time, "stage": stage, "quality": "good"})
}

#[tokio::test]
async fn json_batch_is_per_row_with_a_full_report() {
    let f = fixture().await;
    let body = json!({"readings": [
        {"time": "2025-03-01T04:15:00+01:00", "stage": 1.23, "discharge": null, "quality": "good"},
        {"time": "2025-03-01T03:30:00Z", "stage": 1.25, "discharge": 12.5},
        {"time": "2025-03-01T03:45:00", "stage": 1.3},
        {"time": "2025-03-01T04:00:00Z", "stage": "high"},
        {"time": "2025-03-01T04:15:00Z", "stage": 1.3, "colour": "blue"},
        {"time": "2025-03-01T04:30:00Z", "stage": 1.3, "quality": "great"},
    ]});
    let res = f.app.post_readings(&f.logger, "alder-weir", &body).await;
    assert_eq!(res.status(), 200);
    let r: Value = res.json().await.expect("json");
    assert_eq!(r["received"], 6);
    assert_eq!(r["accepted"], 2);
    assert_eq!(r["rejected"], 4);
    let errors = r["errors"].as_array().expect("errors");
    let rows: Vec<(u64, &str)> = errors
        .iter()
        .map(|e| {
            (
                e["row"].as_u64().expect("row"),
                e["field"].as_str().expect("field"),
            )
        })
        .collect();
    assert_eq!(
        rows,
        [(3, "time"), (4, "stage"), (5, "colour"), (6, "quality")]
    );
    assert!(
        errors[0]["message"]
            .as_str()
            .expect("message")
            .contains("no UTC offset")
    );
    // The accepted rows are stored; default quality is "unchecked".
    let (_, page) = f
        .app
        .get_json("/api/gauges/alder-weir/readings?order=oldest")
        .await;
    assert_eq!(page["count"], 2);
    assert_eq!(page["readings"][0]["time"], "2025-03-01T03:15:00.000Z");
    assert_eq!(page["readings"][1]["quality"], "unchecked");
    assert_eq!(page["readings"][1]["discharge"], 12.5);
    f.app.stop().await;
}

#[tokio::test]
async fn identical_resend_is_a_duplicate_and_changed_value_a_revision() {
    let f = fixture().await;
    let batch = json!({"readings": [reading("2025-03-01T00:00:00Z", 1.0), reading("2025-03-01T00:15:00Z", 1.1)]});
    let first = report(f.app.post_readings(&f.logger, "alder-weir", &batch).await).await;
    assert_eq!(
        (first["accepted"].as_u64(), first["duplicate"].as_u64()),
        (Some(2), Some(0))
    );
    let again = report(f.app.post_readings(&f.logger, "alder-weir", &batch).await).await;
    assert_eq!(
        (again["accepted"].as_u64(), again["duplicate"].as_u64()),
        (Some(0), Some(2))
    );
    // Same time, written with another offset: still the same instant.
    let same_instant = json!({"readings": [reading("2025-03-01T01:15:00+01:00", 1.1)]});
    let r = report(
        f.app
            .post_readings(&f.logger, "alder-weir", &same_instant)
            .await,
    )
    .await;
    assert_eq!(r["duplicate"], 1);

    let changed = json!({"readings": [reading("2025-03-01T00:15:00Z", 1.15)]});
    let r = report(f.app.post_readings(&f.admin, "alder-weir", &changed).await).await;
    assert_eq!(
        (r["revised"].as_u64(), r["accepted"].as_u64()),
        (Some(1), Some(0))
    );
    let (_, page) = f.app.get_json("/api/gauges/alder-weir/readings").await;
    assert_eq!(page["count"], 2, "not stored twice");
    assert_eq!(page["readings"][0]["stage"], 1.15, "newest value wins");
    assert_eq!(page["readings"][0]["revision"], 1);
    let (status, one) = f
        .app
        .get_json("/api/gauges/alder-weir/readings/2025-03-01T00:15:00Z")
        .await;
    assert_eq!(status, 200);
    let revs = one["revisions"].as_array().expect("revisions");
    assert_eq!(revs.len(), 1);
    assert_eq!(revs[0]["stage"], 1.1, "old value kept");
    let admin_id = f.admin.split('_').nth(1).expect("key id");
    let logger_id = f.logger.split('_').nth(1).expect("key id");
    assert_eq!(revs[0]["replaced_by"], admin_id);
    assert_eq!(revs[0]["sent_by"], logger_id);
    assert_wire_time(&revs[0]["replaced_at"]);
    assert_wire_time(&revs[0]["received_at"]);
    assert_wire_time(&one["received_at"]);
    assert_wire_time(&one["reading"]["time"]);
    // The same reading addressed with an offset in the path, `+` as is and
    // percent-encoded.
    for path in [
        "/api/gauges/alder-weir/readings/2025-03-01T01:15:00+01:00",
        "/api/gauges/alder-weir/readings/2025-03-01T01:15:00%2B01:00",
    ] {
        let (status, same) = f.app.get_json(path).await;
        assert_eq!(status, 200, "{path}");
        assert_eq!(same["reading"]["time"], "2025-03-01T00:15:00.000Z");
    }
    // A batch contradicting itself: the second row for one time is rejected.
    let contradict = json!({"readings": [reading("2025-03-02T00:00:00Z", 1.0), reading("2025-03-02T00:00:00Z", 1.2)]});
    let r = report(
        f.app
            .post_readings(&f.logger, "alder-weir", &contradict)
            .await,
    )
    .await;
    assert_eq!(
        (r["accepted"].as_u64(), r["rejected"].as_u64()),
        (Some(1), Some(1))
    );
    assert_eq!(r["errors"][0]["row"], 2);
    f.app.stop().await;
}

#[tokio::test]
async fn validation_rules_each_name_the_field() {
    let f = fixture().await;
    let cases: Vec<(Value, &str, &str)> = vec![
        (
            json!({"time": "2025-03-01T04:15:00", "stage": 1.0}),
            "time",
            "no UTC offset",
        ),
        (
            json!({"time": "1st of March", "stage": 1.0}),
            "time",
            "RFC 3339",
        ),
        (
            json!({"time": "2025-03-01T04:15:00Z", "discharge": -0.5}),
            "discharge",
            "negative",
        ),
        (
            json!({"time": "2025-03-01T04:15:00Z", "stage": 10.5}),
            "stage",
            "plausible range",
        ),
        (
            json!({"time": "2025-03-01T04:15:00Z", "stage": -0.1}),
            "stage",
            "plausible range",
        ),
        (
            json!({"time": "2025-03-01T04:15:00Z", "discharge": 600.0}),
            "discharge",
            "plausible range",
        ),
        (json!({"time": "2025-03-01T04:15:00Z"}), "stage", "required"),
        (json!({"stage": 1.0}), "time", "required"),
        (
            json!({"time": "2999-01-01T00:00:00Z", "stage": 1.0}),
            "time",
            "ahead of the server clock",
        ),
    ];
    for (row, field, words) in cases {
        let res = f
            .app
            .post_readings(&f.logger, "alder-weir", &json!({"readings": [row]}))
            .await;
        // Every row rejected: 422 problem naming the field and row 1.
        let p = problem(res, 422).await;
        assert_eq!(p["field"], field, "{p}");
        assert_eq!(p["row"], 1, "{p}");
        assert!(
            p["detail"].as_str().expect("detail").contains(words),
            "{words}: {p}"
        );
        assert_eq!(p["errors"][0]["field"], field);
    }
    // Just inside the future limit (10 minutes by default) is accepted.
    let soon = (chrono::Utc::now() + chrono::Duration::minutes(5)).to_rfc3339();
    let res = f
        .app
        .post_readings(
            &f.logger,
            "alder-weir",
            &json!({"readings": [reading(&soon, 1.0)]}),
        )
        .await;
    assert_eq!(res.status(), 200);
    // CSV can carry NaN and infinity; JSON cannot (RFC 8259 §6 has no NaN).
    let res = f.app.post_csv(&f.logger, "alder-weir", "time,stage\r\n2025-03-01T00:00:00Z,NaN\r\n2025-03-01T00:15:00Z,inf\r\n2025-03-01T00:30:00Z,-infinity\r\n").await;
    let p = problem(res, 422).await;
    let errors = p["errors"].as_array().expect("errors");
    assert_eq!(errors.len(), 3);
    assert!(errors.iter().all(|e| e["field"] == "stage"));
    assert!(
        errors[0]["message"]
            .as_str()
            .expect("message")
            .contains("finite")
    );
    // Unknown gauge: 404 problem naming the gauge.
    let res = f
        .app
        .post_readings(
            &f.admin,
            "no-such-gauge",
            &json!({"readings": [reading("2025-03-01T00:00:00Z", 1.0)]}),
        )
        .await;
    let p = problem(res, 404).await;
    assert_eq!(p["field"], "gauge");
    let (status, _) = f.app.get_json("/api/gauges/no-such-gauge/readings").await;
    assert_eq!(status, 404);
    f.app.stop().await;
}

#[tokio::test]
async fn malformed_bodies_are_refused_whole() {
    let f = fixture().await;
    let send = |body: &'static str, ctype: &'static str| {
        f.app
            .client
            .post(f.app.url("/api/gauges/alder-weir/readings"))
            .bearer_auth(&f.logger)
            .header("content-type", ctype)
            .body(body)
            .send()
    };
    // Malformed JSON: 400 naming line and column; nothing stored.
    let res = send(
        "{\"readings\": [\n {\"time\": \"2025-03-01T00:00:00Z\", \"stage\": 1.0},\n {\"time\": ]}",
        "application/json",
    )
    .await
    .expect("send");
    let p = problem(res, 400).await;
    assert_eq!(p["line"], 3, "{p}");
    assert!(p["column"].as_u64().is_some(), "{p}");
    // Wrong shape at the top: 422 naming the member.
    let res = send("{\"readings\": {}}", "application/json")
        .await
        .expect("send");
    let p = problem(res, 422).await;
    assert_eq!(p["field"], "readings", "{p}");
    // RFC 4180 §2: every record has the same number of fields; a short
    // record is a syntax error and refuses the whole body.
    let res = send(
        "time,stage\r\n2025-03-01T00:00:00Z,1.0\r\n2025-03-01T00:15:00Z\r\n",
        "text/csv",
    )
    .await
    .expect("send");
    let p = problem(res, 400).await;
    assert_eq!(p["line"], 3, "{p}");
    assert_eq!(p["row"], 2, "second data record");
    // Unknown CSV column: refused, naming it.
    let res = send("time,height\r\n2025-03-01T00:00:00Z,1.0\r\n", "text/csv")
        .await
        .expect("send");
    let p = problem(res, 400).await;
    assert_eq!(p["field"], "height");
    // Unsupported media type: 415 problem.
    let res = send("time,stage", "text/plain").await.expect("send");
    problem(res, 415).await;
    let (_, page) = f.app.get_json("/api/gauges/alder-weir/readings").await;
    assert_eq!(page["count"], 0, "nothing from a refused body is stored");
    f.app.stop().await;
}

#[tokio::test]
async fn oversized_body_is_a_413_problem() {
    let dir = tempfile::tempdir().expect("temp dir");
    let admin = make_key(dir.path(), "admin", &[]).await;
    let mut config = test_config(dir.path());
    config.server.body_limit_bytes = 2048;
    let app = spawn_app_with(config).await;
    assert_eq!(
        app.put_gauge(&admin, "alder-weir", &gauge_body("Alder Weir"))
            .await
            .status(),
        201
    );
    let rows: Vec<Value> = (0..100)
        .map(|i| reading(&format!("2025-03-01T00:{:02}:00Z", i % 60), 1.0))
        .collect();
    let res = app
        .post_readings(&admin, "alder-weir", &json!({"readings": rows}))
        .await;
    // RFC 9110 §15.5.14: 413 Content Too Large.
    let p = problem(res, 413).await;
    assert_eq!(p["type"], "/problems/body-too-large");
    let detail = p["detail"].as_str().expect("detail");
    assert!(
        detail.contains("2048") && detail.contains("server.body_limit_bytes"),
        "{p}"
    );
    assert_eq!(p["instance"], "/api/gauges/alder-weir/readings", "{p}");
    app.stop().await;
}

#[tokio::test]
async fn jump_is_flagged_suspect_until_a_forecaster_confirms() {
    let f = fixture().await;
    // Gauge allows 1 m/h. 15-minute readings: +0.1 m is 0.4 m/h (fine),
    // +2.0 m is 8 m/h (implausible).
    let body = json!({"readings": [
        reading("2025-03-01T00:00:00Z", 1.0),
        reading("2025-03-01T00:15:00Z", 1.1),
        reading("2025-03-01T00:30:00Z", 3.1),
        reading("2025-03-01T00:45:00Z", 1.2),
    ]});
    let r = f.post(&body).await;
    assert_eq!(r["accepted"], 4, "stored, never dropped");
    assert_eq!(r["suspect_by_rate"], 1);
    assert_eq!(
        f.flags("rate_check").await,
        owned(&[("ok", true), ("ok", true), ("suspect", false), ("ok", true)])
    );
    // A later reading is compared with its stored neighbour.
    let r = f
        .post(&json!({"readings": [reading("2025-03-01T01:00:00Z", 0.1)]}))
        .await;
    assert_eq!(
        r["suspect_by_rate"], 1,
        "a fall of 1.1 m in 15 min is flagged too"
    );

    // A gauge key may not confirm.
    problem(f.confirm(&f.logger, "2025-03-01T00:30:00Z").await, 403).await;
    let res = f.confirm(&f.forecaster, "2025-03-01T00:30:00Z").await;
    assert_eq!(res.status(), 200);
    let body: Value = res.json().await.expect("json");
    assert_eq!(body["reading"]["rate_check"], "confirmed");
    assert_eq!(body["reading"]["for_forecast"], true);
    let (_, page) = f
        .app
        .get_json("/api/gauges/alder-weir/readings?order=oldest")
        .await;
    assert_eq!(
        page["readings"][2]["rate_check"], "confirmed",
        "cache invalidated on confirm"
    );
    // Confirming a reading that is not flagged is a conflict; none there, 404.
    problem(f.confirm(&f.forecaster, "2025-03-01T00:00:00Z").await, 409).await;
    problem(f.confirm(&f.forecaster, "2025-03-01T05:00:00Z").await, 404).await;
    let p = problem(f.confirm(&f.forecaster, "yesterday").await, 422).await;
    assert_eq!(p["field"], "time");
    f.app.stop().await;
}

/// Common practice: data flagged suspect are not used until confirmed.
/// Here the sender flags it (WaterML 2.0 quality `suspect`); the API's
/// `for_forecast` says so, and confirming lets it in.
#[tokio::test]
async fn sender_suspect_readings_stay_out_of_forecasts_until_confirmed() {
    let f = fixture().await;
    let body = json!({"readings": [
        reading("2025-03-01T00:00:00Z", 1.0),
        {"time": "2025-03-01T00:15:00Z", "stage": 1.05, "quality": "suspect"},
        reading("2025-03-01T00:30:00Z", 1.1),
        {"time": "2025-03-01T00:45:00Z", "stage": 1.1, "quality": "suspect"},
    ]});
    let r = f.post(&body).await;
    assert_eq!(
        (r["accepted"].as_u64(), r["suspect_by_rate"].as_u64()),
        (Some(4), Some(0)),
        "{r}"
    );
    let expect = |confirmed: bool| {
        owned(&[
            ("good", true),
            ("suspect", confirmed),
            ("good", true),
            ("suspect", false),
        ])
    };
    assert_eq!(f.flags("quality").await, expect(false));
    // What the forecast reads agrees with the flag.
    let forecast_view = || async {
        f.app
            .store
            .readings_for_forecast("alder-weir", i64::MIN, i64::MAX)
            .await
            .expect("readings")
            .iter()
            .map(|r| (r.quality.as_str().to_owned(), r.for_forecast()))
            .collect::<Vec<_>>()
    };
    assert_eq!(forecast_view().await, expect(false));
    let newest_usable = f
        .app
        .store
        .last_usable_reading_ms("alder-weir")
        .await
        .expect("newest usable");
    assert_eq!(
        newest_usable,
        Some(
            chrono::DateTime::parse_from_rfc3339("2025-03-01T00:30:00Z")
                .expect("time")
                .timestamp_millis()
        ),
        "the suspect 00:45 reading is not the gauge's newest usable one"
    );
    let res = f.confirm(&f.forecaster, "2025-03-01T00:15:00Z").await;
    assert_eq!(res.status(), 200);
    let body: Value = res.json().await.expect("json");
    assert_eq!(body["reading"]["for_forecast"], true, "{body}");
    assert_eq!(
        body["reading"]["quality"], "suspect",
        "the sender's word is kept"
    );
    assert_eq!(f.flags("quality").await, expect(true));
    assert_eq!(forecast_view().await, expect(true));
    f.app.stop().await;
}

#[tokio::test]
async fn roles_and_keys_are_enforced() {
    let f = fixture().await;
    let batch = json!({"readings": [reading("2025-03-01T00:00:00Z", 1.0)]});
    assert_eq!(
        f.app
            .put_gauge(&f.admin, "brook-end", &gauge_body("Brook End"))
            .await
            .status(),
        201
    );
    // No key: 401 with a Bearer challenge (RFC 6750 §3).
    let res = f
        .app
        .client
        .post(f.app.url("/api/gauges/alder-weir/readings"))
        .json(&batch)
        .send()
        .await
        .expect("send");
    assert_eq!(
        res.headers()["www-authenticate"],
        "Bearer realm=\"reachcast\""
    );
    problem(res, 401).await;
    // A made-up key of the right shape, and a real id with a wrong secret.
    let forged = format!("rck_0123456789abcdef_{}", "ab".repeat(32));
    problem(
        f.app.post_readings(&forged, "alder-weir", &batch).await,
        401,
    )
    .await;
    let wrong_secret = format!("{}_{}", &f.logger[..20], "cd".repeat(32));
    problem(
        f.app
            .post_readings(&wrong_secret, "alder-weir", &batch)
            .await,
        401,
    )
    .await;
    // Gauge keys post only for their own gauges.
    assert_eq!(
        f.app
            .post_readings(&f.logger, "alder-weir", &batch)
            .await
            .status(),
        200
    );
    let p = problem(
        f.app.post_readings(&f.logger, "brook-end", &batch).await,
        403,
    )
    .await;
    assert_eq!(p["field"], "gauge");
    // Forecasters do not post readings; gauge and forecaster keys do not
    // manage gauges; admins may do both.
    problem(
        f.app
            .post_readings(&f.forecaster, "alder-weir", &batch)
            .await,
        403,
    )
    .await;
    problem(
        f.app
            .put_gauge(&f.logger, "alder-weir", &gauge_body("x"))
            .await,
        403,
    )
    .await;
    problem(
        f.app
            .put_gauge(&f.forecaster, "alder-weir", &gauge_body("x"))
            .await,
        403,
    )
    .await;
    assert_eq!(
        f.app
            .post_readings(&f.admin, "brook-end", &batch)
            .await
            .status(),
        200
    );
    // Reads are public by default.
    let (status, _) = f.app.get_json("/api/gauges").await;
    assert_eq!(status, 200);
    // Every write is in the audit log with its key id and counts.
    let dir = f._dir.path().to_owned();
    f.app.stop().await;
    let store = open_store(&dir).await;
    let log = store.audit_log(100).await.expect("audit");
    let logger_id = f.logger.split('_').nth(1).expect("id");
    let ingest = log
        .iter()
        .find(|e| e.action == "readings.ingest" && e.key_id.as_deref() == Some(logger_id))
        .expect("ingest audited");
    assert_eq!(ingest.target, "gauge:alder-weir");
    assert_eq!(ingest.summary["accepted"], 1);
    assert!(
        log.iter()
            .any(|e| e.action == "gauge.create" && e.target == "gauge:brook-end")
    );
    assert!(
        log.iter()
            .any(|e| e.action == "key.create" && e.actor == "cli")
    );
    // Revoked keys stop working at once.
    let logger_id = logger_id.to_owned();
    assert!(store.revoke_key(&logger_id).await.expect("revoke"));
    store.close().await;
    let app = spawn_app(&dir).await;
    problem(
        app.post_readings(&f.logger, "alder-weir", &batch).await,
        401,
    )
    .await;
    app.stop().await;
}

#[tokio::test]
async fn private_reads_need_a_key() {
    let dir = tempfile::tempdir().expect("temp dir");
    let forecaster = make_key(dir.path(), "forecaster", &[]).await;
    let mut config = test_config(dir.path());
    config.auth.public_reads = false;
    let app = spawn_app_with(config).await;
    let res = app.get("/api/gauges").await;
    problem(res, 401).await;
    let res = app.get_as(&forecaster, "/api/gauges").await;
    assert_eq!(res.status(), 200);
    app.stop().await;
}

#[tokio::test]
async fn per_key_rate_limit_answers_429_with_retry_after() {
    let dir = tempfile::tempdir().expect("temp dir");
    let admin = make_key(dir.path(), "admin", &[]).await;
    let other = make_key(dir.path(), "admin", &[]).await;
    let mut config = test_config(dir.path());
    config.auth.rate_limit_burst = 3;
    config.auth.rate_limit_per_sec = 0.01;
    let app = spawn_app_with(config).await;
    for _ in 0..3 {
        let res = app.get_as(&admin, "/api/gauges").await;
        assert_eq!(res.status(), 200);
    }
    let res = app.get_as(&admin, "/api/gauges").await;
    // RFC 6585 §4: 429 Too Many Requests, MAY include Retry-After.
    let retry: u64 = res.headers()["retry-after"]
        .to_str()
        .expect("ascii")
        .parse()
        .expect("seconds");
    assert!((1..=100).contains(&retry), "{retry}");
    problem(res, 429).await;
    // Another key has its own budget.
    let res = app.get_as(&other, "/api/gauges").await;
    assert_eq!(res.status(), 200);
    app.stop().await;
}

#[tokio::test]
async fn csv_round_trip() {
    let f = fixture().await;
    assert_eq!(
        f.app
            .put_gauge(&f.admin, "brook-end", &gauge_body("Brook End"))
            .await
            .status(),
        201
    );
    // RFC 4180 §2: CRLF line breaks, a header line, fields optionally in
    // double quotes; quoted fields may contain commas and quotes ("" is
    // one quote) — here only the time and quality are quoted.
    let csv = "time,stage,discharge,quality\r\n\
               \"2025-03-01T00:00:00Z\",1.5,20.25,\"good\"\r\n\
               2025-03-01T01:15:00+01:00,1.55,,estimate\r\n\
               2025-03-01T00:30:00Z,,21.5,\r\n";
    let r = report(f.app.post_csv(&f.admin, "alder-weir", csv).await).await;
    assert_eq!(r["accepted"], 3, "{r}");
    let res = f
        .app
        .get_with(
            "/api/gauges/alder-weir/readings?order=oldest",
            "accept",
            "text/csv",
        )
        .await;
    assert!(
        res.headers()["content-type"]
            .to_str()
            .expect("ascii")
            .starts_with("text/csv")
    );
    // RFC 9110 §12.5.5: the answer was chosen by Accept, so it says so.
    assert_eq!(res.headers()["vary"], "accept");
    let out = res.text().await.expect("text");
    assert_eq!(
        out,
        "time,stage,discharge,quality,rate_check,revision\r\n\
         2025-03-01T00:00:00.000Z,1.5,20.25,good,ok,0\r\n\
         2025-03-01T00:15:00.000Z,1.55,,estimate,ok,0\r\n\
         2025-03-01T00:30:00.000Z,,21.5,unchecked,ok,0\r\n"
    );
    // What comes out goes back in unchanged, to another gauge.
    let r = report(f.app.post_csv(&f.admin, "brook-end", &out).await).await;
    assert_eq!(r["accepted"], 3, "{r}");
    let again = f
        .app
        .get("/api/gauges/brook-end/readings?order=oldest&format=csv")
        .await
        .text()
        .await
        .expect("text");
    assert_eq!(again, out);
    // And resending it to the first gauge only finds duplicates.
    let r = report(f.app.post_csv(&f.admin, "alder-weir", &out).await).await;
    assert_eq!(
        (r["duplicate"].as_u64(), r["accepted"].as_u64()),
        (Some(3), Some(0))
    );
    f.app.stop().await;
}

#[tokio::test]
async fn paging_walks_every_reading_once_in_both_orders() {
    let f = fixture().await;
    let rows: Vec<Value> = (0..25)
        .map(|i| {
            reading(
                &format!("2025-03-01T{:02}:{:02}:00Z", i / 4, (i % 4) * 15),
                1.0 + f64::from(i) * 0.01,
            )
        })
        .collect();
    let r = report(
        f.app
            .post_readings(&f.logger, "alder-weir", &json!({"readings": rows}))
            .await,
    )
    .await;
    assert_eq!(r["accepted"], 25);
    for order in ["newest", "oldest"] {
        let mut seen: Vec<String> = Vec::new();
        let mut cursor: Option<String> = None;
        let mut pages = 0;
        loop {
            let mut path = format!("/api/gauges/alder-weir/readings?limit=10&order={order}");
            if let Some(c) = &cursor {
                path.push_str(&format!("&cursor={c}"));
            }
            let (status, page) = f.app.get_json(&path).await;
            assert_eq!(status, 200);
            pages += 1;
            seen.extend(
                page["readings"]
                    .as_array()
                    .expect("readings")
                    .iter()
                    .map(|r| r["time"].as_str().expect("time").to_owned()),
            );
            match page["next_cursor"].as_str() {
                Some(c) => cursor = Some(c.to_owned()),
                None => break,
            }
        }
        assert_eq!(pages, 3, "{order}");
        assert_eq!(seen.len(), 25, "{order}");
        let mut sorted = seen.clone();
        sorted.sort();
        if order == "newest" {
            sorted.reverse();
        }
        assert_eq!(seen, sorted, "{order}: strictly ordered, no repeats");
        sorted.dedup();
        assert_eq!(sorted.len(), 25);
    }
    // from/to are inclusive bounds, RFC 3339 with any offset.
    let (_, page) = f.app.get_json("/api/gauges/alder-weir/readings?order=oldest&from=2025-03-01T02:00:00%2B01:00&to=2025-03-01T01:30:00Z").await;
    let times: Vec<&str> = page["readings"]
        .as_array()
        .expect("r")
        .iter()
        .map(|r| r["time"].as_str().expect("t"))
        .collect();
    assert_eq!(
        times,
        [
            "2025-03-01T01:00:00.000Z",
            "2025-03-01T01:15:00.000Z",
            "2025-03-01T01:30:00.000Z"
        ]
    );
    // Bad parameters are 400 problems naming the parameter.
    for (q, field) in [
        ("limit=0", "limit"),
        ("limit=abc", "limit"),
        ("from=2025-03-01", "from"),
        ("order=up", "order"),
        ("cursor=x", "cursor"),
        ("colour=red", "colour"),
        ("limit=5&limit=6", "limit"),
        ("format=xml", "format"),
    ] {
        let res = f
            .app
            .get(&format!("/api/gauges/alder-weir/readings?{q}"))
            .await;
        let p = problem(res, 400).await;
        assert_eq!(p["field"], field, "{q}");
        assert_eq!(p["type"], "/problems/invalid-parameter", "{q}");
        assert!(
            p["detail"].as_str().is_some_and(|d| d.contains(field)),
            "{p}"
        );
    }
    f.app.stop().await;
}

#[tokio::test]
async fn latest_readings_answer_follows_every_write() {
    let f = fixture().await;
    let post = |t: &str, s: f64| {
        let body = json!({"readings": [reading(t, s)]});
        let app = &f.app;
        let key = f.logger.clone();
        async move { app.post_readings(&key, "alder-weir", &body).await }
    };
    assert_eq!(post("2025-03-01T00:00:00Z", 1.0).await.status(), 200);
    // Served from the cache or not, JSON or CSV, the answer varies by
    // Accept (RFC 9110 §12.5.5).
    for accept in [
        "application/json",
        "application/json",
        "text/csv",
        "text/csv",
    ] {
        let res = f
            .app
            .get_with("/api/gauges/alder-weir/readings", "accept", accept)
            .await;
        assert_eq!(res.status(), 200);
        assert_eq!(res.headers()["vary"], "accept", "{accept}");
    }
    for round in 0..3 {
        let (_, a) = f.app.get_json("/api/gauges/alder-weir/readings").await;
        let (_, b) = f.app.get_json("/api/gauges/alder-weir/readings").await;
        assert_eq!(a, b, "repeat reads agree");
        let t = format!("2025-03-01T00:{:02}:00Z", 15 * (round + 1));
        assert_eq!(post(&t, 1.0).await.status(), 200);
        let (_, c) = f.app.get_json("/api/gauges/alder-weir/readings").await;
        assert_eq!(
            c["count"].as_u64(),
            a["count"].as_u64().map(|n| n + 1),
            "round {round}"
        );
        assert_eq!(
            c["readings"][0]["time"],
            format!("2025-03-01T00:{:02}:00.000Z", 15 * (round + 1))
        );
    }
    // A revision shows at once too.
    assert_eq!(post("2025-03-01T00:45:00Z", 1.05).await.status(), 200);
    let (_, d) = f.app.get_json("/api/gauges/alder-weir/readings").await;
    assert_eq!(d["readings"][0]["stage"], 1.05);
    f.app.stop().await;
}

#[tokio::test]
async fn gauges_are_created_updated_and_checked() {
    let f = fixture().await;
    let mut body = gauge_body("Alder Weir (upper)");
    body["chainage_m"] = json!(1250.0);
    body["rating_curve"] = json!({"kind": "table", "points": [[0.0, 0.0], [2.0, 40.0]]});
    let res = f.app.put_gauge(&f.admin, "alder-weir", &body).await;
    assert_eq!(res.status(), 200, "update answers 200");
    let (_, g) = f.app.get_json("/api/gauges/alder-weir").await;
    assert_eq!(g["name"], "Alder Weir (upper)");
    assert_eq!(g["chainage_m"], 1250.0);
    assert_eq!(g["rating_curve"]["points"][1][1], 40.0);
    assert_eq!(g["rating_curve"]["kind"], "table");
    assert_wire_time(&g["created_at"]);
    assert_wire_time(&g["updated_at"]);
    let (_, list) = f.app.get_json("/api/gauges").await;
    assert_eq!(list.as_array().map(Vec::len), Some(1));
    let bad = |patch: Value| {
        let mut b = gauge_body("Brook End");
        if let (Some(m), Value::Object(p)) = (b.as_object_mut(), patch) {
            m.extend(p);
        }
        b
    };
    // A reach that is not stored is a conflict with what is stored (409),
    // not a bad value (422): the same body is fine once the reach exists.
    for (patch, field, status) in [
        (json!({"stage_max_m": -1.0}), "stage_max_m", 422),
        (json!({"max_rise_m_per_h": 0.0}), "max_rise_m_per_h", 422),
        (json!({"measures": "rainfall"}), "measures", 422),
        (json!({"name": ""}), "name", 422),
        (json!({"name": " \u{3000}\n"}), "name", 422),
        (json!({"rating_curve": [1, 2]}), "rating_curve", 422),
        (json!({"reach": "no-such-reach"}), "reach", 409),
        (json!({"discharge_min_m3s": -3.0}), "discharge_min_m3s", 422),
        (json!({"colour": "blue"}), "", 422),
    ] {
        let p = problem(
            f.app
                .put_gauge(&f.admin, "brook-end", &bad(patch.clone()))
                .await,
            status,
        )
        .await;
        if field.is_empty() {
            assert!(
                p["detail"].as_str().expect("detail").contains("colour"),
                "{p}"
            );
        } else {
            assert_eq!(p["field"], field, "{patch}: {p}");
        }
    }
    let p = problem(
        f.app
            .put_gauge(&f.admin, "Brook_End", &gauge_body("x"))
            .await,
        422,
    )
    .await;
    assert_eq!(p["field"], "gauge");
    let (status, _) = f.app.get_json("/api/gauges/brook-end").await;
    assert_eq!(status, 404, "nothing created by refused requests");
    f.app.stop().await;
}

#[tokio::test]
async fn wrong_method_is_a_problem_document() {
    let f = fixture().await;
    let res = f
        .app
        .client
        .delete(f.app.url("/api/gauges/alder-weir"))
        .send()
        .await
        .expect("DELETE");
    // RFC 9110 §15.5.6: a 405 carries `Allow`.
    let allow = res.headers()["allow"].to_str().expect("ascii").to_owned();
    assert!(allow.contains("GET") && allow.contains("PUT"), "{allow}");
    let p = problem(res, 405).await;
    assert_eq!(p["type"], "/problems/method-not-allowed");
    let detail = p["detail"].as_str().expect("detail");
    assert!(detail.contains("DELETE") && detail.contains("Allow"), "{p}");
    assert_eq!(p["instance"], "/api/gauges/alder-weir", "{p}");
    f.app.stop().await;
}

/// Stage values posted as JSON come back bit for bit: the server parses
/// JSON numbers to the nearest double (serde_json's `float_roundtrip`;
/// without it about 3.6 % of random values came back one ULP off). The
/// check reads the values back as CSV text and compares it with Rust's
/// shortest round-trip formatting of the value sent, so the client's own
/// JSON parser plays no part.
#[tokio::test]
async fn json_numbers_are_stored_to_the_nearest_double() {
    let f = fixture().await;
    // xorshift64* (Vigna 2016): full 53-bit mantissas in [0, 10).
    let mut x: u64 = 0x9E37_79B9_7F4A_7C15;
    let mut next = || {
        x ^= x >> 12;
        x ^= x << 25;
        x ^= x >> 27;
        let r = x.wrapping_mul(0x2545_F491_4F6C_DD1D);
        10.0 * ((r >> 11) as f64) / (1u64 << 53) as f64
    };
    let start = chrono::DateTime::parse_from_rfc3339("2025-06-01T00:00:00Z").expect("time");
    let values: Vec<f64> = (0..400).map(|_| next()).collect();
    let rows: Vec<String> = values
        .iter()
        .enumerate()
        .map(|(i, v)| {
            let t = start + chrono::Duration::hours(i as i64 * 24);
            format!(r#"{{"time":"{}","stage":{v}}}"#, t.to_rfc3339())
        })
        .collect();
    let body = format!(r#"{{"readings":[{}]}}"#, rows.join(","));
    let res = reqwest::Client::new()
        .post(f.app.url("/api/gauges/alder-weir/readings"))
        .bearer_auth(&f.logger)
        .header("content-type", "application/json")
        .body(body)
        .send()
        .await
        .expect("post");
    let r = report(res).await;
    assert_eq!(r["accepted"], 400, "{r}");
    let csv = f
        .app
        .get("/api/gauges/alder-weir/readings?order=oldest&format=csv&limit=1000")
        .await
        .text()
        .await
        .expect("csv");
    let stages: Vec<&str> = csv
        .lines()
        .skip(1)
        .map(|l| l.split(',').nth(1).expect("stage column"))
        .collect();
    let sent: Vec<String> = values.iter().map(|v| format!("{v}")).collect();
    assert_eq!(stages.len(), sent.len());
    let off = stages
        .iter()
        .zip(&sent)
        .filter(|(a, b)| **a != b.as_str())
        .count();
    assert_eq!(off, 0, "{off} of {} values changed", sent.len());
    f.app.stop().await;
}

/// Reads without a key are limited per client address (they were not
/// limited at all): a burst of 3 at 1 per second, then 429 with
/// `Retry-After`; a key keeps its own budget. `X-Forwarded-For` is ignored
/// unless `auth.trust_forwarded_for` says a proxy sets it; then its last
/// entry is the client (addresses from the RFC 5737 documentation ranges).
#[tokio::test]
async fn anonymous_reads_are_limited_per_client_address() {
    for trust in [false, true] {
        let dir = tempfile::tempdir().expect("temp dir");
        let key = make_key(dir.path(), "forecaster", &[]).await;
        let mut config = test_config(dir.path());
        config.auth.anonymous_rate_limit_per_sec = 1.0;
        config.auth.anonymous_rate_limit_burst = 3;
        config.auth.trust_forwarded_for = trust;
        let app = spawn_app_with(config).await;
        let from = |client: &str| {
            let url = app.url("/api/reaches");
            let client = client.to_owned();
            async move {
                reqwest::Client::new()
                    .get(url)
                    // The first entry is the client's own word; the
                    // last is what a proxy would append.
                    .header("x-forwarded-for", format!("203.0.113.9, {client}"))
                    .send()
                    .await
                    .expect("get")
            }
        };
        for _ in 0..3 {
            assert_eq!(from("198.51.100.1").await.status(), 200);
        }
        // Another address behind a trusted proxy has its own bucket;
        // without trust every request is the connection's (127.0.0.1).
        let other = from("198.51.100.2").await.status();
        assert_eq!(other, if trust { 200 } else { 429 }, "trust {trust}");
        let res = from("198.51.100.1").await;
        assert_eq!(res.status(), 429, "trust {trust}");
        assert!(res.headers().contains_key("retry-after"));
        let p = problem(res, 429).await;
        assert!(
            p["detail"]
                .as_str()
                .expect("detail")
                .contains("per client address")
        );
        // A key has its own budget.
        assert_eq!(app.get_as(&key, "/api/reaches").await.status(), 200);
        app.stop().await;
    }
}

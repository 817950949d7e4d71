//! Retention (issue "Operations", part 3) on a real SQLite file behind the
//! real server: old runs keep a digest that says what they forecast, the
//! newest good run stays whole, readings inside a kept run's look-back
//! stay, and a second pass finds nothing more. Pruning is driven with a
//! `now` in the future rather than by ageing the rows by hand.

use chrono::{DateTime, Duration, Utc};
use reachcast::{
    config::RetentionConfig,
    store::{Pruned, Retention},
};
use serde_json::{Value, json};

use crate::common::{ReachApp, assert_success, bridge_reach, json_of, reach_gauge};

const REACH: &str = "kept-reach";
const GAUGE: &str = "kept-gauge";

async fn setup() -> ReachApp {
    let doc = bridge_reach("Kept reach (invented)", "Kept Bridge", GAUGE);
    let gauge = reach_gauge("Kept gauge", REACH, "discharge", 19.0, 2.0);
    ReachApp::start(
        |c| {
            c.forecast.debounce_ms = 600_000;
            c.retention.interval_minutes = 0;
        },
        (REACH, &doc),
        (GAUGE, &gauge),
    )
    .await
}

/// Readings every 30 minutes over the last `days`, rising slowly.
fn readings(now: DateTime<Utc>, days: i64) -> (Vec<DateTime<Utc>>, Value) {
    let n = days * 48;
    let times: Vec<DateTime<Utc>> = (0..=n)
        .map(|k| now - Duration::minutes(30 * (n - k)))
        .collect();
    let rows: Vec<Value> = times
        .iter()
        .enumerate()
        .map(|(k, t)| json!({"time": t.to_rfc3339(), "discharge": 20.0 + k as f64 * 0.05, "quality": "good"}))
        .collect();
    (times, json!({ "readings": rows }))
}

async fn run(s: &ReachApp) -> i64 {
    let r = json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;
    assert_eq!(r["status"], "ok", "{r}");
    r["run_id"].as_i64().expect("run id")
}

/// The policy of `r` seen from `now`, with the default forecast look-back.
fn policy(r: RetentionConfig, now: DateTime<Utc>) -> Retention {
    Retention::of(&r, &reachcast::config::ForecastConfig::default(), now)
}

#[tokio::test]
async fn old_runs_keep_a_digest_and_the_newest_stays_whole() {
    let s = setup().await;
    let now = Utc::now();
    let (times, body) = readings(now, 4);
    assert_success(s.app.post_readings(&s.keys.gauge, GAUGE, &body).await).await;
    let ids = [run(&s).await, run(&s).await, run(&s).await];
    let (_, before) = s.app.get_json(&format!("/api/runs/{}", ids[0])).await;
    let crest = before["results"]["points"][0]["crest_stage"].clone();
    assert!(crest.is_number(), "{before}");

    // 20 days on, results older than 14 days go: two of the three runs
    // (the third is the newest good run). Readings older than a day go,
    // except what the run kept whole read.
    let later = now + Duration::days(20);
    let config = RetentionConfig {
        readings_days: 1,
        audit_days: 1,
        ..RetentionConfig::default()
    };
    let p: Pruned = s
        .app
        .store
        .prune(&policy(config.clone(), later))
        .await
        .expect("prune");
    // The run the reach's PUT asked for races the readings' post: it may
    // have found them and succeeded too. Every good run but the newest
    // loses its results.
    let (_, list) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/runs?limit=1000"))
        .await;
    let good = list["runs"]
        .as_array()
        .expect("runs")
        .iter()
        .filter(|r| r["status"] == "ok")
        .count() as u64;
    assert!(good >= 3, "{list}");
    assert_eq!(p.runs_digested, good - 1, "{p:?}");
    let (_, old) = s.app.get_json(&format!("/api/runs/{}", ids[0])).await;
    assert!(old["pruned_at"].is_string(), "{old}");
    assert!(old.get("results").is_none(), "{old}");
    // The digest says what the run forecast, bit for bit.
    assert_eq!(old["digest"]["points"][0]["crest_stage"], crest);
    assert_eq!(old["provenance"], before["provenance"]);
    let (_, newest) = s.app.get_json(&format!("/api/runs/{}", ids[2])).await;
    assert!(newest["pruned_at"].is_null() && newest["results"].is_object());
    let (status, _) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    assert_eq!(status, 200, "the forecast is still served");

    // The run kept whole read readings from its start minus the look-back
    // and the largest gap bridged (24 h + 60 min by default): every one of
    // those stays, every older one is gone.
    let keep_from = p.readings_kept_from.expect("readings pruned");
    let (_, run3) = s.app.get_json(&format!("/api/runs/{}", ids[2])).await;
    let started = DateTime::parse_from_rfc3339(run3["started_at"].as_str().unwrap()).unwrap();
    assert_eq!(
        keep_from,
        started.with_timezone(&Utc) - Duration::minutes(25 * 60)
    );
    let left = s
        .app
        .store
        .readings_for_forecast(GAUGE, i64::MIN, i64::MAX)
        .await
        .expect("readings");
    let want = times
        .iter()
        .filter(|t| t.timestamp_millis() >= keep_from.timestamp_millis())
        .count();
    assert_eq!(left.len(), want);
    assert_eq!(p.readings as usize, times.len() - want);
    assert!(want > 40 && want < times.len(), "{want} of {}", times.len());

    // Every earlier audit row was older than a day by then; the pass's own
    // row is the one left.
    assert!(p.audit_rows > 0, "{p:?}");
    let audit = s.app.store.audit_log(50).await.expect("audit");
    let actions: Vec<&str> = audit.iter().map(|a| a.action.as_str()).collect();
    assert_eq!(actions, ["retention.prune"]);
    // A second pass finds nothing more to prune but that audit row (which
    // is older than a day, seen from 20 days on).
    let again = s
        .app
        .store
        .prune(&policy(config, later))
        .await
        .expect("prune");
    let rest = Pruned {
        audit_rows: 0,
        readings_kept_from: None,
        ..again.clone()
    };
    assert!(rest.is_empty(), "{again:?}");
    s.app.stop().await;
}

/// `reachcast prune` runs one pass on a data directory and says what it did.
#[test]
fn the_prune_command_reports_what_it_removed() {
    let dir = tempfile::tempdir().expect("temp dir");
    let out = crate::common::binary::reachcast()
        .arg("prune")
        .arg("--data-dir")
        .arg(dir.path())
        .output()
        .expect("run binary");
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(text.starts_with("pruned: 0 runs' results"), "{text}");
}

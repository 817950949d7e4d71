//! `GET /metrics` through a real server: the Prometheus / OpenMetrics text
//! counts what was sent (readings by outcome and reason, runs, HTTP
//! requests by route template) and reads ages at scrape time.

use std::collections::HashMap;

use crate::common::{ReachApp, bridge_reach, json_of, reach_gauge};
use serde_json::json;

const REACH: &str = "metrics-reach";
const GAUGE: &str = "metrics-gauge";

/// `name{labels} value` lines of an exposition, by `name{labels}`.
fn samples(text: &str) -> HashMap<String, f64> {
    text.lines()
        .filter(|l| !l.starts_with('#') && !l.is_empty())
        .filter_map(|l| {
            let (k, v) = l.rsplit_once(' ')?;
            Some((k.to_owned(), v.parse().ok()?))
        })
        .collect()
}

#[tokio::test]
async fn metrics_count_what_was_sent() {
    let gauge = reach_gauge("Metrics gauge", REACH, "discharge", 19.0, 2.0);
    let s = ReachApp::start(
        |c| c.forecast.debounce_ms = 600_000,
        (
            REACH,
            &bridge_reach("Metrics reach (invented)", "Metrics Bridge", GAUGE),
        ),
        (GAUGE, &gauge),
    )
    .await;
    let now = chrono::Utc::now();
    let readings: Vec<_> = (0..5)
        .map(|k| json!({"time": (now - chrono::Duration::minutes(15 * k)).to_rfc3339(), "discharge": 20.0}))
        .chain([json!({"time": "yesterday", "discharge": 20.0})])
        .collect();
    let res = s
        .app
        .post_readings(&s.keys.gauge, GAUGE, &json!({ "readings": readings }))
        .await;
    assert_eq!(res.status(), 200);
    json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;

    let res = s.app.get("/metrics").await;
    assert_eq!(res.status(), 200);
    assert!(
        res.headers()["content-type"]
            .to_str()
            .expect("ascii")
            .starts_with("application/openmetrics-text")
    );
    let text = res.text().await.expect("text");
    assert!(
        text.trim_end().ends_with("# EOF"),
        "OpenMetrics ends with # EOF"
    );
    let m = samples(&text);
    let get = |k: &str| {
        m.get(k)
            .copied()
            .unwrap_or_else(|| panic!("no {k} in\n{text}"))
    };
    assert_eq!(
        get(&format!(
            r#"reachcast_readings_total{{gauge="{GAUGE}",outcome="accepted",reason=""}}"#
        )),
        5.0
    );
    assert_eq!(
        get(&format!(
            r#"reachcast_readings_total{{gauge="{GAUGE}",outcome="rejected",reason="time"}}"#
        )),
        1.0
    );
    assert!(
        get(&format!(
            r#"reachcast_forecast_runs_total{{reach="{REACH}",outcome="ok"}}"#
        )) >= 1.0
    );
    assert!(
        get(
            r#"reachcast_http_requests_total{method="POST",route="/api/gauges/{gauge}/readings",status="200"}"#
        ) >= 1.0
    );
    let age = get(&format!(
        r#"reachcast_last_good_run_age_seconds{{reach="{REACH}"}}"#
    ));
    assert!((0.0..60.0).contains(&age), "{age}");
    let reading_age = get(&format!(
        r#"reachcast_newest_reading_age_seconds{{gauge="{GAUGE}"}}"#
    ));
    assert!((0.0..120.0).contains(&reading_age), "{reading_age}");
    assert!(get("reachcast_db_pool_connections") >= 1.0);
    // Every write transaction's wait is observed: at least the readings'
    // and the run's.
    assert!(get("reachcast_db_write_wait_seconds_count") >= 2.0);
    s.app.stop().await;
}

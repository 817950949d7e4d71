//! Soak test (run by hand, never as a test; bounded in time):
//!
//! ```sh
//! cargo bench --bench soak -- --seconds 600
//! ```
//!
//! Starts the service in-process (release build) on a temporary data
//! directory with the invented demo reach, and for `--seconds` drives,
//! together: ingest (batches of 100 readings of a gauge of its own, every
//! 50 ms), forecast runs (the demo's replay and one triggered every 5 s)
//! and dashboard reads (the page, the forecast, the exceedances, the
//! profile, in a loop). Then it checks, and exits non-zero if any fails:
//! - every acknowledged reading is stored, and nothing else;
//! - `/metrics` counted exactly the readings acknowledged, and the runs;
//! - memory stayed bounded: the resident set at the end is within 64 MiB
//!   of the largest seen in the first minute (after warm-up).

use std::{
    sync::{
        Arc,
        atomic::{AtomicBool, AtomicU64, Ordering},
    },
    time::{Duration, Instant},
};

use reachcast::{
    app::Application,
    auth::{Role, generate_key},
    config::{Config, Overrides},
};
use serde_json::json;

const GAUGE: &str = "soak-gauge";

fn rss_kib() -> u64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmRSS:"))
                .and_then(|l| l.split_whitespace().nth(1)?.parse().ok())
        })
        .unwrap_or(0)
}

fn seconds_arg() -> u64 {
    let args: Vec<String> = std::env::args().collect();
    args.iter()
        .position(|a| a == "--seconds")
        .and_then(|i| args.get(i + 1)?.parse().ok())
        .unwrap_or(600)
}

fn main() -> anyhow::Result<()> {
    let seconds = seconds_arg();
    let dir = tempfile::tempdir()?;
    let overrides = Overrides {
        bind: Some("127.0.0.1:0".into()),
        data_dir: Some(dir.path().to_owned()),
    };
    let mut config = Config::load(None, Vec::new(), &overrides)?;
    config.log.filter = "warn".into();
    config.auth.rate_limit_per_sec = 1e6;
    config.auth.rate_limit_burst = 1_000_000;
    config.auth.anonymous_rate_limit_per_sec = 1e6;
    config.auth.anonymous_rate_limit_burst = 1_000_000;
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()?;
    rt.block_on(soak(config, seconds))
}

async fn soak(config: Config, seconds: u64) -> anyhow::Result<()> {
    let app = Application::build(config).await?;
    let addr = app.local_addr()?;
    let store = app.store().clone();
    let key = generate_key().map_err(|e| anyhow::anyhow!("{e}"))?;
    store.create_key(&key, "soak", Role::Admin, &[]).await?;
    tokio::spawn(app.run_until(std::future::pending()));
    let base = format!("http://{addr}");
    let client = reqwest::Client::new();
    let gauge = json!({"name": "Soak gauge (invented)", "measures": "stage",
        "stage_min_m": 0, "stage_max_m": 10, "max_rise_m_per_h": 100});
    let res = client
        .put(format!("{base}/api/gauges/{GAUGE}"))
        .bearer_auth(&key.token)
        .json(&gauge)
        .send()
        .await?;
    anyhow::ensure!(res.status().is_success(), "gauge: {}", res.text().await?);
    let stop = Arc::new(AtomicBool::new(false));
    let reads = Arc::new(AtomicU64::new(0));
    let triggered = Arc::new(AtomicU64::new(0));
    let writer = tokio::spawn(write_loop(
        client.clone(),
        base.clone(),
        key.token.clone(),
        stop.clone(),
    ));
    let mut readers = Vec::new();
    for _ in 0..4 {
        readers.push(tokio::spawn(read_loop(
            client.clone(),
            base.clone(),
            stop.clone(),
            reads.clone(),
        )));
    }
    let runner = tokio::spawn(run_loop(
        client.clone(),
        base.clone(),
        key.token.clone(),
        stop.clone(),
        triggered.clone(),
    ));
    let started = Instant::now();
    let (mut warm_max, mut max_rss) = (0u64, 0u64);
    while started.elapsed() < Duration::from_secs(seconds) {
        tokio::time::sleep(Duration::from_secs(5)).await;
        let rss = rss_kib();
        max_rss = max_rss.max(rss);
        if started.elapsed() < Duration::from_secs(60) {
            warm_max = warm_max.max(rss);
        }
    }
    stop.store(true, Ordering::Relaxed);
    let acknowledged = writer.await??;
    for r in readers {
        r.await??;
    }
    runner.await??;
    let end_rss = rss_kib();
    let stored: Vec<i64> = store
        .readings_for_forecast(GAUGE, i64::MIN, i64::MAX)
        .await?
        .iter()
        .map(|r| r.time_ms)
        .collect();
    let metrics = client
        .get(format!("{base}/metrics"))
        .bearer_auth(&key.token)
        .send()
        .await?
        .text()
        .await?;
    let counted = metric(
        &metrics,
        &format!("reachcast_readings_total{{gauge=\"{GAUGE}\",outcome=\"accepted\",reason=\"\"}}"),
    );
    let runs_ok = metric(
        &metrics,
        "reachcast_forecast_runs_total{reach=\"brindlemoor\",outcome=\"ok\"}",
    );
    println!(
        "soak {seconds} s: {} readings acknowledged ({:.0}/s), {} stored; {} dashboard reads ({:.0}/s); \
         {} runs triggered, {runs_ok} good runs counted; resident memory: first minute max {} MiB, \
         overall max {} MiB, end {} MiB",
        acknowledged.len(),
        acknowledged.len() as f64 / seconds as f64,
        stored.len(),
        reads.load(Ordering::Relaxed),
        reads.load(Ordering::Relaxed) as f64 / seconds as f64,
        triggered.load(Ordering::Relaxed),
        warm_max / 1024,
        max_rss / 1024,
        end_rss / 1024,
    );
    anyhow::ensure!(
        stored == acknowledged,
        "stored readings differ from the acknowledged ones"
    );
    anyhow::ensure!(
        counted == acknowledged.len() as f64,
        "/metrics counted {counted} accepted readings"
    );
    anyhow::ensure!(
        runs_ok >= triggered.load(Ordering::Relaxed) as f64,
        "fewer good runs counted than triggered"
    );
    anyhow::ensure!(
        end_rss <= warm_max + 64 * 1024,
        "memory grew past the first minute's by more than 64 MiB"
    );
    println!("soak checks: all passed");
    Ok(())
}

/// Posts batches of 100 readings a minute apart, each batch every 50 ms;
/// returns the acknowledged times (Unix ms), in order.
async fn write_loop(
    client: reqwest::Client,
    base: String,
    token: String,
    stop: Arc<AtomicBool>,
) -> anyhow::Result<Vec<i64>> {
    // Far enough back that no reading of a long soak reaches the present
    // (a reading ahead of the server clock is refused on its own row).
    let t0 = chrono::Utc::now() - chrono::Duration::days(3 * 365);
    let mut acknowledged = Vec::new();
    let mut k = 0i64;
    while !stop.load(Ordering::Relaxed) {
        let times: Vec<i64> = (k..k + 100)
            .map(|m| (t0 + chrono::Duration::minutes(m)).timestamp_millis())
            .collect();
        k += 100;
        let rows: Vec<_> = times
            .iter()
            .map(|&ms| json!({"time": reachcast::wire_time::format(chrono::DateTime::from_timestamp_millis(ms).unwrap_or_default()), "stage": 1.5 + 0.5 * ((ms / 60_000) as f64 / 500.0).sin()}))
            .collect();
        let res = client
            .post(format!("{base}/api/gauges/{GAUGE}/readings"))
            .bearer_auth(&token)
            .json(&json!({"readings": rows}))
            .send()
            .await?;
        if res.status().is_success() {
            // A 200 acknowledges the rows it counts as accepted; all of
            // them are expected to be.
            let body: serde_json::Value = res.json().await?;
            anyhow::ensure!(
                body["accepted"] == 100,
                "a batch was partly refused: {body}"
            );
            acknowledged.extend(times);
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    Ok(acknowledged)
}

async fn read_loop(
    client: reqwest::Client,
    base: String,
    stop: Arc<AtomicBool>,
    reads: Arc<AtomicU64>,
) -> anyhow::Result<()> {
    let paths = [
        "/",
        "/api/reaches/brindlemoor/forecast",
        "/api/exceedances",
        "/api/reaches/brindlemoor/profile",
    ];
    let mut i = 0;
    while !stop.load(Ordering::Relaxed) {
        let res = client
            .get(format!("{base}{}", paths[i % paths.len()]))
            .send()
            .await?;
        anyhow::ensure!(
            res.status().is_success() || res.status() == 404,
            "{} {}",
            paths[i % paths.len()],
            res.status()
        );
        res.bytes().await?;
        reads.fetch_add(1, Ordering::Relaxed);
        i += 1;
    }
    Ok(())
}

async fn run_loop(
    client: reqwest::Client,
    base: String,
    token: String,
    stop: Arc<AtomicBool>,
    triggered: Arc<AtomicU64>,
) -> anyhow::Result<()> {
    while !stop.load(Ordering::Relaxed) {
        tokio::time::sleep(Duration::from_secs(5)).await;
        let res = client
            .post(format!("{base}/api/reaches/brindlemoor/runs?wait=true"))
            .bearer_auth(&token)
            .send()
            .await?;
        if res.status().is_success() {
            triggered.fetch_add(1, Ordering::Relaxed);
        }
    }
    Ok(())
}

/// A sample's value in the Prometheus text, 0 when absent.
fn metric(text: &str, name: &str) -> f64 {
    text.lines()
        .find_map(|l| l.strip_prefix(name)?.trim().parse().ok())
        .unwrap_or(0.0)
}

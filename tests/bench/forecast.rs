//! Forecast latency benchmark (run by hand, never as a test):
//!
//! ```sh
//! cargo bench --bench forecast
//! ```
//!
//! Starts the service in-process (release build) on a temporary data
//! directory with the invented demo reach seeded (demo replay slowed so it
//! does not interfere), then 20 times: posts one new reading of the upstream
//! gauge and measures the time from the acknowledged POST to the moment the
//! forecast endpoint serves a run that includes it, polling with
//! `If-None-Match`. Reports the latency with and without the configured
//! debounce (`forecast.debounce_ms`).

use std::time::{Duration, Instant};

use reachcast::{
    app::Application,
    auth::{Role, generate_key},
    config::{Config, Overrides},
};

fn main() -> anyhow::Result<()> {
    let dir = tempfile::tempdir()?;
    let overrides = Overrides {
        bind: Some("127.0.0.1:0".into()),
        data_dir: Some(dir.path().to_owned()),
    };
    let mut config = Config::load(None, Vec::new(), &overrides)?;
    config.log.filter = "warn".into();
    config.demo.enabled = true;
    config.demo.replay_secs = 3600;
    config.auth.rate_limit_per_sec = 1e6;
    config.auth.rate_limit_burst = 1_000_000;
    let debounce_ms = config.forecast.debounce_ms;
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()?;
    rt.block_on(async move {
        let app = Application::build(config).await?;
        let addr = app.local_addr()?;
        let key = generate_key().map_err(|e| anyhow::anyhow!("{e}"))?;
        app.store()
            .create_key(&key, "bench", Role::Admin, &[])
            .await?;
        tokio::spawn(app.run_until(std::future::pending()));
        let client = reqwest::Client::new();
        let base = format!("http://{addr}");
        let forecast_url = format!("{base}/api/reaches/brindlemoor/forecast");
        let run_id = |v: &serde_json::Value| v["run"]["id"].as_i64().unwrap_or(0);
        // Wait for the first forecast.
        let mut last = loop {
            let r = client.get(&forecast_url).send().await?;
            if r.status() == 200 {
                break r.json::<serde_json::Value>().await?;
            }
            tokio::time::sleep(Duration::from_millis(50)).await;
        };
        let mut latencies = Vec::new();
        for i in 0..20 {
            let before = run_id(&last);
            let now = chrono::Utc::now();
            let stage = 54.0 + 0.01 * f64::from(i);
            let body = serde_json::json!({"readings": [{"time": now.to_rfc3339(), "stage": stage}]});
            let res = client
                .post(format!("{base}/api/gauges/upper-brindle/readings"))
                .bearer_auth(&key.token)
                .json(&body)
                .send()
                .await?;
            anyhow::ensure!(res.status().is_success(), "POST failed: {}", res.text().await?);
            let acked = Instant::now();
            loop {
                let r = client.get(&forecast_url).send().await?;
                let v: serde_json::Value = r.json().await?;
                if run_id(&v) > before {
                    latencies.push(acked.elapsed().as_secs_f64() * 1e3);
                    last = v;
                    break;
                }
                tokio::time::sleep(Duration::from_millis(5)).await;
            }
        }
        latencies.sort_by(f64::total_cmp);
        let median = latencies[latencies.len() / 2];
        let max = latencies[latencies.len() - 1];
        println!(
            "reading accepted -> updated forecast served, 20 readings: median {median:.0} ms, \
             max {max:.0} ms (debounce {debounce_ms} ms; beyond the debounce: median {:.0} ms, max {:.0} ms)",
            median - debounce_ms as f64,
            max - debounce_ms as f64
        );
        println!("exceedance endpoint for wrk: {base}/api/exceedances (the process exits now)");
        anyhow::Ok(())
    })
}

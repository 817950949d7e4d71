//! Ingest and read benchmark, run by hand against the release build:
//!
//! ```sh
//! cargo bench --bench ingest                    # in-process server
//! cargo bench --bench ingest -- --url http://127.0.0.1:8080 --key rck_... [--prefix run2]
//! ```
//!
//! Against a running server, gauges `<prefix>-1 …` are created (default
//! prefix `bench`); use a new `--prefix` for each run so the readings are
//! new rather than duplicates.
//!
//! Phase 1 posts `--readings` readings in JSON batches of `--batch` from
//! `--writers` concurrent clients (one gauge each) and reports readings per
//! second. Phase 2 sends `GET /api/gauges/bench-1/readings` (the latest 500)
//! from `--connections` concurrent connections for `--seconds` and reports
//! requests per second and latency percentiles. With no `--url` the server
//! runs in this process on its own runtime, on a temporary data directory
//! with WAL and synchronous=FULL, as in production.
//! Not a test: numbers depend on the machine; see README "Performance".

use std::{
    sync::Arc,
    time::{Duration, Instant},
};

use reachcast::{
    app::Application,
    auth,
    config::{Config, Overrides},
    store::Store,
};
use serde_json::json;

struct Args {
    url: Option<String>,
    key: Option<String>,
    prefix: String,
    readings: usize,
    batch: usize,
    writers: usize,
    connections: usize,
    seconds: u64,
}

fn parse_args() -> Result<Args, String> {
    let mut a = Args {
        url: None,
        key: None,
        prefix: "bench".into(),
        readings: 1_000_000,
        batch: 5_000,
        writers: 2,
        connections: 50,
        seconds: 10,
    };
    let mut it = std::env::args().skip(1);
    while let Some(flag) = it.next() {
        let mut value = || it.next().ok_or(format!("{flag} needs a value"));
        let num = |v: String| v.parse::<usize>().map_err(|e| format!("{flag}: {e}"));
        match flag.as_str() {
            "--url" => a.url = Some(value()?),
            "--key" => a.key = Some(value()?),
            "--prefix" => a.prefix = value()?,
            "--readings" => a.readings = num(value()?)?,
            "--batch" => a.batch = num(value()?)?,
            "--writers" => a.writers = num(value()?)?,
            "--connections" => a.connections = num(value()?)?,
            "--seconds" => a.seconds = num(value()?)? as u64,
            other => return Err(format!("unknown option {other}")),
        }
    }
    if a.batch == 0 || a.writers == 0 || a.connections == 0 {
        return Err("--batch, --writers and --connections must be at least 1".into());
    }
    Ok(a)
}

/// 2020-01-01T00:00:00Z in Unix ms; readings are one minute apart, so a
/// million readings end in late 2021, well in the past.
const T0: i64 = 1_577_836_800_000;

fn body(first: usize, n: usize) -> Vec<u8> {
    let readings: Vec<_> = (first..first + n)
        .map(|i| {
            json!({
                "time": reachcast::gauge::readings::format_time(T0 + i as i64 * 60_000),
                "stage": 2.0 + 0.001 * ((i % 1000) as f64),
                "quality": "good"
            })
        })
        .collect();
    serde_json::to_vec(&json!({ "readings": readings })).unwrap_or_default()
}

fn percentile(sorted: &[Duration], p: f64) -> Duration {
    if sorted.is_empty() {
        return Duration::ZERO;
    }
    let i = ((sorted.len() as f64 - 1.0) * p).round() as usize;
    sorted[i.min(sorted.len() - 1)]
}

fn main() -> anyhow::Result<()> {
    let args = parse_args().map_err(anyhow::Error::msg)?;
    let _dir;
    let _server_rt;
    let (url, key) = match (&args.url, &args.key) {
        (Some(u), Some(k)) => (u.trim_end_matches('/').to_owned(), k.clone()),
        (Some(_), None) => anyhow::bail!("--url needs --key (an admin key)"),
        _ => {
            let dir = tempfile::tempdir()?;
            let overrides = Overrides {
                bind: Some("127.0.0.1:0".into()),
                data_dir: Some(dir.path().to_owned()),
            };
            let mut config = Config::load(None, Vec::new(), &overrides)?;
            config.demo.enabled = false;
            config.log.filter = "warn".into();
            config.auth.rate_limit_per_sec = 1_000_000.0;
            config.auth.rate_limit_burst = 1_000_000;
            config.ingest.max_rows_per_request = args.batch.max(1);
            reachcast::telemetry::init(&config.log.filter, false);
            let rt = tokio::runtime::Builder::new_multi_thread()
                .worker_threads(2)
                .enable_all()
                .build()?;
            let storage = config.storage.clone();
            let (addr, key) = rt.block_on(async move {
                let store = Store::open_for_maintenance(&storage).await?;
                let k = auth::generate_key().map_err(|e| anyhow::anyhow!("random: {e}"))?;
                store
                    .create_key(&k, "bench", auth::Role::Admin, &[])
                    .await?;
                store.close().await;
                let app = Application::build(config).await?;
                let addr = app.local_addr()?;
                tokio::spawn(app.run_until(std::future::pending()));
                anyhow::Ok((addr, k.token))
            })?;
            _dir = dir;
            _server_rt = rt;
            (format!("http://{addr}"), key)
        }
    };
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()?;
    rt.block_on(run(args, url, key))
}

async fn run(args: Args, url: String, key: String) -> anyhow::Result<()> {
    let client = reqwest::Client::builder()
        .pool_max_idle_per_host(args.connections.max(args.writers))
        .build()?;
    for w in 1..=args.writers {
        let res = client
            .put(format!("{url}/api/gauges/{}-{w}", args.prefix))
            .bearer_auth(&key)
            .json(&json!({"name": format!("Bench {w}"), "measures": "stage",
                "stage_min_m": 0.0, "stage_max_m": 20.0, "max_rise_m_per_h": 50.0}))
            .send()
            .await?;
        anyhow::ensure!(res.status().is_success(), "PUT gauge: {}", res.status());
    }

    // Phase 1: ingest. Bodies are built before the clock starts.
    let per_writer = args.readings / args.writers;
    let batches_per_writer = per_writer.div_ceil(args.batch);
    let offset = 0;
    let mut bodies: Vec<Vec<(usize, Vec<u8>)>> = Vec::new();
    for _ in 0..args.writers {
        let mut mine = Vec::new();
        for b in 0..batches_per_writer {
            let first = b * args.batch;
            let n = args.batch.min(per_writer - first);
            mine.push((n, body(offset + first, n)));
        }
        bodies.push(mine);
    }
    let bytes: usize = bodies.iter().flatten().map(|(_, b)| b.len()).sum();
    println!(
        "ingest: {} readings, batches of {}, {} writers, {:.1} MB of JSON",
        per_writer * args.writers,
        args.batch,
        args.writers,
        bytes as f64 / 1e6
    );
    let started = Instant::now();
    let mut tasks = Vec::new();
    for (w, mine) in bodies.into_iter().enumerate() {
        let (client, url, key) = (client.clone(), url.clone(), key.clone());
        let prefix = args.prefix.clone();
        tasks.push(tokio::spawn(async move {
            let mut latencies = Vec::new();
            let mut stored = 0usize;
            for (n, b) in mine {
                let t = Instant::now();
                let res = client
                    .post(format!("{url}/api/gauges/{prefix}-{}/readings", w + 1))
                    .bearer_auth(&key)
                    .header("content-type", "application/json")
                    .body(b)
                    .send()
                    .await?;
                anyhow::ensure!(res.status() == 200, "POST: {}", res.status());
                let report: serde_json::Value = res.json().await?;
                let got = report["accepted"].as_u64().unwrap_or(0) as usize
                    + report["duplicate"].as_u64().unwrap_or(0) as usize;
                anyhow::ensure!(got == n, "batch not fully stored: {report}");
                stored += n;
                latencies.push(t.elapsed());
            }
            anyhow::Ok((stored, latencies))
        }));
    }
    let mut stored = 0;
    let mut latencies = Vec::new();
    for t in tasks {
        let (n, l) = t.await??;
        stored += n;
        latencies.extend(l);
    }
    let elapsed = started.elapsed();
    latencies.sort();
    println!(
        "ingest: {stored} readings in {:.2} s = {:.0} readings/s; per batch p50 {:.1} ms, p99 {:.1} ms",
        elapsed.as_secs_f64(),
        stored as f64 / elapsed.as_secs_f64(),
        percentile(&latencies, 0.5).as_secs_f64() * 1e3,
        percentile(&latencies, 0.99).as_secs_f64() * 1e3
    );

    // Phase 2: latest 500 readings of one gauge, from many connections.
    let get_url = Arc::new(format!("{url}/api/gauges/{}-1/readings", args.prefix));
    let probe = client.get(get_url.as_str()).send().await?;
    let probe_len = probe.bytes().await?.len();
    println!(
        "read: GET {get_url} ({probe_len} bytes), {} connections, {} s",
        args.connections, args.seconds
    );
    let deadline = Instant::now() + Duration::from_secs(args.seconds);
    let started = Instant::now();
    let mut tasks = Vec::new();
    for _ in 0..args.connections {
        let (client, get_url) = (client.clone(), get_url.clone());
        tasks.push(tokio::spawn(async move {
            let mut lat = Vec::new();
            while Instant::now() < deadline {
                let t = Instant::now();
                let res = client.get(get_url.as_str()).send().await?;
                anyhow::ensure!(res.status() == 200, "GET: {}", res.status());
                let _ = res.bytes().await?;
                lat.push(t.elapsed());
            }
            anyhow::Ok(lat)
        }));
    }
    let mut lat = Vec::new();
    for t in tasks {
        lat.extend(t.await??);
    }
    let elapsed = started.elapsed();
    lat.sort();
    println!(
        "read: {} requests in {:.2} s = {:.0} req/s; latency p50 {:.2} ms, p99 {:.2} ms, max {:.2} ms",
        lat.len(),
        elapsed.as_secs_f64(),
        lat.len() as f64 / elapsed.as_secs_f64(),
        percentile(&lat, 0.5).as_secs_f64() * 1e3,
        percentile(&lat, 0.99).as_secs_f64() * 1e3,
        lat.last().copied().unwrap_or_default().as_secs_f64() * 1e3
    );
    Ok(())
}

//! Crash durability of acknowledged writes, with the real binary: readings
//! are streamed to the server, every acknowledged batch is recorded, the
//! server is killed with SIGKILL at a different moment in each round, and
//! after each kill every acknowledged reading must be in the database and
//! `PRAGMA integrity_check` must answer `ok` (SQLite documentation, PRAGMA
//! integrity_check). WAL with synchronous=FULL is what makes this hold
//! (SQLite documentation, PRAGMA synchronous).
#![cfg(unix)]

use std::{
    collections::BTreeSet,
    path::Path,
    process::Child,
    sync::{Arc, Mutex},
};

use reachcast::store::ReadingsQuery;
use serde_json::{Value, json};

use crate::common::{
    binary::{Server, created_token, keys, serve},
    open_store,
};

const BATCH: i64 = 100;
/// 2025-01-01T00:00:00Z in Unix ms.
const T0: i64 = 1_735_689_600_000;

/// Starts the server with a rate limit no writer reaches and returns it
/// with its address; the rest of its log is drained by a thread.
fn start(dir: &Path) -> (Child, String) {
    let Server { child, addr, log } = serve(
        dir,
        &[
            ("REACHCAST_AUTH_RATE_LIMIT_PER_SEC", "100000.0"),
            ("REACHCAST_AUTH_RATE_LIMIT_BURST", "100000"),
        ],
    );
    std::thread::spawn(move || for _ in log {});
    (child, addr)
}

/// Opens the file directly: integrity check, then the set of stored times.
async fn stored_times(dir: &Path) -> BTreeSet<i64> {
    let store = open_store(dir).await;
    assert!(
        store.integrity_ok().await.expect("integrity_check"),
        "PRAGMA integrity_check is not ok"
    );
    let all = store
        .readings(
            "kill-test",
            ReadingsQuery {
                from_ms: i64::MIN,
                to_ms: i64::MAX,
                newest_first: false,
                limit: 10_000_000,
            },
        )
        .await
        .expect("read back");
    store.close().await;
    all.into_iter().map(|r| r.time_ms).collect()
}

fn batch(first: i64) -> Value {
    let readings: Vec<Value> = (first..first + BATCH)
        .map(|i| {
            json!({
                "time": reachcast::gauge::readings::format_time(T0 + i * 60_000),
                "stage": 2.0 + 0.01 * ((i % 50) as f64),
                "quality": "good"
            })
        })
        .collect();
    json!({ "readings": readings })
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn acknowledged_readings_survive_sigkill() {
    let dir = tempfile::tempdir().expect("temp dir");
    let data = dir.path().join("data");
    let key = created_token(keys(
        &data,
        &["create", "--name", "kill test", "--role", "admin"],
    ));
    assert!(key.starts_with("rck_"), "{key}");

    let client = reqwest::Client::new();
    let acked: Arc<Mutex<BTreeSet<i64>>> = Arc::default();
    let next_index = Arc::new(std::sync::atomic::AtomicI64::new(0));
    // Acknowledged batches to wait for before each kill: early, mid-stream,
    // right after start, later.
    for (round, kill_after) in [3usize, 9, 1, 15].into_iter().enumerate() {
        let (mut child, addr) = start(&data);
        if round == 0 {
            let res = client
                .put(format!("http://{addr}/api/gauges/kill-test"))
                .bearer_auth(&key)
                .json(&json!({"name": "Kill Test", "measures": "stage",
                    "stage_min_m": 0.0, "stage_max_m": 10.0, "max_rise_m_per_h": 5.0}))
                .send()
                .await
                .expect("PUT gauge");
            assert_eq!(res.status(), 201);
        }
        let (tx, mut rx) = tokio::sync::mpsc::unbounded_channel::<()>();
        // Two writers, so a request is usually in flight at the kill.
        let mut writers = Vec::new();
        for _ in 0..2 {
            let (client, key, addr, acked, next_index, tx) = (
                client.clone(),
                key.clone(),
                addr.clone(),
                acked.clone(),
                next_index.clone(),
                tx.clone(),
            );
            writers.push(tokio::spawn(async move {
                loop {
                    let first = next_index.fetch_add(BATCH, std::sync::atomic::Ordering::SeqCst);
                    let sent = client
                        .post(format!("http://{addr}/api/gauges/kill-test/readings"))
                        .bearer_auth(&key)
                        .json(&batch(first))
                        .send()
                        .await;
                    let Ok(res) = sent else { break };
                    if res.status() != 200 {
                        break;
                    }
                    let Ok(report) = res.json::<Value>().await else {
                        break;
                    };
                    assert_eq!(report["accepted"], BATCH, "{report}");
                    acked
                        .lock()
                        .expect("lock")
                        .extend((first..first + BATCH).map(|i| T0 + i * 60_000));
                    if tx.send(()).is_err() {
                        break;
                    }
                }
            }));
        }
        drop(tx);
        for _ in 0..kill_after {
            rx.recv().await.expect("a batch acknowledged");
        }
        child.kill().expect("SIGKILL");
        child.wait().expect("reap");
        for w in writers {
            w.await.expect("writer");
        }
        let acknowledged = acked.lock().expect("lock").clone();
        let stored = stored_times(&data).await;
        let missing: Vec<&i64> = acknowledged.difference(&stored).collect();
        assert!(
            missing.is_empty(),
            "round {round}: {} acknowledged readings lost, e.g. {:?}",
            missing.len(),
            missing.first()
        );
        assert!(acknowledged.len() >= kill_after * BATCH as usize);
    }

    // A last restart serves everything acknowledged over HTTP.
    let (mut child, addr) = start(&data);
    let acknowledged = acked.lock().expect("lock").clone();
    let page: Value = client
        .get(format!(
            "http://{addr}/api/gauges/kill-test/readings?order=oldest&limit=10000"
        ))
        .send()
        .await
        .expect("GET")
        .json()
        .await
        .expect("json");
    let served: BTreeSet<i64> = page["readings"]
        .as_array()
        .expect("readings")
        .iter()
        .map(|r| {
            reachcast::gauge::readings::parse_time(r["time"].as_str().expect("time"))
                .expect("rfc 3339")
        })
        .collect();
    assert!(acknowledged.is_subset(&served));
    child.kill().expect("kill");
    child.wait().expect("reap");
}

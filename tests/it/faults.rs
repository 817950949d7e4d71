//! Faults an unattended install meets (issue "Operations", part 6), on the
//! real server and SQLite file: each gives a clear answer, a visible state
//! on `/ready`, and loses nothing acknowledged.

use sqlx::{ConnectOptions, Connection};

use reachcast::config::Config;

use crate::common::{Keys, TestApp, gauge_body, json_of, problem, spawn_app_with, test_config};

/// A connection of its own to the app's database file, as another
/// process would open it.
async fn other_connection(data_dir: &std::path::Path) -> sqlx::SqliteConnection {
    sqlx::sqlite::SqliteConnectOptions::new()
        .filename(data_dir.join("reachcast.sqlite3"))
        .connect()
        .await
        .expect("second connection")
}

/// The app on `config` with the gauge `id` created.
async fn app_with_gauge(config: Config, id: &str) -> (TestApp, Keys) {
    let app = spawn_app_with(config).await;
    let keys = app.keys(id).await;
    let res = app
        .put_gauge(&keys.admin, id, &gauge_body("Fault gauge"))
        .await;
    json_of(res, 201).await;
    (app, keys)
}

/// Posts batches of 500 readings to `gauge` until one is refused with a
/// 503 that says nothing was changed (at most `batches`); the times of
/// every acknowledged reading.
async fn fill_until_refused(app: &TestApp, keys: &Keys, gauge: &str, batches: i64) -> Vec<i64> {
    let t0 = chrono::DateTime::parse_from_rfc3339("2026-11-01T00:00:00Z").unwrap();
    let mut acknowledged = Vec::new();
    for batch in 0..batches {
        let times: Vec<i64> = (0..500)
            .map(|k| (t0 + chrono::Duration::minutes(batch * 500 + k)).timestamp_millis())
            .collect();
        let rows: Vec<serde_json::Value> = times
            .iter()
            .map(|&ms| {
                let t = chrono::DateTime::from_timestamp_millis(ms).unwrap();
                serde_json::json!({"time": t.to_rfc3339(), "stage": 1.25, "quality": "good"})
            })
            .collect();
        let body = serde_json::json!({"readings": rows});
        let res = app.post_readings(&keys.gauge, gauge, &body).await;
        if res.status() == 503 {
            let p: serde_json::Value = res.json().await.expect("problem");
            let detail = p["detail"].as_str().unwrap_or_default();
            assert!(detail.contains("nothing was changed"), "{p}");
            assert!(!acknowledged.is_empty(), "the first batch was refused");
            return acknowledged;
        }
        assert_eq!(json_of(res, 200).await["accepted"], 500);
        acknowledged.extend(times);
    }
    panic!("{batches} batches of 500 readings were all acknowledged: nothing filled up");
}

/// The times of every stored reading of `gauge`.
async fn stored_times(app: &TestApp, gauge: &str) -> Vec<i64> {
    app.store
        .readings_for_forecast(gauge, i64::MIN, i64::MAX)
        .await
        .expect("readings")
        .iter()
        .map(|r| r.time_ms)
        .collect()
}

/// The database locked by another process (here another connection to the
/// same file, which SQLite locks the same way): a write waits
/// `storage.busy_timeout_ms`, then is refused with a 503 problem that says
/// nothing was changed; `/ready` answers 503 naming the failing writes;
/// once the lock is gone, writes go on, `/ready` recovers, and exactly the
/// acknowledged readings are stored.
#[tokio::test]
async fn a_database_locked_by_another_process_refuses_writes_visibly() {
    let dir = tempfile::tempdir().expect("temp dir");
    let mut config = test_config(dir.path());
    config.storage.busy_timeout_ms = 300;
    let (app, keys) = app_with_gauge(config, "lock-gauge").await;
    let reading = |t: &str| serde_json::json!({"readings": [{"time": t, "stage": 1.5}]});

    let mut other = other_connection(dir.path()).await;
    sqlx::query("BEGIN EXCLUSIVE")
        .execute(&mut other)
        .await
        .expect("lock");
    let res = app
        .post_readings(&keys.gauge, "lock-gauge", &reading("2026-12-01T00:00:00Z"))
        .await;
    let p = problem(res, 503).await;
    assert!(
        p["detail"]
            .as_str()
            .unwrap()
            .contains("nothing was changed"),
        "{p}"
    );
    let p = problem(app.get("/ready").await, 503).await;
    assert!(
        p["detail"].as_str().unwrap().contains("writes are failing"),
        "{p}"
    );

    sqlx::query("COMMIT")
        .execute(&mut other)
        .await
        .expect("unlock");
    other.close().await.expect("close");
    let res = app
        .post_readings(&keys.gauge, "lock-gauge", &reading("2026-12-01T00:15:00Z"))
        .await;
    let ok = json_of(res, 200).await;
    assert_eq!(ok["accepted"], 1, "{ok}");
    let (status, ready) = app.get_json("/ready").await;
    assert_eq!(status, 200, "{ready}");
    assert!(
        ready["writes"]["last_failure"]["error"]
            .as_str()
            .unwrap()
            .contains("locked")
    );
    let stored = app
        .store
        .readings_for_forecast("lock-gauge", i64::MIN, i64::MAX)
        .await
        .expect("readings");
    let times: Vec<i64> = stored.iter().map(|r| r.time_ms).collect();
    let acknowledged = chrono::DateTime::parse_from_rfc3339("2026-12-01T00:15:00Z").unwrap();
    assert_eq!(times, [acknowledged.timestamp_millis()]);
    app.stop().await;
}

/// The database filling up, made with SQLite's own size limit
/// (`storage.max_size_mib`, `PRAGMA max_page_count`; needs no mount, so it
/// runs where the tmpfs test above is skipped): batches are acknowledged until the database is full,
/// then refused with a 503 that says nothing was changed, `/ready` says
/// writes are failing, and after a restart with room again every
/// acknowledged reading is there and no refused one is.
#[tokio::test]
async fn a_full_database_refuses_batches_whole_and_loses_nothing_acknowledged() {
    let dir = tempfile::tempdir().expect("temp dir");
    let mut config = test_config(dir.path());
    config.storage.max_size_mib = 1;
    let (app, keys) = app_with_gauge(config.clone(), "full-gauge").await;
    let acknowledged = fill_until_refused(&app, &keys, "full-gauge", 200).await;
    let p = problem(app.get("/ready").await, 503).await;
    assert!(
        p["detail"].as_str().unwrap().contains("writes are failing"),
        "{p}"
    );
    app.stop().await;

    config.storage.max_size_mib = 0;
    let app = spawn_app_with(config).await;
    assert_eq!(stored_times(&app, "full-gauge").await, acknowledged);
    let (status, _) = app.get_json("/ready").await;
    assert_eq!(status, 200);
    app.stop().await;
}

/// A small tmpfs mounted for one test (the machine's own file system is
/// never filled); unmounted when dropped, panic or not.
struct SmallDisk {
    dir: tempfile::TempDir,
}

impl SmallDisk {
    /// Mounts `mib` MiB, or `None` where mounting is not allowed (not root,
    /// or a container without the capability).
    fn mount(mib: u64) -> Option<Self> {
        let dir = tempfile::tempdir().ok()?;
        let size = format!("size={mib}m");
        let ok = std::process::Command::new("mount")
            .args(["-t", "tmpfs", "-o", &size, "tmpfs"])
            .arg(dir.path())
            .stderr(std::process::Stdio::null())
            .status()
            .is_ok_and(|s| s.success());
        ok.then_some(Self { dir })
    }

    fn resize(&self, mib: u64) {
        let opts = format!("remount,size={mib}m");
        let ok = std::process::Command::new("mount")
            .args(["-o", &opts])
            .arg(self.dir.path())
            .status()
            .is_ok_and(|s| s.success());
        assert!(ok, "remounting the tmpfs larger");
    }
}

impl Drop for SmallDisk {
    fn drop(&mut self) {
        let _ = std::process::Command::new("umount")
            .arg("-l")
            .arg(self.dir.path())
            .status();
    }
}

/// The disk really filling up: the data directory on a 4 MiB tmpfs.
/// Batches are acknowledged until SQLite cannot grow its files, then
/// refused whole with a 503 that says nothing was changed; `/ready`, which
/// answered 200 on the empty disk, answers 503 naming the free space under
/// the floor; after the file system is made larger and the service
/// restarted, every acknowledged reading is there and no refused one is.
/// Skipped, saying so, where the test may not mount a file system.
#[tokio::test]
async fn a_full_disk_refuses_batches_whole_and_loses_nothing_acknowledged() {
    let Some(disk) = SmallDisk::mount(4) else {
        eprintln!("skipped: mounting a tmpfs is not permitted here");
        return;
    };
    let mut config = test_config(disk.dir.path());
    config.storage.min_free_mib = 1;
    let (app, keys) = app_with_gauge(config.clone(), "disk-gauge").await;
    let (status, ready) = app.get_json("/ready").await;
    assert_eq!(status, 200, "{ready}");
    let acknowledged = fill_until_refused(&app, &keys, "disk-gauge", 400).await;
    let p = problem(app.get("/ready").await, 503).await;
    let detail = p["detail"].as_str().unwrap_or_default();
    assert!(detail.contains("MiB free under the data directory"), "{p}");
    app.stop().await;

    disk.resize(64);
    let app = spawn_app_with(config).await;
    assert_eq!(stored_times(&app, "disk-gauge").await, acknowledged);
    let (status, ready) = app.get_json("/ready").await;
    assert_eq!(status, 200, "{ready}");
    app.stop().await;
}

/// The clock jumping back: a good run that finished an hour "in the
/// future" of now (what a clock set back an hour sees; made here by moving
/// the stored finish time through another connection) makes `/ready`
/// answer 503 saying the clock went back. A clock jumping forward makes
/// every forecast older than its schedule allows, which the forecast
/// already reports as stale (`forecast_cycle::silent_gauge_marks_the_forecast_stale`).
#[tokio::test]
async fn a_clock_set_back_is_reported_by_ready() {
    let s = crate::common::ReachApp::start(
        |c| c.forecast.debounce_ms = 600_000,
        (
            "clock-reach",
            &crate::common::bridge_reach("Clock reach (invented)", "Clock Bridge", "clock-gauge"),
        ),
        (
            "clock-gauge",
            &crate::common::reach_gauge("Clock gauge", "clock-reach", "discharge", 19.0, 2.0),
        ),
    )
    .await;
    let now = chrono::Utc::now();
    let rows: Vec<serde_json::Value> = (0..=8)
        .map(|k| {
            let t = now - chrono::Duration::minutes(15 * (8 - k));
            serde_json::json!({"time": t.to_rfc3339(), "discharge": 30.0, "quality": "good"})
        })
        .collect();
    let res = s
        .app
        .post_readings(
            &s.keys.gauge,
            "clock-gauge",
            &serde_json::json!({"readings": rows}),
        )
        .await;
    json_of(res, 200).await;
    let r = json_of(
        s.app.run_and_wait(&s.keys.forecaster, "clock-reach").await,
        200,
    )
    .await;
    assert_eq!(r["status"], "ok", "{r}");
    let (status, _) = s.app.get_json("/ready").await;
    assert_eq!(status, 200);
    let mut other = other_connection(s.dir.path()).await;
    let ahead = reachcast::wire_time::format(now + chrono::Duration::hours(1));
    sqlx::query("UPDATE forecast_runs SET finished_at = ?1 WHERE status = 'ok'")
        .bind(&ahead)
        .execute(&mut other)
        .await
        .expect("move the finish time");
    other.close().await.expect("close");
    let p = problem(s.app.get("/ready").await, 503).await;
    let detail = p["detail"].as_str().unwrap();
    assert!(
        detail.contains("clock") && detail.contains("clock-reach"),
        "{p}"
    );
    s.app.stop().await;
}

//! Backups taken while the service runs and writes, and restores, through
//! the real binary on real SQLite files: the copy passes
//! `PRAGMA integrity_check` and holds every reading acknowledged before the
//! backup started; a restore refuses while the service has the database
//! open, and otherwise replaces it, keeping the old file.

use std::{
    collections::BTreeSet,
    path::Path,
    process::Output,
    sync::{
        Arc,
        atomic::{AtomicBool, Ordering},
    },
};

use crate::common::{TestApp, binary::reachcast, gauge_body, make_key, spawn_app};
use serde_json::{Value, json};

const GAUGE: &str = "alder-weir";

/// Posts one reading an hour from `first` hour on; the times acknowledged.
async fn post_hours(app: &TestApp, key: &str, first: i64, count: i64) -> Vec<String> {
    let start = chrono::DateTime::parse_from_rfc3339("2025-01-01T00:00:00Z").expect("time");
    let times: Vec<String> = (first..first + count)
        .map(|h| {
            let t = (start + chrono::Duration::hours(h)).with_timezone(&chrono::Utc);
            reachcast::wire_time::format(t)
        })
        .collect();
    let readings: Vec<Value> = times
        .iter()
        .map(|t| json!({"time": t, "stage": 1.25, "quality": "good"}))
        .collect();
    let res = app
        .post_readings(key, GAUGE, &json!({ "readings": readings }))
        .await;
    assert_eq!(res.status(), 200);
    times
}

/// `reachcast OP --data-dir DIR FLAG FILE` (`backup --to`, `restore --from`).
async fn op(name: &str, dir: &Path, flag: &str, file: &Path) -> Output {
    cli(vec![
        name.into(),
        "--data-dir".into(),
        arg(dir),
        flag.into(),
        arg(file),
    ])
    .await
}

async fn cli(args: Vec<String>) -> Output {
    tokio::task::spawn_blocking(move || reachcast().args(args).output().expect("run reachcast"))
        .await
        .expect("join")
}

fn arg(p: &Path) -> String {
    p.display().to_string()
}

/// Every reading time of the gauge in the database of `dir`.
async fn stored_times(dir: &Path) -> BTreeSet<String> {
    let app = spawn_app(dir).await;
    let (status, page) = app
        .get_json(&format!(
            "/api/gauges/{GAUGE}/readings?order=oldest&limit=10000"
        ))
        .await;
    assert_eq!(status, 200, "{page}");
    let times = page["readings"]
        .as_array()
        .expect("readings")
        .iter()
        .map(|r| r["time"].as_str().expect("time").to_owned())
        .collect();
    app.stop().await;
    times
}

#[tokio::test]
async fn a_backup_under_load_restores_every_acknowledged_reading() {
    let live = tempfile::tempdir().expect("dir");
    let elsewhere = tempfile::tempdir().expect("dir");
    let admin = make_key(live.path(), "admin", &[]).await;
    let logger = make_key(live.path(), "gauge", &[GAUGE]).await;
    let app = Arc::new(spawn_app(live.path()).await);
    assert_eq!(
        app.put_gauge(&admin, GAUGE, &gauge_body("Alder Weir"))
            .await
            .status(),
        201
    );
    let mut acknowledged = Vec::new();
    for batch in 0..20 {
        acknowledged.extend(post_hours(&app, &logger, batch * 50, 50).await);
    }
    // Writers go on while the backup runs.
    let stop = Arc::new(AtomicBool::new(false));
    let writer = {
        let (app, logger, stop) = (app.clone(), logger.clone(), stop.clone());
        tokio::spawn(async move {
            let mut next = 1_000;
            while !stop.load(Ordering::Relaxed) {
                post_hours(&app, &logger, next, 20).await;
                next += 20;
            }
        })
    };
    let backup = elsewhere.path().join("reachcast-backup.sqlite3");
    let out = op("backup", live.path(), "--to", &backup).await;
    stop.store(true, Ordering::Relaxed);
    writer.await.expect("writer");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(stdout.contains("integrity ok"), "{stdout}");
    // A second backup to the same file is refused, not overwritten.
    let again = op("backup", live.path(), "--to", &backup).await;
    assert!(!again.status.success());

    // While the service has the database open, restoring over it is refused.
    let refused = op("restore", live.path(), "--from", &backup).await;
    assert!(!refused.status.success());
    assert!(String::from_utf8_lossy(&refused.stderr).contains("another process"));

    // Restored elsewhere, every reading acknowledged before the backup is there.
    let restored = elsewhere.path().join("restored");
    let out = op("restore", &restored, "--from", &backup).await;
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let times = stored_times(&restored).await;
    let missing: Vec<&String> = acknowledged
        .iter()
        .filter(|t| !times.contains(*t))
        .collect();
    assert!(
        missing.is_empty(),
        "{} acknowledged readings missing",
        missing.len()
    );

    // With the service stopped, a restore replaces the database and keeps
    // the old one beside it.
    match Arc::try_unwrap(app) {
        Ok(app) => app.stop().await,
        Err(_) => panic!("the writer still holds the app"),
    }
    let out = op("restore", live.path(), "--from", &backup).await;
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let kept = std::fs::read_dir(live.path())
        .expect("dir")
        .filter_map(Result::ok)
        .any(|e| {
            e.file_name()
                .to_string_lossy()
                .starts_with("reachcast.sqlite3.before-restore-")
        });
    assert!(kept, "the replaced database is kept");
    assert!(stored_times(live.path()).await.len() >= acknowledged.len());
}

/// Scheduled backups (`backup.interval_hours`, `backup.keep`): three taken
/// an hour apart with `keep = 2` leave the two newest, each a checked,
/// complete copy; a file the schedule did not name is never deleted.
#[tokio::test]
async fn scheduled_backups_keep_the_newest_checked_copies() {
    let live = tempfile::tempdir().expect("dir");
    let app = spawn_app(live.path()).await;
    let key = make_key(live.path(), "admin", &[]).await;
    let res = app
        .put_gauge(&key, GAUGE, &gauge_body("Backup gauge"))
        .await;
    assert_eq!(res.status(), 201);
    let gauge = make_key(live.path(), "gauge", &[GAUGE]).await;
    let posted = post_hours(&app, &gauge, 0, 24).await;
    let dir = live.path().join("backups");
    std::fs::create_dir_all(&dir).expect("dir");
    std::fs::write(dir.join("operator-notes.sqlite3"), b"not ours").expect("write");
    let t0 = chrono::Utc::now();
    let mut written = Vec::new();
    for h in 0..3 {
        let now = t0 + chrono::Duration::hours(h);
        let done = reachcast::service::backups::backup_once(&app.store, &dir, 2, now)
            .await
            .expect("backup");
        assert!(done.summary.intact);
        assert_eq!(done.summary.readings as usize, posted.len());
        written.push(done.path);
    }
    let mut left: Vec<String> = std::fs::read_dir(&dir)
        .expect("list")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    left.sort();
    let name = |p: &Path| p.file_name().unwrap().to_string_lossy().into_owned();
    assert_eq!(
        left,
        [
            "operator-notes.sqlite3".to_owned(),
            name(&written[1]),
            name(&written[2])
        ]
    );
    app.stop().await;
}

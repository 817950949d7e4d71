//! The service skeleton, through a real HTTP server on a real SQLite file.

use std::process::Command;

use crate::common::{
    assert_wire_time,
    binary::{Server, reachcast, serve},
    files::{files_under, repo_path},
    problem, spawn_app,
};
use serde_json::Value;

#[tokio::test]
async fn health_answers_ok() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app(dir.path()).await;
    let res = app.get("/health").await;
    assert_eq!(res.status(), 200);
    assert!(
        res.headers().get("x-request-id").is_some(),
        "request id echoed"
    );
    let body: Value = res.json().await.expect("json");
    assert_eq!(body["status"], "ok");
    app.stop().await;
}

#[tokio::test]
async fn ready_reports_database_and_schema() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app(dir.path()).await;
    let res = app.get("/ready").await;
    assert_eq!(res.status(), 200);
    let body: Value = res.json().await.expect("json");
    assert_eq!(body["status"], "ready");
    assert_eq!(body["database"], "ok");
    assert_eq!(body["migrations"]["applied"], body["migrations"]["known"]);
    // The one wire form of a time (README, "API"): RFC 3339 UTC with
    // exactly three fraction digits and `Z`.
    for member in ["created_at", "last_start"] {
        assert_wire_time(&body["instance"][member]);
    }
    assert!(
        dir.path().join("reachcast.sqlite3").exists(),
        "database file created in data dir"
    );
    app.stop().await;
}

#[tokio::test]
async fn dashboard_page_carries_the_caution() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app(dir.path()).await;
    let res = app.get("/").await;
    assert_eq!(res.status(), 200);
    let ctype = res.headers()["content-type"]
        .to_str()
        .expect("ascii")
        .to_owned();
    assert!(ctype.starts_with("text/html"), "{ctype}");
    let etag = res.headers()["etag"].clone();
    let html = res.text().await.expect("body");
    assert!(html.contains("Advisory model output only"));
    assert!(html.contains("not an official warning"));
    // Revalidation with the ETag costs a 304 and no body.
    let again = app
        .get_with("/", "if-none-match", etag.to_str().expect("ascii"))
        .await;
    assert_eq!(again.status(), 304);
    app.stop().await;
}

#[tokio::test]
async fn unknown_api_path_is_a_problem_document() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app(dir.path()).await;
    let res = app.get("/api/nothing-here").await;
    // RFC 9457 §3: media type application/problem+json, members type/title/status.
    let body = problem(res, 404).await;
    // RFC 9457 §3.1.5: `instance` identifies this occurrence; it is the
    // path the client asked for, `/api` included (the nested router sees
    // the path without it).
    assert_eq!(body["instance"], "/api/nothing-here", "{body}");
    assert!(body["detail"].is_string(), "{body}");
    app.stop().await;
}

/// Every problem `type` the source can emit: the literal kind of each
/// `Problem::new`, `malformed-<format>` for each `Problem::malformed`,
/// `invalid-value` for `Problem::invalid`, and the kinds `problemize`
/// gives other error answers (`generic_kind`, over every 4xx and 5xx).
fn emitted_problem_types() -> std::collections::BTreeSet<String> {
    /// The string literal `text` starts with (after white space), if any.
    fn first_literal(text: &str) -> Option<&str> {
        text.trim_start().strip_prefix('"')?.split('"').next()
    }
    let files = files_under(&repo_path("src"));
    let rust_files = files
        .iter()
        .filter(|p| p.extension().is_some_and(|e| e == "rs"));
    let mut kinds = std::collections::BTreeSet::new();
    for file in rust_files {
        let text = std::fs::read_to_string(file).expect("source");
        for piece in text.split("Problem::new(").skip(1) {
            // The kind is the second argument: after the first comma.
            if let Some(kind) = piece.split_once(',').and_then(|(_, r)| first_literal(r)) {
                kinds.insert(kind.to_owned());
            }
        }
        for piece in text.split("Problem::malformed(").skip(1) {
            if let Some(format) = first_literal(piece) {
                kinds.insert(format!("malformed-{format}"));
            }
        }
        if text.contains("Problem::invalid(") {
            kinds.insert("invalid-value".to_owned());
        }
    }
    for code in 400..600 {
        if let Ok(status) = axum::http::StatusCode::from_u16(code) {
            kinds.insert(reachcast::http::error::generic_kind(status).to_owned());
        }
    }
    kinds
}

/// RFC 9457 §3.1.1: a `type` URI, when dereferenced, should give
/// human-readable documentation of the problem type. Every type the code
/// can emit resolves to a page (200, HTML) and the catalogue holds no type
/// the code never emits; an unknown type is a 404 problem.
#[tokio::test]
async fn every_problem_type_resolves_to_its_page() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app(dir.path()).await;
    let kinds = emitted_problem_types();
    assert!(kinds.len() >= 15, "{kinds:?}");
    for kind in &kinds {
        let res = app.get(&format!("/problems/{kind}")).await;
        assert_eq!(res.status(), 200, "/problems/{kind}");
        let ctype = res.headers()["content-type"]
            .to_str()
            .expect("ascii")
            .to_owned();
        assert!(ctype.starts_with("text/html"), "{kind}: {ctype}");
        let html = res.text().await.expect("body");
        assert!(html.contains(&format!("/problems/{kind}")), "{html}");
        assert!(html.contains("<h1>"), "{html}");
    }
    let catalogued: std::collections::BTreeSet<String> = reachcast::http::error::PROBLEM_TYPES
        .iter()
        .map(|t| t.slug.to_owned())
        .collect();
    assert_eq!(&catalogued, &kinds, "catalogue and code agree");
    let res = app.get("/problems/no-such-problem").await;
    assert_eq!(res.status(), 404);
    assert_eq!(res.headers()["content-type"], "application/problem+json");
    app.stop().await;
}

#[tokio::test]
async fn restart_on_same_data_dir_keeps_what_was_written() {
    let dir = tempfile::tempdir().expect("temp dir");
    let first = spawn_app(dir.path()).await;
    let (_, a) = first.get_json("/ready").await;
    first.stop().await;

    let second = spawn_app(dir.path()).await;
    let (_, b) = second.get_json("/ready").await;
    assert_eq!(a["instance"]["instance_id"], b["instance"]["instance_id"]);
    assert_eq!(a["instance"]["created_at"], b["instance"]["created_at"]);
    assert_eq!(
        b["instance"]["start_count"].as_i64().expect("count"),
        a["instance"]["start_count"].as_i64().expect("count") + 1
    );
    second.stop().await;
}

/// The real binary refuses to start on a bad value and names the key.
#[test]
fn bad_config_value_fails_start_naming_the_key() {
    let dir = tempfile::tempdir().expect("temp dir");
    // Starts with the configuration file `name` holding `text`; the start
    // must fail before anything is written. Returns standard error.
    let refused = |name: &str, text: &[u8]| -> String {
        let cfg = dir.path().join(name);
        std::fs::write(&cfg, text).expect("write");
        let out = reachcast()
            .args(["--config"])
            .arg(&cfg)
            .args(["--data-dir"])
            .arg(dir.path().join("data"))
            .output()
            .expect("run binary");
        assert!(!out.status.success());
        assert!(
            !dir.path().join("data").exists(),
            "nothing written before config is valid"
        );
        String::from_utf8_lossy(&out.stderr).into_owned()
    };
    let stderr = refused("bad.toml", b"[server]\nshutdown_grace_secs = \"later\"\n");
    assert!(stderr.contains("server.shutdown_grace_secs"), "{stderr}");
    // A corrupted file (cut off mid-write, with a stray byte): the start
    // stops naming the file.
    let stderr = refused("broken.toml", b"[server]\nbind = \"127.0.0.1:80\xff\n[stor");
    assert!(stderr.contains("broken.toml"), "{stderr}");

    let out = reachcast()
        .env("REACHCAST_STORAGE_MAX_CONNECTIONS", "0")
        .args(["--data-dir"])
        .arg(dir.path().join("data"))
        .output()
        .expect("run binary");
    assert!(!out.status.success());
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("storage.max_connections"), "{stderr}");
    assert!(
        stderr.contains("REACHCAST_STORAGE_MAX_CONNECTIONS"),
        "{stderr}"
    );
}

/// The real binary reads an environment value as the type of its key:
/// `REACHCAST_ALERTS_SENDER=2024` is the text "2024", so the configuration
/// loads (`keys list` loads it in full, then exits); a number key given
/// `abc` stops it, naming the key and the variable.
#[test]
fn env_values_are_typed_by_their_key() {
    let dir = tempfile::tempdir().expect("temp dir");
    let keys_list = |var: &str, value: &str| {
        reachcast()
            .env(var, value)
            .args(["keys", "list", "--data-dir"])
            .arg(dir.path().join("data"))
            .output()
            .expect("run binary")
    };
    let out = keys_list("REACHCAST_ALERTS_SENDER", "2024");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{stderr}");

    let out = keys_list("REACHCAST_FORECAST_INTERVAL_MINUTES", "abc");
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("forecast.interval_minutes"), "{stderr}");
    assert!(
        stderr.contains("REACHCAST_FORECAST_INTERVAL_MINUTES"),
        "{stderr}"
    );
}

/// The real binary stops cleanly on SIGTERM (what systemd sends).
#[cfg(unix)]
#[test]
fn binary_stops_cleanly_on_sigterm() {
    let dir = tempfile::tempdir().expect("temp dir");
    // Waits for the listening line: the server is up once it is logged.
    let Server {
        mut child,
        log: lines,
        ..
    } = serve(dir.path(), &[]);
    let pid = child.id().to_string();
    let status = Command::new("kill")
        .args(["-TERM", &pid])
        .status()
        .expect("kill");
    assert!(status.success());
    let rest: Vec<String> = lines.map_while(Result::ok).collect();
    let exit = child.wait().expect("wait");
    assert!(exit.success(), "exit status {exit:?}; log: {rest:?}");
    assert!(rest.iter().any(|l| l.contains("stopped")), "{rest:?}");
}

/// `/ready` reports the free space under the data directory, which agrees
/// with coreutils `df` (an independent reading of the same statvfs) within
/// 1 %, and answers 503 naming the setting when it is below
/// `storage.min_free_mib`.
#[tokio::test]
async fn ready_reports_free_disk_space_and_refuses_below_the_floor() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app(dir.path()).await;
    let (status, body) = app.get_json("/ready").await;
    assert_eq!(status, 200, "{body}");
    let free = body["disk"]["free_bytes"].as_u64().expect("free bytes");
    let df = std::process::Command::new("df")
        .args(["-B1", "--output=avail"])
        .arg(dir.path())
        .output()
        .expect("df");
    let text = String::from_utf8_lossy(&df.stdout);
    let avail: f64 = text
        .lines()
        .nth(1)
        .expect("value line")
        .trim()
        .parse()
        .expect("number");
    assert!(
        (free as f64 - avail).abs() <= avail * 0.01,
        "{free} vs df {avail}"
    );
    assert!(body["reaches"].is_array());
    app.stop().await;

    let mut config = crate::common::test_config(dir.path());
    config.storage.min_free_mib = free / (1024 * 1024) + 1_000_000;
    let app = crate::common::spawn_app_with(config).await;
    let res = app.get("/ready").await;
    let p = crate::common::problem(res, 503).await;
    assert!(
        p["detail"]
            .as_str()
            .expect("detail")
            .contains("storage.min_free_mib"),
        "{p}"
    );
    app.stop().await;
}

/// With `log.format = json` every log line of the real binary is one JSON
/// object (RFC 8259) with a level and fields; the listening line carries
/// the address.
#[cfg(unix)]
#[test]
fn json_logs_are_one_object_per_line() {
    use std::io::{BufRead, BufReader};
    let dir = tempfile::tempdir().expect("temp dir");
    let mut child = reachcast()
        .args(["serve", "--bind", "127.0.0.1:0", "--data-dir"])
        .arg(dir.path())
        .env("REACHCAST_DEMO_ENABLED", "false")
        .env("REACHCAST_LOG_FORMAT", "json")
        .env("RUST_LOG", "info")
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("spawn");
    let stderr = child.stderr.take().expect("stderr");
    let mut seen = Vec::new();
    for line in BufReader::new(stderr).lines() {
        let line = line.expect("line");
        let v: Value = serde_json::from_str(&line).unwrap_or_else(|e| panic!("{e}: {line}"));
        assert!(v["level"].is_string() && v["fields"].is_object(), "{line}");
        let listening = v["fields"]["message"]
            .as_str()
            .is_some_and(|m| m.contains("listening"));
        seen.push(v);
        if listening {
            break;
        }
    }
    let last = seen.last().expect("a log line");
    assert!(
        last["fields"]["addr"]
            .as_str()
            .is_some_and(|a| a.starts_with("127.0.0.1:")),
        "{last}"
    );
    let _ = child.kill();
    let _ = child.wait();
}

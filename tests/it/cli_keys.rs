//! `reachcast keys create | list | revoke`, through the real binary on a
//! real data directory.

use crate::common::binary::{created_token, keys};

#[test]
fn create_list_revoke() {
    let dir = tempfile::tempdir().expect("temp dir");
    // A gauge key must name its gauges; an unknown role is refused.
    let out = keys(
        dir.path(),
        &["create", "--name", "logger", "--role", "gauge"],
    );
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("--gauge"));
    let out = keys(dir.path(), &["create", "--name", "x", "--role", "owner"]);
    assert!(!out.status.success());

    let token = created_token(keys(
        dir.path(),
        &[
            "create",
            "--name",
            "upper logger",
            "--role",
            "gauge",
            "--gauge",
            "alder-weir",
        ],
    ));
    let (id, secret) = reachcast::auth::parse_token(&token).expect("rck_<id>_<secret>");

    let out = keys(dir.path(), &["list"]);
    assert!(out.status.success());
    let list = String::from_utf8(out.stdout).expect("utf-8");
    let line = list
        .lines()
        .find(|l| l.starts_with(id))
        .expect("key listed");
    assert!(
        line.contains("\tgauge\tupper logger\talder-weir\t"),
        "{line}"
    );
    assert!(line.ends_with("\t-"), "not revoked: {line}");
    assert!(!list.contains(secret), "the secret is never shown again");
    for file in ["reachcast.sqlite3", "reachcast.sqlite3-wal"] {
        let bytes = std::fs::read(dir.path().join(file)).unwrap_or_default();
        assert!(
            !bytes.windows(secret.len()).any(|w| w == secret.as_bytes()),
            "the secret is not stored ({file})"
        );
    }

    let out = keys(dir.path(), &["revoke", id]);
    assert!(out.status.success());
    let out = keys(dir.path(), &["list"]);
    let list = String::from_utf8(out.stdout).expect("utf-8");
    let line = list
        .lines()
        .find(|l| l.starts_with(id))
        .expect("key listed");
    assert!(!line.ends_with("\t-"), "revocation time shown: {line}");
    let out = keys(dir.path(), &["revoke", "0000000000000000"]);
    assert!(!out.status.success(), "unknown id is an error");
}

//! The shipped deployment files are what their tools accept: the systemd
//! unit passes `systemd-analyze verify` (with `ExecStart` pointed at the
//! binary just built, since the unit names the installed path).
//!
//! `systemd-analyze` comes with systemd; CI installs it (`.ci/run`), and
//! with `CI` set its absence fails the test. Elsewhere the check says it
//! was not run.

use std::process::Command;

use crate::common::files::repo_path;

#[test]
fn the_systemd_unit_verifies() {
    if Command::new("systemd-analyze")
        .arg("--version")
        .output()
        .is_err()
    {
        assert!(
            std::env::var_os("CI").is_none(),
            "systemd-analyze is missing on CI"
        );
        eprintln!("systemd-analyze not installed: the unit was not verified");
        return;
    }
    let unit = std::fs::read_to_string(repo_path("deploy/reachcast.service")).expect("unit");
    assert!(unit.contains("ExecStart=/usr/local/bin/reachcast "));
    let here = unit.replace("/usr/local/bin/reachcast", env!("CARGO_BIN_EXE_reachcast"));
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("reachcast.service");
    std::fs::write(&path, here).expect("write");
    let out = Command::new("systemd-analyze")
        .arg("verify")
        .arg(&path)
        .output()
        .expect("run systemd-analyze");
    let said = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{said}");
    // A unit with a misspelt or unknown key still verifies, with a warning
    // on standard error: none is allowed.
    let ours: Vec<&str> = said
        .lines()
        .filter(|l| l.contains("reachcast.service"))
        .collect();
    assert!(ours.is_empty(), "{said}");
}

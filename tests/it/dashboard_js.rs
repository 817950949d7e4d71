//! Runs the dashboard's JavaScript unit tests (chart scales and ticks, time
//! formatting, status wording, the forecaster panel's line numbers and plain
//! words) with Node's built-in test runner, so that
//! `cargo test` covers them. Needs `node` (18 or newer) on the PATH.

use std::process::Command;

use crate::common::files::{files_under, repo_path};

#[test]
fn dashboard_javascript_unit_tests_pass() {
    let out = Command::new("node")
        .args(["--test", "tests/js/"])
        .current_dir(repo_path(""))
        .output()
        .expect("run `node --test`: is Node.js (18 or newer) installed and on the PATH?");
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        out.status.success(),
        "node --test failed:\n{stdout}\n{stderr}"
    );
    // The runner must actually have run tests, and none failed.
    let count = |label: &str| -> u32 {
        stdout
            .lines()
            .find_map(|l| l.strip_prefix(label))
            .and_then(|n| n.trim().parse().ok())
            .unwrap_or(0)
    };
    assert!(
        count("# pass ") >= 10,
        "expected the JS tests to run:\n{stdout}"
    );
    assert_eq!(count("# fail "), 0, "{stdout}");
}

/// The whole dashboard (every file under `static/`: HTML, CSS, JS) stays
/// under the 160 KB page-weight budget, uncompressed (README.md, section Dashboard).
#[test]
fn dashboard_page_weight_is_under_160_kb() {
    let bytes: u64 = files_under(&repo_path("static"))
        .iter()
        .map(|p| std::fs::metadata(p).expect("file size").len())
        .sum();
    assert!(
        bytes > 10_000,
        "the dashboard files are there: {bytes} bytes"
    );
    assert!(
        bytes < 160 * 1024,
        "page weight {bytes} bytes is over the 160 KB budget"
    );
}

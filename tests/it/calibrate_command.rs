//! The offline `calibrate` command, run as the real binary on the invented
//! demo files: `src/demo/brindlemoor-fennick-observed.csv` was made by
//! routing the demo reach with channel 1.15 and floodplain 0.85 and adding
//! 2 cm of noise (its header says so), so those are the multipliers to
//! find.

use std::process::Output;

use crate::common::{
    binary::{reachcast, stdout_of_success},
    files::demo_file,
};

fn calibrate(observed: &std::path::Path, out: &std::path::Path) -> Output {
    reachcast()
        .arg("calibrate")
        .arg("--reach")
        .arg(demo_file("brindlemoor-reach.json"))
        .arg("--inflow")
        .arg(demo_file("brindlemoor-inflow.csv"))
        .arg("--observed")
        .arg(observed)
        .args(["--point", "fennick-lane-ford"])
        .args(["--fit", "2026-03-14T04:00:00Z/2026-03-15T00:00:00Z"])
        .args(["--held-out", "2026-03-15T00:30:00Z/2026-03-16T12:00:00Z"])
        .arg("--out")
        .arg(out)
        .output()
        .expect("run binary")
}

#[test]
fn calibrate_recovers_the_demo_multipliers_and_writes_a_valid_proposal() {
    let dir = tempfile::tempdir().expect("temp dir");
    let proposed = dir.path().join("proposed.json");
    let out = calibrate(&demo_file("brindlemoor-fennick-observed.csv"), &proposed);
    let stdout = stdout_of_success(&out);
    assert!(
        stdout.contains("channel and floodplain multipliers separately"),
        "{stdout}"
    );
    assert!(stdout.contains("Advisory model output only"), "{stdout}");
    let text = std::fs::read_to_string(&proposed).expect("proposal written");
    // The proposal is a reach description the service accepts as it is.
    let spec = reachcast::forecast::spec::ReachSpec::from_json(&text).expect("valid reach");
    let m = spec.roughness;
    assert!(
        (m.channel / 1.15 - 1.0).abs() < 0.03,
        "channel {}",
        m.channel
    );
    assert!(
        (m.floodplain / 0.85 - 1.0).abs() < 0.05,
        "floodplain {}",
        m.floodplain
    );
}

#[test]
fn calibrate_names_the_bad_file() {
    let dir = tempfile::tempdir().expect("temp dir");
    let bad = dir.path().join("observed.csv");
    std::fs::write(&bad, "time,level\n2026-03-14T00:00:00Z,44.1\n").expect("write");
    let out = calibrate(&bad, &dir.path().join("p.json"));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("observed.csv") && stderr.contains("stage"),
        "{stderr}"
    );
    assert!(
        !dir.path().join("p.json").exists(),
        "no proposal from a bad file"
    );
}

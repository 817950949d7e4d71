//! The offline `route` command, run as the real binary on the invented demo
//! reach shipped in `src/demo/`, and the demo reach's numerical convergence.

use std::{path::Path, process::Output};

use reachcast::forecast::{hydrograph::Hydrograph, inflow, run, spec::ReachSpec};

use crate::common::{
    binary::{reachcast, stdout_of_success},
    files::{demo_file, demo_reach_json},
};

/// `reachcast route --reach REACH --inflow INFLOW` and the `extra` arguments.
fn route(reach: &Path, inflow: &Path, extra: &[&std::ffi::OsStr]) -> Output {
    reachcast()
        .arg("route")
        .arg("--reach")
        .arg(reach)
        .arg("--inflow")
        .arg(inflow)
        .args(extra)
        .output()
        .expect("run binary")
}

fn demo_inputs() -> (ReachSpec, Hydrograph) {
    let spec = ReachSpec::from_json(
        &std::fs::read_to_string(demo_file("brindlemoor-reach.json")).expect("reach"),
    )
    .expect("demo reach is valid");
    let inflow =
        inflow::parse_csv(&std::fs::read(demo_file("brindlemoor-inflow.csv")).expect("inflow"))
            .expect("demo inflow is valid");
    (spec, inflow.series)
}

#[test]
fn route_prints_summary_and_writes_hydrographs() {
    let dir = tempfile::tempdir().expect("temp dir");
    let out_csv = dir.path().join("results.csv");
    let out = route(
        &demo_file("brindlemoor-reach.json"),
        &demo_file("brindlemoor-inflow.csv"),
        &["--out".as_ref(), out_csv.as_os_str()],
    );
    let stdout = stdout_of_success(&out);
    assert!(stdout.contains("not an official warning"), "caution shown");
    let (spec, inflow) = demo_inputs();
    for p in &spec.points {
        assert!(stdout.contains(&p.name), "summary names {}", p.name);
        for t in &p.thresholds {
            assert!(
                stdout.contains(&format!("\"{}\"", t.name)),
                "threshold {}",
                t.name
            );
        }
    }
    assert!(stdout.contains("mass balance error"));

    let csv = std::fs::read_to_string(&out_csv).expect("results written");
    // The same table as the API's forecast CSV: one header vocabulary, the
    // caution in a column of its own on every row (RFC 4180, CRLF).
    assert!(
        csv.starts_with("reach,run,point,chainage_m,time,stage_m,discharge_m3_per_s,caution\r\n"),
        "one header vocabulary"
    );
    let mut reader = csv::ReaderBuilder::new().from_reader(csv.as_bytes());
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.expect("row")).collect();
    // 72 h at 15-minute output, inclusive of both ends: 289 rows per point.
    let span = (inflow[inflow.len() - 1].0 - inflow[0].0).num_seconds() as usize;
    let per_point = span / 900 + 1;
    assert_eq!(rows.len(), spec.points.len() * per_point);
    for r in &rows {
        let stage: f64 = r[5].parse().expect("stage");
        let q: f64 = r[6].parse().expect("discharge");
        assert_eq!(&r[7], reachcast::CAUTION);
        assert!(stage.is_finite() && q.is_finite() && q >= 0.0);
    }
}

#[test]
fn route_names_the_bad_field() {
    let dir = tempfile::tempdir().expect("temp dir");
    let mut v = demo_reach_json();
    v["points"][1]["chainage"] = serde_json::json!(99_999.0);
    let bad = dir.path().join("bad.json");
    std::fs::write(&bad, v.to_string()).expect("write");
    let out = route(&bad, &demo_file("brindlemoor-inflow.csv"), &[]);
    assert!(!out.status.success());
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("points[1].chainage"), "{stderr}");

    let inflow = dir.path().join("inflow.csv");
    std::fs::write(
        &inflow,
        "time,discharge\n2026-03-14T00:00:00Z,10\n2026-03-14T01:00:00,20\n",
    )
    .expect("write");
    let out = route(&demo_file("brindlemoor-reach.json"), &inflow, &[]);
    assert!(!out.status.success());
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("row 2") && stderr.contains("time"),
        "{stderr}"
    );
}

/// Halving the node spacing and the time step changes the crest stage at
/// every point of the demo reach by under 1 cm (the convergence
/// criterion; a standard grid-refinement check, common practice).
#[test]
fn demo_reach_crest_converges_under_refinement() {
    let (spec, inflow) = demo_inputs();
    let coarse = run::run(&spec, &inflow, None).expect("coarse run");
    let mut fine_spec = spec.clone();
    fine_spec.max_node_spacing /= 2.0;
    fine_spec.routing.dt_max_s /= 2.0;
    let fine = run::run(&fine_spec, &inflow, None).expect("fine run");
    assert!(fine.nodes > coarse.nodes);
    for (c, f) in coarse.points.iter().zip(&fine.points) {
        let diff = (c.crest_stage - f.crest_stage).abs();
        assert!(
            diff < 0.01,
            "{}: crest {:.4} vs {:.4} m",
            c.name,
            c.crest_stage,
            f.crest_stage
        );
    }
    // Mass balance under 0.1 % of inflow volume (issue criterion).
    assert!(coarse.diagnostics.mass_balance_error_pct.abs() < 0.1);
}

/// The kinematic cross-check agrees with the diffusive default at the crest
/// on the demo reach (a moderately steep reach, S0 = 0.0008, where the
/// kinematic approximation is expected to hold: Ponce, Li & Simons 1978,
/// from memory) within 3 % of the crest discharge.
#[test]
fn demo_reach_methods_agree_at_the_crest() {
    let (spec, inflow) = demo_inputs();
    let d = run::run(
        &spec,
        &inflow,
        Some(reachcast::forecast::spec::Method::Diffusive),
    )
    .expect("diffusive");
    let k = run::run(
        &spec,
        &inflow,
        Some(reachcast::forecast::spec::Method::Kinematic),
    )
    .expect("kinematic");
    for (a, b) in d.points.iter().zip(&k.points) {
        let rel = (a.peak_discharge - b.peak_discharge).abs() / a.peak_discharge;
        assert!(
            rel < 0.03,
            "{}: {:.1} vs {:.1} m3/s",
            a.name,
            a.peak_discharge,
            b.peak_discharge
        );
    }
}

/// Minute output is interpolated inside the solver's steps instead of
/// forcing a step onto every minute: the run takes far fewer steps than
/// there are outputs, and at the quarter hours it agrees with the 15-minute
/// run to 1 cm (linear interpolation in time within a step of at most
/// `dt_max_s`, common practice for dense output).
#[test]
fn minute_output_is_interpolated_within_steps() {
    let (spec, inflow) = demo_inputs();
    let quarter = run::run(&spec, &inflow, None).expect("15-minute run");
    let mut dense_spec = spec.clone();
    dense_spec.routing.output_interval_s = 60.0;
    let minute = run::run(&dense_spec, &inflow, None).expect("1-minute run");
    let outputs = minute.points[0].times.len();
    assert!(outputs > 4000, "{outputs} outputs");
    assert!(
        minute.diagnostics.steps * 4 < outputs,
        "{} steps for {outputs} outputs",
        minute.diagnostics.steps
    );
    for (q, m) in quarter.points.iter().zip(&minute.points) {
        for (t, z) in q.times.iter().zip(&q.stage) {
            let k = m
                .times
                .iter()
                .position(|x| x == t)
                .expect("quarter hour in minute output");
            assert!(
                (m.stage[k] - z).abs() < 0.01,
                "{} at {t}: {} vs {z}",
                q.name,
                m.stage[k]
            );
        }
        assert!((q.crest_stage - m.crest_stage).abs() < 0.01);
    }
}

/// `route --members N --seed S`: the ranges and probabilities printed and
/// the percentile columns written; the same seed prints the same answer
/// (SplitMix64 seeded members), and percentiles are ordered (any quantile
/// definition is monotone in p).
#[test]
fn route_with_members_prints_ranges_and_writes_percentiles() {
    let dir = tempfile::tempdir().expect("temp dir");
    let out_csv = dir.path().join("ensemble.csv");
    let args = |csv: &Path| -> Vec<std::ffi::OsString> {
        vec![
            "--members".into(),
            "6".into(),
            "--seed".into(),
            "7".into(),
            "--out".into(),
            csv.as_os_str().to_owned(),
        ]
    };
    let run = |csv: &Path| {
        let a = args(csv);
        let refs: Vec<&std::ffi::OsStr> = a.iter().map(|s| s.as_os_str()).collect();
        let out = route(
            &demo_file("brindlemoor-reach.json"),
            &demo_file("brindlemoor-inflow.csv"),
            &refs,
        );
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8_lossy(&out.stdout).into_owned()
    };
    let first = run(&out_csv);
    assert!(
        first.contains("ensemble: 6 members routed (0 failed), seed 7"),
        "{first}"
    );
    assert!(first.contains("of 6 scenarios reach it"), "{first}");
    assert!(
        first.contains("not verified"),
        "default spreads are marked: {first}"
    );
    let again_csv = dir.path().join("again.csv");
    let second = run(&again_csv);
    // Wall times differ between runs; everything else is reproduced.
    let strip = |s: &str| -> String {
        s.lines()
            .filter(|l| !l.contains("wall"))
            .collect::<Vec<_>>()
            .join("\n")
    };
    assert_eq!(strip(&first), strip(&second));
    let csv = std::fs::read_to_string(&out_csv).expect("written");
    assert_eq!(csv, std::fs::read_to_string(&again_csv).expect("written"));
    assert!(csv.starts_with(
        "reach,run,point,chainage_m,time,stage_m,discharge_m3_per_s,\
         stage_p10_m,stage_p50_m,stage_p90_m,caution\r\n"
    ));
    let mut reader = csv::Reader::from_reader(csv.as_bytes());
    for r in reader.records().map(|r| r.expect("row")) {
        let p: Vec<f64> = (7..10).map(|k| r[k].parse().expect("percentile")).collect();
        assert!(p[0] <= p[1] && p[1] <= p[2], "{r:?}");
    }
}

/// `route --members` on an INFLOW.csv with `discharge_<name>` columns: the
/// main series and each trace are the scenarios, a whole number of members
/// each (7 asked, 3 scenarios: 6 routed), and the crest range spans the
/// traces: a file whose traces are the main series scaled by 0.8 and 1.2
/// gives a lowest crest below the deterministic one and a highest above.
#[test]
fn route_with_trace_columns_routes_the_traces() {
    let dir = tempfile::tempdir().expect("temp dir");
    let text = std::fs::read_to_string(demo_file("brindlemoor-inflow.csv")).expect("inflow");
    let mut lines = text.lines().filter(|l| !l.starts_with('#'));
    let header = lines.next().expect("header");
    assert_eq!(header.trim(), "time,discharge");
    let mut csv = "time,discharge,discharge_low,discharge_high\n".to_owned();
    for l in lines.filter(|l| !l.trim().is_empty()) {
        let (t, q) = l.split_once(',').expect("two columns");
        let q: f64 = q.trim().parse().expect("number");
        csv.push_str(&format!("{t},{q},{},{}\n", q * 0.8, q * 1.2));
    }
    let inflow = dir.path().join("traces.csv");
    std::fs::write(&inflow, csv).expect("write");
    let out = route(
        &demo_file("brindlemoor-reach.json"),
        &inflow,
        &["--members".as_ref(), "7".as_ref()],
    );
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(text.contains("ensemble: 6 members routed"), "{text}");
    assert!(text.contains("inflow scenarios"), "{text}");
    // The deterministic crests ("  crest X m at …", one per point) and the
    // ranges ("NAME: crest p10 … (lowest X m, highest Y m)"), in point order.
    let det: Vec<f64> = text
        .lines()
        .filter_map(|l| l.strip_prefix("  crest "))
        .filter_map(|l| l.split(' ').next()?.parse().ok())
        .collect();
    let number_after = |line: &str, key: &str| -> f64 {
        let rest = &line[line.find(key).expect(key) + key.len()..];
        rest.trim_start()
            .split(' ')
            .next()
            .and_then(|v| v.parse().ok())
            .expect("number")
    };
    let ranges: Vec<(f64, f64)> = text
        .lines()
        .filter(|l| l.contains("(lowest"))
        .map(|l| (number_after(l, "lowest"), number_after(l, "highest")))
        .collect();
    assert_eq!(det.len(), ranges.len(), "{text}");
    assert!(!det.is_empty());
    for (d, (lo, hi)) in det.iter().zip(&ranges) {
        assert!(lo < d && d < hi, "{lo} < {d} < {hi}");
    }
}

/// The demo network routes offline with its tributary's own hydrograph:
/// each point says its channel and the confluence's split is printed, the
/// lower river's peak above the main river's (continuity, common
/// practice: the tributary adds to it).
#[test]
fn route_on_a_network_prints_channels_and_the_flow_split() {
    let out = route(
        &demo_file("brindlemoor-network.json"),
        &demo_file("brindlemoor-inflow.csv"),
        &[],
    );
    let stdout = stdout_of_success(&out);
    assert!(
        stdout.contains("channel Moss Gill, chainage 2500 m"),
        "{stdout}"
    );
    assert!(
        stdout.contains("flow split at junction Moss Foot"),
        "{stdout}"
    );
    let peak = |channel: &str| -> f64 {
        let line = stdout
            .lines()
            .find(|l| l.trim_start().starts_with(channel) && l.contains(": peak "))
            .unwrap_or_else(|| panic!("{channel} in {stdout}"));
        line.split(": peak ")
            .nth(1)
            .and_then(|r| r.split(' ').next())
            .and_then(|q| q.parse().ok())
            .expect("a peak")
    };
    let (above, gill, below) = (
        peak("Brindle above Moss Foot"),
        peak("Moss Gill"),
        peak("Brindle below Moss Foot"),
    );
    assert!(
        below > above && below < above + gill,
        "{above} + {gill} -> {below}"
    );
}

//! The offline `route` command: read a reach description and an inflow
//! CSV, route, print the summary, optionally write the results CSV.

use std::time::Instant;

use anyhow::Context;

use crate::{
    cli::{CalibrateArgs, RouteArgs},
    forecast::{
        calibrate,
        ensemble::{
            EnsembleInput, EnsembleSpec, perturb::RatedInflow, run_ensemble, spec::member_count,
            summary::EnsembleSummary,
        },
        hydrograph::Hydrograph,
        inflow::{self, Inflow},
        report, run,
        spec::{Method, ReachSpec},
    },
};

/// Runs `reachcast route`; returns the summary text.
pub fn route(args: &RouteArgs) -> anyhow::Result<String> {
    let reach_text = std::fs::read_to_string(&args.reach)
        .with_context(|| format!("reading {}", args.reach.display()))?;
    let spec = ReachSpec::from_json(&reach_text)
        .with_context(|| format!("in {}", args.reach.display()))?;
    let inflow_text = std::fs::read(&args.inflow)
        .with_context(|| format!("reading {}", args.inflow.display()))?;
    let inflow =
        inflow::parse_csv(&inflow_text).with_context(|| format!("in {}", args.inflow.display()))?;
    let method = args
        .method
        .as_deref()
        .map(str::parse)
        .transpose()
        .map_err(anyhow::Error::msg)?;
    let started = Instant::now();
    let prepared = run::Prepared::new(&spec)?;
    let mut out = run::run_prepared(&spec, &prepared, &inflow.series, method, run::Adjust::NONE)?;
    let wall = started.elapsed().as_secs_f64();
    out.diagnostics.wall_time_s = Some(wall);
    let ensemble = match args.members.filter(|&n| n > 0) {
        Some(members) => Some(ensemble(
            &spec, &prepared, &inflow, method, &out, members, args.seed,
        )?),
        None => None,
    };
    if let Some(path) = &args.out {
        std::fs::write(path, report::results_csv(&out, ensemble.as_ref())?)
            .with_context(|| format!("writing {}", path.display()))?;
    }
    let mut text = report::summary(&out, wall);
    if let Some(e) = &ensemble {
        text.push_str(&report::ensemble(&out, e, &spec.ensemble));
    }
    Ok(text)
}

/// Runs `reachcast calibrate`; returns the summary text and writes the
/// proposal where `--out` says.
pub fn calibrate(args: &CalibrateArgs) -> anyhow::Result<String> {
    let spec = read_reach(&args.reach)?;
    let inflow_text = std::fs::read(&args.inflow)
        .with_context(|| format!("reading {}", args.inflow.display()))?;
    let inflow =
        inflow::parse_csv(&inflow_text).with_context(|| format!("in {}", args.inflow.display()))?;
    let observed_text = std::fs::read(&args.observed)
        .with_context(|| format!("reading {}", args.observed.display()))?;
    let observed = calibrate::observed::parse_csv(&observed_text)
        .with_context(|| format!("in {}", args.observed.display()))?;
    let problem = calibrate::Problem {
        spec: &spec,
        inflow: &inflow.series,
        observed: &observed,
        point: &args.point,
        fit: args.fit,
        held_out: args.held_out,
        bounds: (args.lower, args.upper),
    };
    let result = calibrate::calibrate(&problem)?;
    let mut text = calibrate::report::summary(&result);
    if let Some(path) = &args.out {
        let json = serde_json::to_string_pretty(&result.proposed)?;
        std::fs::write(path, json + "\n").with_context(|| format!("writing {}", path.display()))?;
        text.push_str(&format!(
            "proposed reach description written to {}\n",
            path.display()
        ));
    }
    Ok(text)
}

fn read_reach(path: &std::path::Path) -> anyhow::Result<ReachSpec> {
    let text =
        std::fs::read_to_string(path).with_context(|| format!("reading {}", path.display()))?;
    ReachSpec::from_json(&text).with_context(|| format!("in {}", path.display()))
}

/// The ensemble of an offline run: the reach's spreads, `members` members
/// (a whole number per inflow scenario when the CSV has trace columns),
/// the whole inflow seen as forecast (issued at its first sample).
fn ensemble(
    spec: &ReachSpec,
    prepared: &run::Prepared,
    inflow: &Inflow,
    method: Option<Method>,
    det: &run::RunOutput,
    members: usize,
    seed: u64,
) -> anyhow::Result<EnsembleSummary> {
    let settings = EnsembleSpec {
        members: member_count(members, 1 + inflow.traces.len()),
        ..spec.ensemble.clone()
    };
    settings
        .validate()
        .map_err(|e| anyhow::anyhow!("--members: {}", e.message))?;
    let traces: Vec<Hydrograph> = inflow.traces.iter().map(|t| t.series.clone()).collect();
    let input = EnsembleInput {
        spec,
        settings: &settings,
        prepared,
        inflow: &inflow.series,
        traces: &traces,
        issued: inflow.series.start(),
        rated: RatedInflow::None,
        seed,
        method,
    };
    run_ensemble(&input, &det.points)?.ok_or_else(|| anyhow::anyhow!("no members"))
}

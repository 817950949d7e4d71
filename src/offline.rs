//! The offline `route` command: read a reach description and an inflow
//! CSV, route, print the summary, optionally write the results CSV.

use std::time::Instant;

use anyhow::Context;

use crate::{
    cli::RouteArgs,
    forecast::{inflow, report, run, spec::ReachSpec},
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
    let mut out = run::run(&spec, &inflow, method)?;
    let wall = started.elapsed().as_secs_f64();
    out.diagnostics.wall_time_s = Some(wall);
    if let Some(path) = &args.out {
        std::fs::write(path, report::results_csv(&out)?)
            .with_context(|| format!("writing {}", path.display()))?;
    }
    Ok(report::summary(&out, wall))
}

//! Text renderings of a run: the readable summary the `route` command
//! prints and the results CSV it writes. Both carry the caution.

use std::fmt::Write as _;

use chrono::{DateTime, Utc};

use super::{
    ensemble::{
        EnsembleSpec,
        summary::{EnsembleSummary, MemberSource},
    },
    export::{Rows, TableContext, table},
    level::LevelOutlook,
    levels::LevelKind,
    run::{PointForecast, RunOutput},
    spec::Units,
};
use crate::{CAUTION, engine::diffusive::Diagnostics};

fn hours_minutes(seconds: f64) -> String {
    let total = (seconds / 60.0).round() as i64;
    let (h, m) = (total / 60, total % 60);
    if h > 0 {
        format!("{h} h {m:02} min")
    } else {
        format!("{m} min")
    }
}

fn time(t: DateTime<Utc>) -> String {
    t.format("%Y-%m-%d %H:%M UTC").to_string()
}

/// The summary printed by `reachcast route`: per point the crest, the bridge
/// margins and each threshold's first crossing and time above, then the
/// engine diagnostics and warnings.
pub fn summary(out: &RunOutput, wall_time_s: f64) -> String {
    let mut s = String::new();
    let d = &out.diagnostics;
    let _ = writeln!(s, "reachcast route: {}", out.reach);
    let _ = writeln!(s, "CAUTION: {CAUTION}");
    let _ = writeln!(
        s,
        "method {}, {} nodes, {} to {}",
        out.method,
        out.nodes,
        time(out.start),
        time(out.end)
    );
    for p in &out.points {
        point_lines(&mut s, p);
    }
    for j in &out.junctions {
        junction_lines(&mut s, &super::splits::view(j, false));
    }
    diagnostics_lines(&mut s, d, wall_time_s);
    s
}

/// The flow split at one junction of a network: each channel end's peak
/// and its share of the through-flow then.
fn junction_lines(s: &mut String, j: &super::splits::JunctionView) {
    let _ = writeln!(s);
    let _ = writeln!(s, "flow split at junction {}", j.name);
    for e in &j.ends {
        let k = j.times.iter().position(|t| *t == e.peak_time).unwrap_or(0);
        let share = e
            .share
            .get(k)
            .copied()
            .flatten()
            .map_or("-".to_owned(), |x| format!("{:.0} %", 100.0 * x));
        let side = match e.side {
            super::splits::Side::Arrives => "arrives",
            super::splits::Side::Leaves => "leaves",
        };
        let _ = writeln!(
            s,
            "  {} {side}: peak {:.1} m3/s at {} ({share} of the flow through the junction then)",
            e.channel,
            e.peak_discharge,
            time(e.peak_time)
        );
    }
}

/// The lines of one point: crest, then each level (thresholds, low chord
/// and deck).
fn point_lines(s: &mut String, p: &PointForecast) {
    let _ = writeln!(s);
    let on = p
        .channel
        .as_deref()
        .map_or(String::new(), |c| format!("channel {c}, "));
    let _ = writeln!(
        s,
        "{} ({}, {on}chainage {:.0} m, bed {:.2} m)",
        p.name, p.kind, p.chainage, p.bed_elevation
    );
    let _ = writeln!(
        s,
        "  crest {:.2} m at {}; peak discharge {:.1} m3/s",
        p.crest_stage,
        time(p.crest_time),
        p.peak_discharge
    );
    if p.levels.is_empty() {
        let _ = writeln!(s, "  no levels set");
    }
    for t in &p.levels {
        level_line(s, t);
    }
}

/// How a level is called in a line: `low chord`, `deck`, or the
/// threshold's name in quotes.
fn level_label(t: &LevelOutlook) -> String {
    match t.kind {
        LevelKind::LowChord => "low chord".to_owned(),
        LevelKind::Deck => "deck".to_owned(),
        LevelKind::Threshold => format!("threshold \"{}\"", t.name),
    }
}

/// One level: when it is crossed and for how long, or its clearance.
fn level_line(s: &mut String, t: &LevelOutlook) {
    if t.exceeded {
        let first = t
            .first_above
            .map(|x| {
                if t.above_now {
                    let since = t.above_since.unwrap_or(x);
                    let start = if t.above_since_start {
                        " (the start)"
                    } else {
                        ""
                    };
                    format!("above since {}{start}", time(since))
                } else {
                    format!("first above {}", time(x))
                }
            })
            .unwrap_or_default();
        let back = t
            .back_below
            .map(|x| format!("back below {}", time(x)))
            .unwrap_or_else(|| "still above at the end".to_owned());
        let _ = writeln!(
            s,
            "  {} {:.2} m: EXCEEDED, {first}, {back}, above for {} (crest {:+.2} m over)",
            level_label(t),
            t.elevation,
            hours_minutes(t.duration_above_s),
            t.margin
        );
    } else {
        let _ = writeln!(
            s,
            "  {} {:.2} m: not reached (crest {:.2} m below)",
            level_label(t),
            t.elevation,
            -t.margin
        );
    }
}

/// The engine's diagnostics and warnings.
fn diagnostics_lines(s: &mut String, d: &Diagnostics, wall_time_s: f64) {
    let _ = writeln!(s);
    let _ = writeln!(s, "diagnostics");
    let _ = writeln!(
        s,
        "  mass balance error {:.4} % of inflow volume",
        d.mass_balance_error_pct
    );
    let _ = writeln!(
        s,
        "  max Froude number {:.3} at chainage {:.0} m",
        d.max_froude, d.max_froude_chainage
    );
    match d.applicability_number {
        Some(a) => {
            let _ = writeln!(
                s,
                "  wave-period number {a:.0} (method needs above {:.0}; Ponce, Li & Simons 1978)",
                d.applicability_threshold
            );
        }
        None => {
            let _ = writeln!(s, "  wave-period number not defined (no bed slope)");
        }
    }
    let _ = writeln!(
        s,
        "  {} steps ({} rejected), time step {:.1} s to {:.1} s, Newton iterations {} (max {} in a step)",
        d.steps,
        d.rejected_steps,
        d.dt_min_used,
        d.dt_max_used,
        d.newton_iterations_total,
        d.max_newton_iterations
    );
    if !d.dry_nodes.is_empty() {
        let _ = writeln!(s, "  {} node(s) ran dry", d.dry_nodes.len());
    }
    let _ = writeln!(s, "  wall time {:.1} ms", wall_time_s * 1000.0);
    if d.warnings.is_empty() {
        let _ = writeln!(s, "  no warnings");
    } else {
        for w in &d.warnings {
            let _ = writeln!(s, "  WARNING: {w}");
        }
    }
}

/// Stage and discharge hydrographs at every point, in the one CSV table
/// of forecast values ([`super::export`]; SI units, no run id offline),
/// with the ensemble's percentile stages when there is one.
pub fn results_csv(
    out: &RunOutput,
    ensemble: Option<&EnsembleSummary>,
) -> Result<String, csv::Error> {
    let ctx = TableContext {
        reach: &out.reach,
        run: None,
        units: Units::Si,
        caution: CAUTION.to_owned(),
        percentiles: ensemble.map(|e| e.percentiles.clone()).unwrap_or_default(),
    };
    table(
        &ctx,
        out.points.iter().map(|p| Rows {
            bands: ensemble
                .and_then(|e| e.point(&p.id))
                .map_or(&[], |r| r.stage.as_slice()),
            ..Rows::from(p)
        }),
    )
}

/// The ensemble part of the summary: per point the crest range, then per
/// level how many scenarios reach it and when.
pub fn ensemble(out: &RunOutput, e: &EnsembleSummary, settings: &EnsembleSpec) -> String {
    let mut s = String::new();
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "ensemble: {} members routed ({} failed), seed {}",
        e.members, e.failed_members, e.seed
    );
    let used = match e.source {
        MemberSource::Perturbed => settings.clone(),
        MemberSource::Traces => {
            let _ = writeln!(
                s,
                "  inflow scenarios: the main series and the file's traces, equally likely (inflow not perturbed)"
            );
            settings.for_traces()
        }
    };
    if used.spreads_are_defaults() {
        let _ = writeln!(
            s,
            "  spreads are the built-in defaults, not verified error statistics of this reach"
        );
    }
    for p in &out.points {
        let Some(r) = e.point(&p.id) else { continue };
        let q: Vec<String> = r
            .crest
            .percentiles
            .iter()
            .map(|q| format!("p{} {:.2} m", q.percentile, q.stage))
            .collect();
        let _ = writeln!(
            s,
            "{}: crest {} (lowest {:.2} m, highest {:.2} m)",
            p.name,
            q.join(", "),
            r.crest.min,
            r.crest.max
        );
        for (l, c) in p.levels.iter().zip(&r.levels) {
            let when = match (c.earliest_first_above, c.median_first_above) {
                (Some(a), Some(m)) => format!(", earliest {}, median {}", time(a), time(m)),
                _ => String::new(),
            };
            let _ = writeln!(
                s,
                "  {} {:.2} m: {} of {} scenarios reach it ({:.0} %){when}",
                level_label(l),
                l.elevation,
                c.members_reaching,
                e.members,
                c.probability * 100.0
            );
        }
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn durations_read_naturally() {
        assert_eq!(hours_minutes(45.0 * 60.0), "45 min");
        assert_eq!(hours_minutes(3.0 * 3600.0 + 5.0 * 60.0), "3 h 05 min");
    }
}

//! The CSV table of levels: one row per (point, level) of a forecast seen
//! from now, with the crossing facts a planner asks for (when the water
//! rises above, since when it has been above, when it falls back below,
//! for how long, the margin at the crest, and the ensemble's probability
//! with its member count, empty without an ensemble). RFC 4180 with CRLF line
//! ends, written by the `csv` crate; the caution in a column of its own on
//! every row, as in the hydrograph table ([`super::export`]).

use super::{export::TableContext, level::LevelOutlook, run::PointForecast, view::UnitNames};

fn header(ctx: &TableContext<'_>) -> Vec<String> {
    let u = UnitNames::of(ctx.units).elevation;
    [
        "reach",
        "run",
        "point_id",
        "point",
        "level_id",
        "level_kind",
        "level",
        &format!("elevation_{u}"),
        "severity",
        "exceeded",
        "above_now",
        "above_since",
        "first_above",
        "back_below",
        "duration_above_s",
        &format!("margin_{u}"),
        "probability",
        "members",
        "members_reaching",
        "earliest_first_above",
        "median_first_above",
        "caution",
    ]
    .iter()
    .map(|s| (*s).to_owned())
    .collect()
}

fn time(t: Option<chrono::DateTime<chrono::Utc>>) -> String {
    t.map(crate::wire_time::format).unwrap_or_default()
}

fn row(ctx: &TableContext<'_>, run: &str, p: &PointForecast, l: &LevelOutlook) -> Vec<String> {
    vec![
        ctx.reach.to_owned(),
        run.to_owned(),
        p.id.clone(),
        p.name.clone(),
        l.id.clone(),
        l.kind.as_str().to_owned(),
        l.name.clone(),
        format!("{:.4}", l.elevation),
        l.severity.cap_value().to_owned(),
        l.exceeded.to_string(),
        l.above_now.to_string(),
        time(l.above_since),
        time(l.first_above),
        time(l.back_below),
        format!("{:.0}", l.duration_above_s),
        format!("{:.4}", l.margin),
        l.chance
            .map(|c| format!("{:.4}", c.probability))
            .unwrap_or_default(),
        l.chance.map(|c| c.members.to_string()).unwrap_or_default(),
        l.chance
            .map(|c| c.members_reaching.to_string())
            .unwrap_or_default(),
        time(l.chance.and_then(|c| c.earliest_first_above)),
        time(l.chance.and_then(|c| c.median_first_above)),
        ctx.caution.clone(),
    ]
}

/// The levels of `points` (values already in `ctx.units`) as RFC 4180 text.
pub fn table<'a>(
    ctx: &TableContext<'_>,
    points: impl IntoIterator<Item = &'a PointForecast>,
) -> Result<String, csv::Error> {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .from_writer(Vec::new());
    w.write_record(header(ctx))?;
    let run = ctx.run.map(|r| r.to_string()).unwrap_or_default();
    for p in points {
        for l in &p.levels {
            w.write_record(row(ctx, &run, p, l))?;
        }
    }
    let bytes = w.into_inner().map_err(|e| e.into_error())?;
    Ok(String::from_utf8_lossy(&bytes).into_owned())
}

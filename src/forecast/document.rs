//! The forecast document the API serves for a reach (JSON, or the CSV
//! table of [`super::export`]): the reach, the run that made it and where
//! its inflow came from, the freshness verdict, the last failure since,
//! and every point seen from `now` on. Pure: the handler loads the run and
//! the observations and passes `now`.

use std::collections::HashMap;

use chrono::{DateTime, Utc};
use serde::Serialize;

use super::{
    assemble::Source,
    export::{self, Rows, TableContext},
    record::{RunDiagnostics, RunRecord, StoredResults},
    spec::{Method, ReachSpec, Units},
    view::{self, Freshness, ObservedStage, PointView, UnitNames},
};

/// The reach as the document names it.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct ReachBrief {
    pub id: String,
    pub name: String,
    pub version: i64,
    pub time_zone: String,
    pub units: Units,
}

/// Where the run's inflow came from, in brief.
#[derive(Debug, Clone, Serialize, PartialEq, Default)]
pub struct InflowBrief {
    pub source_beyond_now: Option<Source>,
    pub upload_version: Option<i64>,
    #[serde(with = "crate::wire_time::option")]
    pub observed_to: Option<DateTime<Utc>>,
    pub last_reading_age_s: Option<i64>,
    pub warnings: Vec<String>,
}

/// The run behind the document.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct RunBrief {
    pub id: i64,
    #[serde(with = "crate::wire_time")]
    pub started_at: DateTime<Utc>,
    #[serde(with = "crate::wire_time::option")]
    pub finished_at: Option<DateTime<Utc>>,
    pub method: Method,
    pub reach_version: i64,
    pub inflow: InflowBrief,
    pub diagnostics: RunDiagnostics,
}

/// A run that failed after the one served.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct FailureBrief {
    pub run_id: i64,
    #[serde(with = "crate::wire_time::option")]
    pub at: Option<DateTime<Utc>>,
    pub error: Option<String>,
}

/// The forecast of a reach.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct ForecastDoc {
    pub caution: &'static str,
    pub reach: ReachBrief,
    pub units: UnitNames,
    /// The unit system `units` names.
    #[serde(skip)]
    pub unit_system: Units,
    pub run: RunBrief,
    pub freshness: Freshness,
    pub last_failure: Option<FailureBrief>,
    #[serde(with = "crate::wire_time")]
    pub now: DateTime<Utc>,
    pub points: Vec<PointView>,
}

/// The forecast at one point, with the document's context.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct PointDoc<'a> {
    pub caution: &'static str,
    pub reach: &'a ReachBrief,
    pub units: &'a UnitNames,
    pub run: &'a RunBrief,
    pub freshness: &'a Freshness,
    #[serde(with = "crate::wire_time")]
    pub now: DateTime<Utc>,
    pub point: &'a PointView,
}

/// What the document is built from.
#[derive(Debug, Clone, Copy)]
pub struct Inputs<'a> {
    pub reach_id: &'a str,
    pub reach_version: i64,
    pub spec: &'a ReachSpec,
    /// The latest good run and its results.
    pub run: &'a RunRecord,
    pub results: &'a StoredResults,
    /// A failed run newer than `run`.
    pub last_failure: Option<&'a RunRecord>,
    /// Usable stage readings of each point gauge, by gauge id.
    pub observed: &'a HashMap<String, Vec<ObservedStage>>,
    pub units: Units,
    pub now: DateTime<Utc>,
}

fn inflow_brief(run: &RunRecord) -> InflowBrief {
    run.provenance
        .inflow
        .as_ref()
        .map(|i| InflowBrief {
            source_beyond_now: Some(i.source_beyond_now),
            upload_version: i.upload_version,
            observed_to: i.observed_to,
            last_reading_age_s: i.last_reading_age_s,
            warnings: i.warnings.clone(),
        })
        .unwrap_or_default()
}

/// Builds the document.
pub fn build(i: &Inputs<'_>, freshness: Freshness) -> ForecastDoc {
    let lookup = |g: &str| i.observed.get(g).cloned().unwrap_or_default();
    let mut points = view::points(i.spec, i.results, &lookup, i.now);
    if i.units == Units::Us {
        points.iter_mut().for_each(PointView::to_us);
    }
    ForecastDoc {
        caution: crate::CAUTION,
        reach: ReachBrief {
            id: i.reach_id.to_owned(),
            name: i.spec.name.clone(),
            version: i.reach_version,
            time_zone: i.spec.service.time_zone.clone(),
            units: i.spec.service.units,
        },
        units: UnitNames::of(i.units),
        unit_system: i.units,
        run: RunBrief {
            id: i.run.id,
            started_at: i.run.started_at,
            finished_at: i.run.finished_at,
            method: i.results.method,
            reach_version: i.run.reach_version,
            inflow: inflow_brief(i.run),
            diagnostics: i.results.diagnostics.clone(),
        },
        freshness,
        last_failure: i.last_failure.map(|f| FailureBrief {
            run_id: f.id,
            at: f.finished_at,
            error: f.error.clone(),
        }),
        now: i.now,
        points,
    }
}

impl ForecastDoc {
    /// The document of one point, if the reach has it.
    pub fn point(&self, name: &str) -> Option<PointDoc<'_>> {
        let point = self.points.iter().find(|p| p.forecast.name == name)?;
        Some(PointDoc {
            caution: crate::CAUTION,
            reach: &self.reach,
            units: &self.units,
            run: &self.run,
            freshness: &self.freshness,
            now: self.now,
            point,
        })
    }

    /// The CSV table of the points named (all when `only` is `None`).
    pub fn csv(&self, only: Option<&str>) -> Result<String, csv::Error> {
        let ctx = TableContext {
            reach: &self.reach.name,
            run: Some(self.run.id),
            units: self.unit_system,
            caution: export::caution_cell(&self.freshness.reasons),
        };
        let rows = self
            .points
            .iter()
            .filter(|p| only.is_none_or(|n| n == p.forecast.name))
            .map(Rows::from);
        export::table(&ctx, rows)
    }
}

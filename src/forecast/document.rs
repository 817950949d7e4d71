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
    ensemble::summary::MemberSource,
    export::{self, Rows, TableContext},
    levels_csv,
    record::{EnsembleRecord, RunDiagnostics, RunRecord, StoredResults},
    spec::{Method, ReachSpec, Units},
    splits::{self, JunctionView},
    verify::{
        correction::{self, Correction},
        pass,
        report::PointVerification,
    },
    view::{self, CorrectedView, Freshness, ObservedStage, PointView, UnitNames},
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
    /// The run's ensemble in brief; `null` when the reach has none.
    pub ensemble: Option<EnsembleBrief>,
}

/// Where a run's ensemble stands.
#[derive(Debug, Clone, Copy, Serialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum EnsembleStatus {
    /// Still routing (the deterministic forecast is served meanwhile), or
    /// never attached because the service stopped first.
    Pending,
    Ready,
    Failed,
}

/// A run's ensemble in brief.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct EnsembleBrief {
    pub status: EnsembleStatus,
    /// Members asked for, as routed.
    pub members: usize,
    /// Members summarised (ready only).
    pub members_used: Option<usize>,
    pub failed_members: Option<usize>,
    pub seed: u64,
    pub percentiles: Vec<f64>,
    /// Where the members' inflows come from: the main inflow perturbed,
    /// or the upload's traces beside its main series.
    pub source: MemberSource,
    /// The upload's extra traces routed as scenarios beside its main
    /// series (`main`); empty when the inflow is perturbed.
    pub traces: Vec<String>,
    /// The spreads are the built-in defaults, not verified error
    /// statistics of this reach.
    pub spreads_are_defaults: bool,
    pub wall_time_s: Option<f64>,
    pub error: Option<String>,
}

fn ensemble_brief(run: &RunRecord) -> Option<EnsembleBrief> {
    let p = run.provenance.ensemble.as_ref()?;
    let mut b = EnsembleBrief {
        status: EnsembleStatus::Pending,
        members: p.settings.members,
        members_used: None,
        failed_members: None,
        seed: p.seed,
        percentiles: p.settings.percentiles.clone(),
        source: if p.traces.is_empty() {
            MemberSource::Perturbed
        } else {
            MemberSource::Traces
        },
        traces: p.traces.clone(),
        spreads_are_defaults: p.spreads_are_defaults,
        wall_time_s: None,
        error: None,
    };
    match &run.ensemble {
        None => {}
        Some(EnsembleRecord::Ready {
            summary,
            wall_time_s,
        }) => {
            b.status = EnsembleStatus::Ready;
            b.members_used = Some(summary.members);
            b.failed_members = Some(summary.failed_members);
            b.wall_time_s = Some(*wall_time_s);
        }
        Some(EnsembleRecord::Failed { error, wall_time_s }) => {
            b.status = EnsembleStatus::Failed;
            b.error = Some(error.clone());
            b.wall_time_s = Some(*wall_time_s);
        }
    }
    Some(b)
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
    /// In a reach of several channels, the flow split at every junction
    /// (empty for one channel).
    pub junctions: Vec<JunctionView>,
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
    /// How forecasts at each point have verified, with the window (days).
    pub verification: (&'a [PointVerification], u64),
    /// The error correction decided for the run, by point id.
    pub corrections: &'a [(String, Correction)],
}

/// The corrected view of one point of a run issued at `issued`.
fn corrected_view(p: &PointView, c: &Correction, issued: DateTime<Utc>) -> CorrectedView {
    let f = &p.forecast;
    let stage = match (c.on, c.initial_error_m, c.decay()) {
        (true, Some(e0), Some(phi)) => {
            Some(correction::series(&f.times, &f.stage, issued, e0, phi))
        }
        _ => None,
    };
    CorrectedView {
        label: view::CORRECTED_LABEL,
        on: stage.is_some(),
        reason: c.reason.clone(),
        decay_per_hour: c.decay(),
        initial_error: c.initial_error_m,
        stage,
    }
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
    let ensemble = i.run.ensemble.as_ref().and_then(EnsembleRecord::summary);
    let mut points = view::points(i.spec, i.results, ensemble, &lookup, i.now);
    let (verified, days) = i.verification;
    let issued = pass::issued(i.run);
    for p in &mut points {
        p.verification = verified
            .iter()
            .find(|v| v.id == p.forecast.id)
            .map(|v| v.brief(days));
        p.corrected = i
            .corrections
            .iter()
            .find(|(id, _)| *id == p.forecast.id)
            .map(|(_, c)| corrected_view(p, c, issued));
    }
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
            ensemble: ensemble_brief(i.run),
        },
        freshness,
        last_failure: i.last_failure.map(|f| FailureBrief {
            run_id: f.id,
            at: f.finished_at,
            error: f.error.clone(),
        }),
        now: i.now,
        points,
        junctions: i
            .results
            .junctions
            .iter()
            .map(|j| splits::view(j, i.units == Units::Us))
            .collect(),
    }
}

impl ForecastDoc {
    /// The document of the point with id or name `key`, if the reach has it.
    pub fn point(&self, key: &str) -> Option<PointDoc<'_>> {
        let point = self.points.iter().find(|p| p.is(key))?;
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

    /// What every row of this document's CSV tables shares.
    fn table_context(&self) -> TableContext<'_> {
        TableContext {
            reach: &self.reach.name,
            run: Some(self.run.id),
            units: self.unit_system,
            caution: export::caution_cell(&self.freshness.reasons),
            percentiles: self
                .run
                .ensemble
                .as_ref()
                .filter(|e| e.status == EnsembleStatus::Ready)
                .map(|e| e.percentiles.clone())
                .unwrap_or_default(),
        }
    }

    /// The CSV table of the points named (all when `only` is `None`).
    pub fn csv(&self, only: Option<&str>) -> Result<String, csv::Error> {
        let ctx = self.table_context();
        let rows = self
            .points
            .iter()
            .filter(|p| only.is_none_or(|n| p.is(n)))
            .map(Rows::from);
        export::table(&ctx, rows)
    }

    /// The CSV table of the levels of the points named (all when `only`
    /// is `None`): one row per (point, level), seen from now.
    pub fn levels_csv(&self, only: Option<&str>) -> Result<String, csv::Error> {
        let ctx = self.table_context();
        let points = self
            .points
            .iter()
            .filter(|p| only.is_none_or(|n| p.is(n)))
            .map(|p| &p.forecast);
        levels_csv::table(&ctx, points)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::{
        assemble::Provenance,
        level::Trace,
        levels::{LevelDef, LevelKind},
        record::RunProvenance,
        record::RunStatus,
        run::PointForecast,
        spec::PointKind,
        spec::Severity,
    };
    use chrono::Duration;

    fn t0() -> DateTime<Utc> {
        DateTime::parse_from_rfc3339("2026-03-14T00:00:00Z")
            .unwrap()
            .with_timezone(&Utc)
    }

    /// A point with hourly stages rising to 12 m at 03:00 and falling.
    fn point(name: &str) -> PointForecast {
        let times: Vec<_> = (0..7).map(|h| t0() + Duration::hours(h)).collect();
        let stage = vec![10.0, 11.0, 11.5, 12.0, 11.5, 11.0, 10.0];
        let level = Trace::new(&times, &stage).ahead(t0()).level(&LevelDef {
            id: "bank-full".into(),
            kind: LevelKind::Threshold,
            name: "bank full".into(),
            elevation: 11.25,
            severity: Severity::Moderate,
            also_named: vec![],
        });
        PointForecast {
            id: crate::gauge::slug_of(name),
            name: name.into(),
            channel: None,
            chainage: 1000.0,
            kind: PointKind::Bridge,
            bed_elevation: 8.0,
            low_chord: Some(12.5),
            deck: None,
            discharge: vec![1.0; times.len()],
            times,
            stage,
            crest_stage: 12.0,
            crest_time: t0() + Duration::hours(3),
            peak_discharge: 1.0,
            low_chord_margin: Some(0.5),
            deck_margin: None,
            levels: vec![level],
        }
    }

    fn run(id: i64, status: RunStatus) -> RunRecord {
        RunRecord {
            id,
            reach_id: "demo".into(),
            reach_version: 2,
            inflow_forecast_id: None,
            started_at: t0(),
            finished_at: Some(t0() + Duration::minutes(1)),
            status,
            error: (status == RunStatus::Failed).then(|| "routing failed".to_owned()),
            provenance: RunProvenance::default(),
            results: None,
            ensemble: None,
            pruned_at: None,
            digest: None,
        }
    }

    fn results() -> StoredResults {
        StoredResults {
            method: Method::Diffusive,
            start: t0(),
            end: t0() + Duration::hours(6),
            nodes: 10,
            points: vec![point("Sallowgate Bridge"), point("Second")],
            diagnostics: RunDiagnostics::default(),
            profile: None,
            junctions: vec![],
        }
    }

    fn fresh() -> Freshness {
        view::freshness(&view::FreshnessInput {
            now: t0() + Duration::hours(2),
            run_finished: t0() + Duration::minutes(1),
            inflow_stale: false,
            last_reading_at: None,
            has_gauge: false,
            stale_after_s: 3600,
            run_overdue_s: 86_400,
            stale_tributaries: Vec::new(),
        })
    }

    fn doc(units: Units) -> ForecastDoc {
        let spec = crate::demo::reach().expect("demo reach");
        let mut good = run(7, RunStatus::Ok);
        good.provenance.inflow = Some(Provenance {
            upload_version: Some(3),
            warnings: vec!["no upload".into()],
            ..serde_json::from_value(serde_json::json!({
                "observed_from": null, "observed_to": null, "observed_count": 0,
                "excluded_suspect": 0, "excluded_unconvertible": 0, "excluded_future": 0,
                "duplicates_replaced": 0, "gaps_interpolated": [], "gap_restart": null,
                "upload_join": null, "source_beyond_now": "upload", "upload_version": null,
                "upload_issued_at": null, "upload_issued_by": null, "extrapolated_from": null,
                "last_reading_age_s": null, "stale": false, "warnings": []
            }))
            .expect("provenance")
        });
        let failed = run(8, RunStatus::Failed);
        let observed = HashMap::new();
        let r = results();
        let inputs = Inputs {
            reach_id: "demo",
            reach_version: 2,
            spec: &spec,
            run: &good,
            results: &r,
            last_failure: Some(&failed),
            observed: &observed,
            units,
            now: t0() + Duration::hours(2),
            verification: (&[], 30),
            corrections: &[],
        };
        build(&inputs, fresh())
    }

    #[test]
    fn the_document_tells_the_run_its_inflow_and_the_failure_since() {
        let d = doc(Units::Si);
        assert_eq!(d.caution, crate::CAUTION);
        assert_eq!((d.reach.id.as_str(), d.reach.version), ("demo", 2));
        assert_eq!(d.run.id, 7);
        assert_eq!(d.run.inflow.upload_version, Some(3));
        assert_eq!(d.run.inflow.source_beyond_now, Some(Source::Upload));
        let f = d.last_failure.as_ref().expect("failure since");
        assert_eq!((f.run_id, f.error.as_deref()), (8, Some("routing failed")));
        // Seen from 02:00: 11.5 m now, the crest ahead at 03:00.
        let p = &d.points[0];
        assert_eq!(p.current_stage, 11.5);
        assert_eq!(p.forecast.crest_time, t0() + Duration::hours(3));
        assert!(p.forecast.levels[0].above_now);
    }

    /// 1 ft = 0.3048 m exactly (NIST SP 811, appendix B).
    #[test]
    fn us_units_convert_lengths_and_say_so() {
        let d = doc(Units::Us);
        assert_eq!(d.units.stage, "ft");
        assert!((d.points[0].current_stage * 0.3048 - 11.5).abs() < 1e-12);
        assert!((d.points[0].forecast.levels[0].elevation * 0.3048 - 11.25).abs() < 1e-12);
        let csv = d.csv(None).expect("csv");
        assert!(csv.starts_with(
            "reach,run,point,chainage_ft,time,stage_ft,discharge_ft3_per_s,caution\r\n"
        ));
    }

    #[test]
    fn one_point_and_its_table() {
        let d = doc(Units::Si);
        let p = d.point("Second").expect("point");
        assert_eq!(p.point.forecast.name, "Second");
        assert!(d.point("Nowhere").is_none());
        let all = d.csv(None).expect("csv");
        let one = d.csv(Some("Second")).expect("csv");
        // Header plus 7 rows per point, CRLF after each line.
        assert_eq!(all.matches("\r\n").count(), 1 + 2 * 7);
        assert_eq!(one.matches("\r\n").count(), 1 + 7);
        assert!(one.lines().skip(1).all(|l| l.contains(",Second,")));
    }
}

//! What the API and the dashboard show of a stored run: per point the
//! stage now, the crest ahead, each level seen from now on, the bridge
//! margins, observations, and the run's freshness; in SI or US customary
//! units. Pure: the handler passes `now` and what it loaded.

use crate::forecast::verify::report::VerificationBrief;
use chrono::{DateTime, Utc};
use serde::Serialize;

use super::{
    ensemble::summary::{CrestRange, EnsembleSummary, PercentileTrace},
    level::{LevelOutlook, Trace},
    record::StoredResults,
    run::PointForecast,
    spec::{ReachSpec, Units},
};

/// Feet per metre: the international foot is exactly 0.3048 m (NIST
/// SP 811, appendix B).
pub const FT_PER_M: f64 = 1.0 / 0.3048;
/// Cubic feet per cubic metre.
pub const FT3_PER_M3: f64 = FT_PER_M * FT_PER_M * FT_PER_M;

#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct UnitNames {
    pub stage: &'static str,
    pub elevation: &'static str,
    pub discharge: &'static str,
}

impl UnitNames {
    pub fn of(units: Units) -> Self {
        match units {
            Units::Si => Self {
                stage: "m",
                elevation: "m",
                discharge: "m3/s",
            },
            Units::Us => Self {
                stage: "ft",
                elevation: "ft",
                discharge: "ft3/s",
            },
        }
    }
}

#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct ObservedStage {
    #[serde(with = "crate::wire_time")]
    pub time: DateTime<Utc>,
    pub stage: f64,
}

/// A point seen from `now` on: its forecast, with the crest, margins and
/// thresholds of what is still ahead, plus the stage now and the gauge's
/// observations.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct PointView {
    #[serde(flatten)]
    pub forecast: PointForecast,
    /// Forecast stage at `now`.
    pub current_stage: f64,
    pub observed: Vec<ObservedStage>,
    /// Name of the highest level exceeded from now on.
    pub highest_exceeded: Option<String>,
    /// Its id.
    pub highest_exceeded_id: Option<String>,
    /// The run's ensemble at this point; `null` until it is attached, or
    /// when the reach has none. Each level's `chance` comes from it too.
    pub ensemble: Option<PointEnsembleView>,
    /// How forecasts at this point have verified; `None` only where the
    /// view is built without a verification report (offline).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub verification: Option<VerificationBrief>,
    /// The forecast corrected at the point's gauge, beside the raw model;
    /// `None` where the point has no gauge or the run no correction.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub corrected: Option<CorrectedView>,
}

/// The model's stage corrected with its error at the issue time, seen by
/// the point's gauge and decaying with lead time. A separate series: the
/// levels, crossings and CAP messages stay those of the raw model.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct CorrectedView {
    pub label: &'static str,
    /// Whether the correction is in use at this point for this run.
    pub on: bool,
    /// Why it is on or off.
    pub reason: String,
    /// Share of the error left after one hour (fitted), if fitted.
    pub decay_per_hour: Option<f64>,
    /// Observed minus model at the issue time (answer's units).
    pub initial_error: Option<f64>,
    /// The corrected stage on the point's `times`; `null` while off.
    pub stage: Option<Vec<f64>>,
}

/// What the corrected series is called wherever it is shown.
pub const CORRECTED_LABEL: &str = "model corrected with its error at the gauge at the issue time";

/// What an ensemble says at a point, beside the deterministic forecast.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct PointEnsembleView {
    /// Members summarised.
    pub members: usize,
    /// Members whose routing failed, left out.
    pub failed_members: usize,
    /// Percentile stage traces, on the point's `times`.
    pub stage: Vec<PercentileTrace>,
    /// The members' crests from the run's issue time on.
    pub crest: CrestRange,
}

#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Freshness {
    pub stale: bool,
    pub reasons: Vec<String>,
    #[serde(with = "crate::wire_time::option")]
    pub last_reading_at: Option<DateTime<Utc>>,
    pub last_reading_age_s: Option<i64>,
    pub run_age_s: i64,
    pub stale_after_s: i64,
}

/// Inputs the freshness verdict needs.
#[derive(Debug, Clone)]
pub struct FreshnessInput {
    pub now: DateTime<Utc>,
    pub run_finished: DateTime<Utc>,
    /// The run's own inflow assembly said the gauge was silent.
    pub inflow_stale: bool,
    pub last_reading_at: Option<DateTime<Utc>>,
    pub has_gauge: bool,
    pub stale_after_s: i64,
    /// A run older than this is overdue (two scheduling intervals).
    pub run_overdue_s: i64,
    /// Gauged tributaries whose gauge was silent or unusable when the run
    /// was made, as `name (gauge)`.
    pub stale_tributaries: Vec<String>,
}

/// The stale verdict and its reasons, in words a planner reads.
pub fn freshness(f: &FreshnessInput) -> Freshness {
    let mut reasons = Vec::new();
    let run_age_s = (f.now - f.run_finished).num_seconds();
    let age = f.last_reading_at.map(|t| (f.now - t).num_seconds());
    if f.has_gauge {
        match age {
            Some(a) if a > f.stale_after_s => reasons.push(format!(
                "the upstream gauge has been silent for {} min (limit {} min)",
                a / 60,
                f.stale_after_s / 60
            )),
            None => reasons.push("the upstream gauge has no usable readings".to_owned()),
            _ => {}
        }
    }
    if f.has_gauge && f.inflow_stale && reasons.is_empty() {
        reasons.push("the upstream gauge was silent when this forecast was made".to_owned());
    }
    for t in &f.stale_tributaries {
        reasons.push(format!(
            "the tributary gauge of {t} was silent or unusable when this forecast was made"
        ));
    }
    if run_age_s > f.run_overdue_s {
        reasons.push(format!(
            "the last successful forecast run is {} min old",
            run_age_s / 60
        ));
    }
    Freshness {
        stale: !reasons.is_empty(),
        reasons,
        last_reading_at: f.last_reading_at,
        last_reading_age_s: age,
        run_age_s,
        stale_after_s: f.stale_after_s,
    }
}

/// The view of one point of a stored run from `now` on, with its
/// ensemble when there is one. A point whose trace has no finite crest
/// ahead keeps the run's own crest.
pub fn point(
    p: &PointForecast,
    observed: Vec<ObservedStage>,
    now: DateTime<Utc>,
    ensemble: Option<&EnsembleSummary>,
) -> PointView {
    let ahead = Trace::new(&p.times, &p.stage).ahead(now);
    let mut forecast = p.clone();
    if let Some(c) = ahead.crest() {
        forecast.crest_stage = c.stage;
        forecast.crest_time = c.time;
    }
    forecast.low_chord_margin = p.low_chord.map(|lc| lc - forecast.crest_stage);
    forecast.deck_margin = p.deck.map(|d| d - forecast.crest_stage);
    forecast.levels = p
        .levels
        .iter()
        .map(|t| LevelOutlook {
            chance: ensemble.and_then(|e| e.chance(&p.id, &t.id)),
            ..t.seen_on(&ahead)
        })
        .collect();
    let highest = forecast
        .levels
        .iter()
        .filter(|t| t.exceeded)
        .max_by(|a, b| a.elevation.total_cmp(&b.elevation));
    PointView {
        verification: None,
        corrected: None,
        current_stage: ahead.stage_now(),
        observed,
        highest_exceeded: highest.map(|t| t.name.clone()),
        highest_exceeded_id: highest.map(|t| t.id.clone()),
        ensemble: ensemble.and_then(|e| {
            let r = e.point(&p.id)?;
            Some(PointEnsembleView {
                members: e.members,
                failed_members: e.failed_members,
                stage: r.stage.clone(),
                crest: r.crest.clone(),
            })
        }),
        forecast,
    }
}

/// The view of every point of a stored run and its ensemble; `observed`
/// gives the readings of a point's gauge.
pub fn points(
    spec: &ReachSpec,
    results: &StoredResults,
    ensemble: Option<&EnsembleSummary>,
    observed: &dyn Fn(&str) -> Vec<ObservedStage>,
    now: DateTime<Utc>,
) -> Vec<PointView> {
    results
        .points
        .iter()
        .map(|p| {
            let gauge = spec
                .points
                .iter()
                .find(|s| s.point_id() == p.id)
                .and_then(|s| s.gauge.as_deref());
            point(p, gauge.map(observed).unwrap_or_default(), now, ensemble)
        })
        .collect()
}

impl PointView {
    /// Whether `key` is this point's id or its display name.
    pub fn is(&self, key: &str) -> bool {
        self.forecast.id == key || self.forecast.name == key
    }

    /// Converts lengths to feet and discharges to ft³/s.
    pub fn to_us(&mut self) {
        let f = &mut self.forecast;
        let l = |v: &mut f64| *v *= FT_PER_M;
        l(&mut self.current_stage);
        l(&mut f.bed_elevation);
        l(&mut f.crest_stage);
        l(&mut f.chainage);
        f.peak_discharge *= FT3_PER_M3;
        for v in [
            &mut f.low_chord,
            &mut f.deck,
            &mut f.low_chord_margin,
            &mut f.deck_margin,
        ]
        .into_iter()
        .flatten()
        {
            *v *= FT_PER_M;
        }
        f.stage.iter_mut().for_each(l);
        f.discharge.iter_mut().for_each(|q| *q *= FT3_PER_M3);
        self.observed.iter_mut().for_each(|o| o.stage *= FT_PER_M);
        for t in &mut f.levels {
            t.elevation *= FT_PER_M;
            t.margin *= FT_PER_M;
        }
        if let Some(c) = &mut self.corrected {
            c.initial_error.iter_mut().for_each(l);
            c.stage.iter_mut().flatten().for_each(l);
        }
        if let Some(e) = &mut self.ensemble {
            e.stage
                .iter_mut()
                .for_each(|b| b.stage.iter_mut().for_each(l));
            l(&mut e.crest.min);
            l(&mut e.crest.max);
            e.crest.percentiles.iter_mut().for_each(|q| l(&mut q.stage));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// 1 ft = 0.3048 m exactly (international foot, NIST SP 811), so
    /// 1 m³/s = 35.3147 ft³/s (to six figures).
    #[test]
    fn us_factors_match_the_definition_of_the_foot() {
        assert!((FT_PER_M - 3.280_839_9).abs() < 1e-7);
        assert!((FT3_PER_M3 - 35.314_666_7).abs() < 1e-6);
    }

    #[test]
    fn stale_reasons() {
        let now = Utc::now();
        let base = FreshnessInput {
            now,
            run_finished: now,
            inflow_stale: false,
            last_reading_at: Some(now - chrono::Duration::minutes(5)),
            has_gauge: true,
            stale_after_s: 3600,
            run_overdue_s: 1800,
            stale_tributaries: Vec::new(),
        };
        assert!(!freshness(&base).stale);
        let tributary = FreshnessInput {
            stale_tributaries: vec!["Mill Brook (mill-brook)".into()],
            ..base.clone()
        };
        let f = freshness(&tributary);
        assert!(
            f.stale && f.reasons[0].contains("Mill Brook (mill-brook)"),
            "{f:?}"
        );
        let silent = FreshnessInput {
            last_reading_at: Some(now - chrono::Duration::minutes(90)),
            ..base.clone()
        };
        let f = freshness(&silent);
        assert!(f.stale && f.reasons[0].contains("90 min"), "{f:?}");
        let overdue = FreshnessInput {
            run_finished: now - chrono::Duration::minutes(45),
            ..base.clone()
        };
        assert!(freshness(&overdue).reasons[0].contains("45 min"));
        let none = FreshnessInput {
            last_reading_at: None,
            ..base
        };
        assert!(freshness(&none).stale);
    }
}

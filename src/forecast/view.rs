//! What the API and the dashboard show of a stored run: per point the
//! stage now, the crest ahead, each threshold seen from now on, the bridge
//! margins, observations, and the run's freshness; in SI or US customary
//! units. Pure: the handler passes `now` and what it loaded.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    cap::{RunContext, Situation},
    exceed,
    run::PointForecast,
    spec::{Method, PointKind, ReachSpec, Severity, Units},
};

/// Feet per metre: the international foot is exactly 0.3048 m (NIST
/// SP 811, appendix B).
pub const FT_PER_M: f64 = 1.0 / 0.3048;
/// Cubic feet per cubic metre.
pub const FT3_PER_M3: f64 = FT_PER_M * FT_PER_M * FT_PER_M;

/// A run's results as stored.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct StoredResults {
    pub method: Method,
    pub start: DateTime<Utc>,
    pub end: DateTime<Utc>,
    pub nodes: usize,
    pub points: Vec<PointForecast>,
    pub diagnostics: serde_json::Value,
}

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
pub struct ThresholdView {
    pub name: String,
    pub elevation: f64,
    pub severity: Severity,
    /// Above the threshold at some time from now on.
    pub exceeded: bool,
    pub above_now: bool,
    pub first_above: Option<DateTime<Utc>>,
    pub back_below: Option<DateTime<Utc>>,
    pub duration_above_s: f64,
    /// Crest ahead minus threshold.
    pub margin: f64,
}

#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct ObservedStage {
    pub time: DateTime<Utc>,
    pub stage: f64,
}

#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct PointView {
    pub name: String,
    pub chainage: f64,
    pub kind: PointKind,
    pub bed_elevation: f64,
    pub low_chord: Option<f64>,
    pub deck: Option<f64>,
    /// Forecast stage at `now`.
    pub current_stage: f64,
    /// Highest forecast stage from now on, and when.
    pub crest_stage: f64,
    pub crest_time: DateTime<Utc>,
    pub peak_discharge: f64,
    pub low_chord_margin: Option<f64>,
    pub deck_margin: Option<f64>,
    pub times: Vec<DateTime<Utc>>,
    pub stage: Vec<f64>,
    pub discharge: Vec<f64>,
    pub observed: Vec<ObservedStage>,
    /// Ranked by elevation, lowest first.
    pub thresholds: Vec<ThresholdView>,
    /// Name of the highest threshold exceeded from now on.
    pub highest_exceeded: Option<String>,
}

#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Freshness {
    pub stale: bool,
    pub reasons: Vec<String>,
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

/// Builds the view of every point of a stored run.
pub fn points(
    spec: &ReachSpec,
    reach_id: &str,
    run_id: i64,
    results: &StoredResults,
    observed: &dyn Fn(&str) -> Vec<ObservedStage>,
    now: DateTime<Utc>,
    stale: bool,
) -> Vec<PointView> {
    let ctx = RunContext {
        reach_id: reach_id.to_owned(),
        reach_name: spec.name.clone(),
        run_id,
        run_finished: now,
        stale,
    };
    results
        .points
        .iter()
        .map(|p| {
            let secs: Vec<f64> = p
                .times
                .iter()
                .map(|t| (*t - now).num_milliseconds() as f64 / 1000.0)
                .collect();
            let (ts, zs) = exceed::from_now(&secs, &p.stage);
            let current = zs.first().copied().unwrap_or(f64::NAN);
            let crest = exceed::crest(&ts, &zs);
            let (crest_stage, crest_time) = match crest {
                Some(c) => (
                    c.stage,
                    now + chrono::Duration::milliseconds((c.time * 1000.0).round() as i64),
                ),
                None => (p.crest_stage, p.crest_time),
            };
            let thresholds: Vec<ThresholdView> = p
                .thresholds
                .iter()
                .map(|t| match Situation::from_forecast(&ctx, p, t, now) {
                    Ok(s) => {
                        let e = exceed::exceedance(&ts, &zs, t.elevation);
                        ThresholdView {
                            name: t.name.clone(),
                            elevation: t.elevation,
                            severity: t.severity,
                            exceeded: s.exceeded,
                            above_now: s.above_now,
                            first_above: s.first_above,
                            back_below: s.back_below,
                            duration_above_s: e.duration_above,
                            margin: s.margin,
                        }
                    }
                    Err(_) => ThresholdView {
                        name: t.name.clone(),
                        elevation: t.elevation,
                        severity: t.severity,
                        exceeded: t.exceeded,
                        above_now: false,
                        first_above: t.first_above,
                        back_below: t.back_below,
                        duration_above_s: t.duration_above_s,
                        margin: t.margin,
                    },
                })
                .collect();
            let highest_exceeded = thresholds
                .iter()
                .rev()
                .find(|t| t.exceeded)
                .map(|t| t.name.clone());
            let gauge = spec
                .points
                .iter()
                .find(|s| s.name == p.name)
                .and_then(|s| s.gauge.clone());
            PointView {
                name: p.name.clone(),
                chainage: p.chainage,
                kind: p.kind,
                bed_elevation: p.bed_elevation,
                low_chord: p.low_chord,
                deck: p.deck,
                current_stage: current,
                crest_stage,
                crest_time,
                peak_discharge: p.peak_discharge,
                low_chord_margin: p.low_chord.map(|lc| lc - crest_stage),
                deck_margin: p.deck.map(|d| d - crest_stage),
                times: p.times.clone(),
                stage: p.stage.clone(),
                discharge: p.discharge.clone(),
                observed: gauge.map(|g| observed(&g)).unwrap_or_default(),
                thresholds,
                highest_exceeded,
            }
        })
        .collect()
}

impl PointView {
    /// Converts lengths to feet and discharges to ft³/s.
    pub fn to_us(&mut self) {
        let l = |v: &mut f64| *v *= FT_PER_M;
        l(&mut self.bed_elevation);
        l(&mut self.current_stage);
        l(&mut self.crest_stage);
        self.chainage *= FT_PER_M;
        self.peak_discharge *= FT3_PER_M3;
        for v in [
            &mut self.low_chord,
            &mut self.deck,
            &mut self.low_chord_margin,
            &mut self.deck_margin,
        ]
        .into_iter()
        .flatten()
        {
            *v *= FT_PER_M;
        }
        self.stage.iter_mut().for_each(l);
        self.discharge.iter_mut().for_each(|q| *q *= FT3_PER_M3);
        self.observed.iter_mut().for_each(|o| o.stage *= FT_PER_M);
        for t in &mut self.thresholds {
            t.elevation *= FT_PER_M;
            t.margin *= FT_PER_M;
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
        };
        assert!(!freshness(&base).stale);
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

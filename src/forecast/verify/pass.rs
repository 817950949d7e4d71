//! One verification pass over the open forecasts of a reach: what a good
//! run forecast at each gauged point is kept ("open") until its window
//! has been observed; each pass adds the observations newer than the last
//! counted one to the lead-hour tallies, and closes the forecasts whose
//! window is over with their event. The store applies the outcome in one
//! transaction; this module decides it.

use std::collections::BTreeMap;

use chrono::{DateTime, Duration, NaiveDate, Utc};

use super::{
    correction::{self, Correction},
    events::{self, Event},
    pairs::{at, pairs_held},
    tally::{self, HourTally, PercentileSeries, PointSeries, Start},
};
use crate::forecast::{record::RunRecord, spec::ReachSpec};

/// A run's forecast at one gauged point, waiting to be verified.
#[derive(Debug, Clone, PartialEq)]
pub struct Open {
    pub run_id: i64,
    pub point_id: String,
    pub gauge_id: String,
    pub series: PointSeries,
    /// The point's levels `(id, elevation)` at the run.
    pub levels: Vec<(String, f64)>,
    /// The stage last observed at the issue time.
    pub persistence: f64,
    /// The newest observation counted so far (the issue time at first).
    pub counted_until: DateTime<Utc>,
    /// The error correction decided for the run at this point.
    pub correction: Correction,
}

impl Open {
    /// Where the run's corrected series starts, when it has one.
    pub fn start(&self) -> Option<Start> {
        Some(Start {
            error: self.correction.initial_error_m?,
            decay_per_hour: self.correction.decay(),
        })
    }
}

/// An error older than this before the issue time is not the error at
/// the issue time: the correction then has no start.
pub const MAX_START_AGE: Duration = Duration::hours(1);

/// Opens a run's forecast at a point: persistence is the gauge's last
/// reading at or before the issue time (`last`), the correction starts
/// from the model's error at that reading, and is switched on or off on
/// the point's `history` (lead-hour tallies over the correction window).
pub fn open(
    run_id: i64,
    t: ToOpen,
    last: (DateTime<Utc>, f64),
    history: &BTreeMap<u32, HourTally>,
    rules: correction::Rules,
) -> Open {
    let s = &t.series;
    let (when, stage) = last;
    let e0 = (s.issued - when <= MAX_START_AGE)
        .then(|| at(&s.times, &s.stage, when).map(|model| stage - model))
        .flatten();
    let decided = correction::decide(correction::fit(history), e0, rules);
    Open {
        run_id,
        counted_until: s.issued,
        point_id: t.point_id,
        gauge_id: t.gauge_id,
        levels: t.levels,
        persistence: stage,
        series: t.series,
        correction: decided,
    }
}

/// A forecast to open, before its persistence is known.
#[derive(Debug, Clone, PartialEq)]
pub struct ToOpen {
    pub point_id: String,
    pub gauge_id: String,
    pub series: PointSeries,
    pub levels: Vec<(String, f64)>,
}

/// The instant a run's forecast was issued for: the one its profile and
/// ensemble were seen from, else its start (runs stored before either).
pub fn issued(run: &RunRecord) -> DateTime<Utc> {
    run.results
        .as_ref()
        .and_then(|r| r.profile.as_ref().map(|p| p.issued))
        .or_else(|| {
            run.ensemble
                .as_ref()
                .and_then(|e| e.summary())
                .map(|s| s.issued)
        })
        .unwrap_or(run.started_at)
}

/// The forecasts of a good run at its gauged points (`spec` is the run's
/// reach version); none for a run without results.
pub fn to_open(run: &RunRecord, spec: &ReachSpec) -> Vec<ToOpen> {
    let Some(results) = &run.results else {
        return Vec::new();
    };
    let issued = issued(run);
    let ensemble = run.ensemble.as_ref().and_then(|e| e.summary());
    results
        .points
        .iter()
        .filter_map(|p| {
            let gauge = spec
                .points
                .iter()
                .find(|s| s.point_id() == p.id)?
                .gauge
                .clone()?;
            let percentiles = ensemble
                .and_then(|e| e.point(&p.id))
                .map(|r| {
                    r.stage
                        .iter()
                        .map(|t| PercentileSeries {
                            percentile: t.percentile,
                            stage: t.stage.clone(),
                        })
                        .collect()
                })
                .unwrap_or_default();
            Some(ToOpen {
                point_id: p.id.clone(),
                gauge_id: gauge,
                series: PointSeries {
                    issued,
                    times: p.times.clone(),
                    stage: p.stage.clone(),
                    percentiles,
                },
                levels: p
                    .levels
                    .iter()
                    .map(|l| (l.id.clone(), l.elevation))
                    .collect(),
            })
        })
        .collect()
}

/// What one pass does to one open forecast.
#[derive(Debug, Clone, PartialEq)]
pub struct Step {
    /// Issue day of the run (UTC): tallies are kept per point, issue day
    /// and lead hour, so a window of days can be read back.
    pub issue_day: NaiveDate,
    pub hours: BTreeMap<u32, HourTally>,
    /// The newest observation now counted.
    pub counted_until: DateTime<Utc>,
    /// `Some` when the window is over: the event, and the forecast closes.
    pub closed: Option<Option<Event>>,
}

/// One pass over `open` with the gauge's usable stage readings
/// `observed` (oldest first, covering at least the issue time onwards).
/// The window is over once an observation at or after its end has been
/// seen, or `grace` after its end (late readings are then no longer
/// waited for); readings that arrive later than the newest counted one but
/// are older than it are not counted.
pub fn step(
    open: &Open,
    observed: &[(DateTime<Utc>, f64)],
    now: DateTime<Utc>,
    grace: Duration,
) -> Step {
    let s = &open.series;
    let hours = tally::tally(
        s,
        open.persistence,
        open.start(),
        open.counted_until,
        observed,
    );
    let end = s.end().unwrap_or(s.issued);
    let counted_until = observed
        .iter()
        .map(|(t, _)| *t)
        .filter(|t| *t > open.counted_until && *t <= end)
        .max()
        .unwrap_or(open.counted_until);
    let seen_end = observed.iter().any(|(t, _)| *t >= end);
    let over = seen_end || now >= end + grace;
    let closed = over.then(|| {
        let pairs = pairs_held(s.issued, &s.times, &s.stage, open.persistence, observed);
        events::event(&pairs, &open.levels)
    });
    Step {
        issue_day: s.issued.date_naive(),
        hours,
        counted_until,
        closed,
    }
}

/// What one pass over a reach writes, in one transaction.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct PassOutcome {
    /// The newest run looked at (runs up to it need no opening again).
    pub cursor: Option<i64>,
    /// Forecasts opened in this pass (stepped below like the others).
    pub opened: Vec<Open>,
    pub stepped: Vec<Stepped>,
}

/// One open forecast's step.
#[derive(Debug, Clone, PartialEq)]
pub struct Stepped {
    pub run_id: i64,
    pub point_id: String,
    pub issued: DateTime<Utc>,
    pub step: Step,
}

impl PassOutcome {
    /// Whether it writes anything.
    pub fn is_empty(&self) -> bool {
        self.cursor.is_none() && self.opened.is_empty() && self.stepped.is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(h: f64) -> DateTime<Utc> {
        DateTime::from_timestamp(1_790_000_000, 0).unwrap()
            + Duration::milliseconds((h * 3_600_000.0) as i64)
    }

    const RULES: correction::Rules = correction::Rules {
        min_runs: 1,
        min_pairs: 1,
        min_gain: 0.05,
    };

    fn open() -> Open {
        let times: Vec<_> = (0..=4).map(|h| t(f64::from(h))).collect();
        Open {
            run_id: 7,
            point_id: "p".into(),
            gauge_id: "g".into(),
            series: PointSeries {
                issued: t(0.0),
                times,
                stage: vec![10.0, 10.5, 11.0, 10.5, 10.0],
                percentiles: Vec::new(),
            },
            levels: vec![("minor".into(), 10.8)],
            persistence: 10.0,
            counted_until: t(0.0),
            correction: correction::decide(None, None, RULES),
        }
    }

    /// Observations to hour 2 count and keep the forecast open; the
    /// reading at the window's end closes it with its event (a crest at
    /// hour 2 forecast and observed: level reached by both).
    #[test]
    fn a_forecast_stays_open_until_its_window_is_observed() {
        let o = open();
        let grace = Duration::hours(1);
        let early: Vec<_> = (1..=8)
            .map(|k| (t(f64::from(k) / 4.0), 10.0 + 0.5 * f64::from(k) / 4.0))
            .collect();
        let s = step(&o, &early, t(2.0), grace);
        assert_eq!(s.closed, None);
        assert_eq!(s.counted_until, t(2.0));
        assert_eq!(s.hours.len(), 2);
        let mut o2 = o.clone();
        o2.counted_until = s.counted_until;
        let mut all = early.clone();
        all.extend((9..=16).map(|k| {
            let h = f64::from(k) / 4.0;
            (t(h), 11.0 - 0.5 * (h - 2.0))
        }));
        let s = step(&o2, &all, t(4.0), grace);
        let event = s.closed.flatten().unwrap();
        assert_eq!(event.pairs, 16);
        assert!(event.crest.is_some());
        assert!(event.levels[0].forecast && event.levels[0].observed);
        assert_eq!(s.hours.keys().copied().collect::<Vec<_>>(), vec![2, 3]);
    }

    /// A gauge silent after issue: the forecast closes with no event once
    /// the grace after its end has passed, not before.
    #[test]
    fn a_silent_gauge_closes_after_the_grace() {
        let o = open();
        let grace = Duration::hours(1);
        assert_eq!(step(&o, &[], t(4.5), grace).closed, None);
        assert_eq!(step(&o, &[], t(5.0), grace).closed, Some(None));
    }
}

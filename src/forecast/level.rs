//! How a forecast stage trace relates to a level (a threshold), seen from
//! an instant on: the one answer used by the run output (seen from the
//! run's start), the forecast view (from the time of the request), the
//! exceedance board and CAP planning (from the time the run finished).
//!
//! Times are instants of the model's own output. Offsets are computed in
//! whole milliseconds from the viewing instant (itself truncated to the
//! millisecond), so a crest on a sample is that sample's instant exactly,
//! not a few tenths of a millisecond before it. A crossing interpolated
//! between two output instants is given to the second: finer would claim
//! a precision the model does not have, and it keeps the answer (and the
//! validators and CAP chains built on it) the same while its meaning is.

use chrono::{DateTime, Duration, DurationRound, Utc};
use serde::{Deserialize, Serialize};

use super::{
    ensemble::summary::Chance,
    exceed,
    levels::{LevelDef, LevelKind},
    spec::Severity,
};

/// A stage hydrograph as the model wrote it.
#[derive(Debug, Clone, Copy)]
pub struct Trace<'a> {
    pub times: &'a [DateTime<Utc>],
    /// Water-surface elevation (m), one per time.
    pub stage: &'a [f64],
}

/// The trace from an instant on, in seconds from that instant: computed
/// once per viewing instant, then asked for the stage now, the crest and
/// each level.
pub struct Ahead {
    from_ms: i64,
    secs: Vec<f64>,
    stage: Vec<f64>,
    /// The samples at or before the instant (s, stage), for "since when".
    past: Vec<(f64, f64)>,
    /// The trace has a sample at or before the instant.
    covers_from: bool,
}

/// A level's identity and how the trace relates to it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelOutlook {
    /// Unique at the point ([`LevelDef::id`]); empty in runs stored before
    /// levels had ids, until [`crate::forecast::record::StoredResults`]
    /// fills it in.
    #[serde(default)]
    pub id: String,
    #[serde(default)]
    pub kind: LevelKind,
    pub name: String,
    /// Elevation of the level (m).
    pub elevation: f64,
    /// Configured or rank-derived CAP severity.
    pub severity: Severity,
    /// Thresholds merged into this level (same elevation).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub also_named: Vec<String>,
    /// The stage is above the level at some time from the instant on.
    pub exceeded: bool,
    /// Above at the instant itself (for a run output: at its start).
    #[serde(alias = "above_at_start")]
    pub above_now: bool,
    /// While above at the instant: when the water last rose above the
    /// level, read on the whole trace (its look-back included).
    #[serde(default, with = "crate::wire_time::option")]
    pub above_since: Option<DateTime<Utc>>,
    /// Above since the trace's first sample: the rise is older than the
    /// trace, and `above_since` is that first sample.
    #[serde(default)]
    pub above_since_start: bool,
    /// First rise above the level, or the instant when already above.
    #[serde(with = "crate::wire_time::option")]
    pub first_above: Option<DateTime<Utc>>,
    /// End of that first period above; `None` while still above at the
    /// end of the forecast.
    #[serde(with = "crate::wire_time::option")]
    pub back_below: Option<DateTime<Utc>>,
    /// Time above the level from the instant on, over every period (s).
    pub duration_above_s: f64,
    /// Crest ahead minus the level (m); positive when exceeded.
    pub margin: f64,
    /// The ensemble's chance of the level; absent without an ensemble.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub chance: Option<Chance>,
}

/// The crest ahead: highest stage from the instant on and when.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CrestAhead {
    pub stage: f64,
    pub time: DateTime<Utc>,
}

impl<'a> Trace<'a> {
    pub fn new(times: &'a [DateTime<Utc>], stage: &'a [f64]) -> Self {
        let n = times.len().min(stage.len());
        Self {
            times: &times[..n],
            stage: &stage[..n],
        }
    }

    /// The trace seen from `from` on.
    pub fn ahead(&self, from: DateTime<Utc>) -> Ahead {
        let from_ms = from.timestamp_millis();
        let secs: Vec<f64> = self
            .times
            .iter()
            .map(|t| (t.timestamp_millis() - from_ms) as f64 / 1000.0)
            .collect();
        let covers_from = secs.first().is_some_and(|&s| s <= 0.0);
        let past = secs
            .iter()
            .copied()
            .zip(self.stage.iter().copied())
            .take_while(|&(s, _)| s <= 0.0)
            .collect();
        let (secs, stage) = exceed::from_now(&secs, self.stage);
        Ahead {
            from_ms,
            secs,
            stage,
            past,
            covers_from,
        }
    }
}

impl Ahead {
    /// The stage at the instant (interpolated; the first stage before the
    /// trace starts, the last after it ends); NaN for an empty trace.
    pub fn stage_now(&self) -> f64 {
        self.stage.first().copied().unwrap_or(f64::NAN)
    }

    /// The highest stage from the instant on; `None` for an empty or
    /// non-finite trace.
    pub fn crest(&self) -> Option<CrestAhead> {
        let c = exceed::crest(&self.secs, &self.stage)?;
        Some(CrestAhead {
            stage: c.stage,
            time: self.instant(c.time)?,
        })
    }

    /// How the trace relates to a level from the instant on.
    pub fn level(&self, def: &LevelDef) -> LevelOutlook {
        let elevation = def.elevation;
        let e = exceed::exceedance(&self.secs, &self.stage, elevation);
        let above_now = self.covers_from && e.above_at_start;
        let (above_since, above_since_start) = if above_now {
            self.above_since(elevation)
        } else {
            (None, false)
        };
        LevelOutlook {
            id: def.id.clone(),
            kind: def.kind,
            name: def.name.clone(),
            elevation,
            severity: def.severity,
            also_named: def.also_named.clone(),
            exceeded: e.exceeded,
            above_now,
            above_since,
            above_since_start,
            first_above: e.first_above.and_then(|s| {
                if e.above_at_start {
                    self.instant(s)
                } else {
                    self.crossing(s)
                }
            }),
            back_below: e.back_below.and_then(|s| self.crossing(s)),
            duration_above_s: e.duration_above,
            margin: e.margin,
            chance: None,
        }
    }

    /// The last upward crossing of `elevation` at or before the instant,
    /// interpolated like every crossing; the trace's first sample (and
    /// `true`) when the stage is above all along. Called only while the
    /// stage is above at the instant.
    fn above_since(&self, elevation: f64) -> (Option<DateTime<Utc>>, bool) {
        let mut later = (0.0, self.stage_now());
        for &(s, z) in self.past.iter().rev() {
            if z <= elevation {
                let tc = s + (later.0 - s) * (elevation - z) / (later.1 - z);
                return (self.crossing(tc), false);
            }
            later = (s, z);
        }
        (self.instant(later.0), true)
    }

    /// The instant `s` seconds after `from`, to the millisecond.
    fn instant(&self, s: f64) -> Option<DateTime<Utc>> {
        DateTime::from_timestamp_millis(self.from_ms + (s * 1000.0).round() as i64)
    }

    /// An interpolated instant, to the second.
    fn crossing(&self, s: f64) -> Option<DateTime<Utc>> {
        let t = self.instant(s)?;
        t.duration_round(Duration::seconds(1)).ok()
    }
}

impl LevelOutlook {
    /// The same level seen on another view of a trace.
    pub fn seen_on(&self, ahead: &Ahead) -> LevelOutlook {
        ahead.level(&self.def())
    }

    /// The level this outlook is about.
    pub fn def(&self) -> LevelDef {
        LevelDef {
            id: self.id.clone(),
            kind: self.kind,
            name: self.name.clone(),
            elevation: self.elevation,
            severity: self.severity,
            also_named: self.also_named.clone(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn watch(elevation: f64) -> LevelDef {
        LevelDef {
            id: "watch".into(),
            kind: LevelKind::Threshold,
            name: "watch".into(),
            elevation,
            severity: Severity::Moderate,
            also_named: Vec::new(),
        }
    }

    fn t(s: &str) -> DateTime<Utc> {
        DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc)
    }

    /// Hourly samples rising 1 m an hour to a crest at 03:00 then falling.
    fn hill() -> (Vec<DateTime<Utc>>, Vec<f64>) {
        let times = (0..7)
            .map(|h| t("2026-03-01T00:00:00Z") + Duration::hours(h))
            .collect();
        (times, vec![0.0, 1.0, 2.0, 3.0, 2.0, 1.0, 0.0])
    }

    /// The regression this module exists for: seen from an instant with
    /// sub-millisecond digits, the crest was reported 0.1–0.8 ms before its
    /// sample (13:50:59.9992 for 13:51), so minute-precision text said the
    /// minute before. The crest is now the sample itself.
    #[test]
    fn crest_is_the_sample_instant_from_any_viewpoint() {
        let (times, stage) = hill();
        let trace = Trace::new(&times, &stage);
        let from = t("2026-03-01T00:17:31.123456789Z");
        let c = trace.ahead(from).crest().unwrap();
        assert_eq!(c.time, t("2026-03-01T03:00:00Z"));
        assert_eq!(c.stage, 3.0);
    }

    /// Linear interpolation between samples (how the chart is drawn):
    /// 2.5 m is crossed half-way between 02:00 and 03:00 rising and between
    /// 03:00 and 04:00 falling; above for exactly one hour.
    #[test]
    fn crossings_by_similar_triangles_to_the_second() {
        let (times, stage) = hill();
        let trace = Trace::new(&times, &stage);
        let from = t("2026-03-01T00:00:00.000400Z");
        let l = trace.ahead(from).level(&watch(2.5));
        assert!(l.exceeded && !l.above_now);
        assert_eq!(l.first_above, Some(t("2026-03-01T02:30:00Z")));
        assert_eq!(l.back_below, Some(t("2026-03-01T03:30:00Z")));
        assert!((l.duration_above_s - 3600.0).abs() < 1e-6);
        assert!((l.margin - 0.5).abs() < 1e-12);
    }

    #[test]
    fn already_above_starts_at_the_viewing_instant() {
        let (times, stage) = hill();
        let trace = Trace::new(&times, &stage);
        let from = t("2026-03-01T03:10:00Z");
        let l = trace.ahead(from).level(&watch(2.5));
        assert!(l.above_now && l.exceeded);
        assert_eq!(l.first_above, Some(from));
        assert_eq!(l.back_below, Some(t("2026-03-01T03:30:00Z")));
        // Before the trace starts, nothing is "above now".
        let early = trace.ahead(t("2026-02-28T23:00:00Z")).level(&watch(-1.0));
        assert!(early.exceeded && !early.above_now);
    }

    /// Since when: seen at 03:10 the water rose above 2.5 m half-way
    /// between 02:00 and 03:00 (similar triangles on the look-back), not
    /// at the viewing instant; above 0.5 m since before the trace began.
    #[test]
    fn above_since_reads_the_look_back() {
        let (times, stage) = hill();
        let trace = Trace::new(&times, &stage);
        let ahead = trace.ahead(t("2026-03-01T03:10:00Z"));
        let l = ahead.level(&watch(2.5));
        assert_eq!(l.above_since, Some(t("2026-03-01T02:30:00Z")));
        assert!(!l.above_since_start);
        // 0 m at 00:00 is above -0.5 m: above all along.
        let l = ahead.level(&watch(-0.5));
        assert_eq!(l.above_since, Some(t("2026-03-01T00:00:00Z")));
        assert!(l.above_since_start);
        // Not above now: no "since".
        let l = trace.ahead(t("2026-03-01T01:00:00Z")).level(&watch(2.5));
        assert_eq!((l.above_since, l.above_since_start), (None, false));
    }

    #[test]
    fn stored_first_release_outcome_reads() {
        let old = r#"{"name":"watch","elevation":2.5,"severity":"moderate","exceeded":true,
            "above_at_start":true,"first_above":"2026-03-01T02:30:00.000000123+00:00",
            "back_below":null,"duration_above_s":10.0,"margin":0.5}"#;
        let l: LevelOutlook = serde_json::from_str(old).unwrap();
        assert!(l.above_now);
        let json = serde_json::to_string(&l).unwrap();
        assert!(
            json.contains(r#""first_above":"2026-03-01T02:30:00.000Z""#),
            "{json}"
        );
    }
}

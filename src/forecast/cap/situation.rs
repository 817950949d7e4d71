//! One (point, level) pair as the latest forecast run sees it: the input
//! of [`super::plan`] and of everything a message says.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{CapError, Material};
use crate::forecast::ensemble::summary::Chance;
use crate::forecast::level::{LevelOutlook, Trace};
use crate::forecast::levels::LevelKind;
use crate::forecast::run::PointForecast;
use crate::forecast::spec::{PointKind, Severity};

/// Identifies one (reach, point, level) across runs by ids, not display
/// names, so that renaming a point or a threshold keeps its message chain;
/// removing a level (or changing its id) withdraws the old chain.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
pub struct Key {
    /// Reach slug.
    pub reach: String,
    /// Point id.
    pub point: String,
    /// Level id (`low_chord`, `deck`, or a threshold's id).
    #[serde(alias = "threshold")]
    pub level: String,
}

impl Key {
    /// 64-bit FNV-1a over the three fields separated by U+001F. FNV is
    /// specified independently of the Rust release (unlike
    /// `DefaultHasher`), so identifiers computed today and next year agree.
    pub fn digest(&self) -> u64 {
        const OFFSET: u64 = 0xcbf2_9ce4_8422_2325;
        const PRIME: u64 = 0x0000_0100_0000_01b3;
        let mut h = OFFSET;
        let parts = [&self.reach, &self.point, &self.level];
        for (i, part) in parts.iter().enumerate() {
            if i > 0 {
                h ^= 0x1f;
                h = h.wrapping_mul(PRIME);
            }
            for b in part.bytes() {
                h ^= u64::from(b);
                h = h.wrapping_mul(PRIME);
            }
        }
        h
    }
}

impl std::fmt::Display for Key {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}/{}", self.reach, self.point, self.level)
    }
}

/// A circular area in WGS 84 (CAP §3.2.4 `circle`; radius in km, from
/// memory).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Circle {
    /// Latitude (degrees, −90..=90).
    pub lat: f64,
    /// Longitude (degrees, −180..=180).
    pub lon: f64,
    /// Radius (km, ≥ 0).
    pub radius_km: f64,
}

/// One (point, threshold) pair at the latest forecast: everything a
/// message says about it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Situation {
    /// Reach slug (stable, URL-safe).
    pub reach_id: String,
    /// Reach display name.
    pub reach_name: String,
    /// Point id (stable across renames).
    pub point_id: String,
    pub point_name: String,
    pub point_kind: PointKind,
    /// Chainage of the point (m).
    pub chainage: f64,
    /// Level id (stable across renames).
    pub level_id: String,
    pub level_kind: LevelKind,
    /// The level's display name (`low chord`, `deck`, or the threshold's).
    pub threshold_name: String,
    /// Level elevation (m).
    pub elevation: f64,
    pub severity: Severity,
    /// The forecast stage is above the threshold at some time from `now`
    /// on. (An exceedance wholly in the past is not a reason to alert.)
    pub exceeded: bool,
    /// The stage is above the threshold at `now`.
    pub above_now: bool,
    /// While above now: since when (the last rise on the whole trace).
    pub above_since: Option<DateTime<Utc>>,
    /// Above since the trace began: the rise is older than the trace.
    pub above_since_start: bool,
    /// When the stage is forecast to rise above the threshold (or `now`
    /// when already above).
    pub first_above: Option<DateTime<Utc>>,
    /// When it is forecast to fall back below; `None` if it stays above to
    /// the end of the forecast.
    pub back_below: Option<DateTime<Utc>>,
    /// Highest forecast stage (m) and its time.
    pub crest_stage: f64,
    pub crest_time: DateTime<Utc>,
    /// Crest minus threshold (m); positive when exceeded.
    pub margin: f64,
    pub run_id: i64,
    /// When the run that produced this forecast finished.
    pub run_finished: DateTime<Utc>,
    /// No newer run arrived when one was due: the forecast may be out of
    /// date, so certainty drops to `Possible`.
    pub stale: bool,
    /// Optional WGS 84 circle for the CAP `area`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub location: Option<Circle>,
    /// The ensemble's chance of the level; `None` without an ensemble.
    #[serde(default)]
    pub chance: Option<Chance>,
    /// A level the deterministic run does not reach opens a chain once its
    /// probability reaches this (the reach's
    /// `ensemble.alert_probability_floor`); `None` without an ensemble.
    #[serde(default)]
    pub alert_floor: Option<f64>,
}

/// CAP §3.2.2 `certainty` of a forecast situation: `Likely` is
/// "p > ~50 %", `Possible` is "p <= ~50 %" (CAP 1.2 definitions, from
/// memory).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
pub enum Certainty {
    #[default]
    Likely,
    Possible,
}

impl Certainty {
    /// The CAP spelling.
    pub fn cap_value(self) -> &'static str {
        match self {
            Certainty::Likely => "Likely",
            Certainty::Possible => "Possible",
        }
    }
}

/// Run-level facts shared by every [`Situation`] built from one run.
#[derive(Debug, Clone, PartialEq)]
pub struct RunContext {
    pub reach_id: String,
    pub reach_name: String,
    pub run_id: i64,
    pub run_finished: DateTime<Utc>,
    pub stale: bool,
}

impl Situation {
    /// The identity of this situation across runs.
    pub fn key(&self) -> Key {
        Key {
            reach: self.reach_id.clone(),
            point: self.point_id.clone(),
            level: self.level_id.clone(),
        }
    }

    /// A message chain is open for this situation: the stage is above the
    /// threshold now or is forecast to be later, or enough ensemble members
    /// reach it ([`Situation::alert_floor`]).
    pub fn is_active(&self) -> bool {
        self.exceeded || self.above_now || self.members_only()
    }

    /// Active only because of the ensemble: the deterministic run does not
    /// reach the level, but at least the floor's share of members does.
    pub fn members_only(&self) -> bool {
        !(self.exceeded || self.above_now)
            && matches!((self.chance, self.alert_floor), (Some(c), Some(f)) if c.members_reaching > 0 && c.probability >= f)
    }

    /// When the water is expected at the level: the deterministic first
    /// crossing, or for a members-only situation the earliest member's.
    pub fn onset(&self) -> Option<DateTime<Utc>> {
        match self.chance {
            _ if self.first_above.is_some() => self.first_above,
            Some(c) if self.members_only() => c.earliest_first_above,
            _ => None,
        }
    }

    /// CAP certainty: from the ensemble's probability when there is one
    /// (`Likely` above one half), else `Likely` for a deterministic
    /// exceedance; `Possible` whenever the forecast is stale.
    pub fn certainty(&self) -> Certainty {
        match self.chance {
            _ if self.stale => Certainty::Possible,
            Some(c) if c.probability > 0.5 => Certainty::Likely,
            Some(_) => Certainty::Possible,
            None => Certainty::Likely,
        }
    }

    /// The facts whose change warrants an `Update`.
    pub fn material(&self) -> Material {
        Material {
            first_above: self.first_above,
            crest_stage: self.crest_stage,
            stale: self.stale,
            severity: self.severity,
            elevation: self.elevation,
            certainty: self.certainty(),
        }
    }

    /// Builds a situation from a run's point forecast and one of its
    /// thresholds, looking only at the forecast from `now` on: the run
    /// started earlier, and an exceedance that is already over must not
    /// open a chain. The stage at `now` is interpolated linearly between
    /// samples (as [`Trace`] does); after the last sample the last stage is
    /// carried forward (a stale forecast is flagged by `ctx.stale`); before
    /// the first sample the forecast is read from its start.
    pub fn from_forecast(
        ctx: &RunContext,
        point: &PointForecast,
        threshold: &LevelOutlook,
        now: DateTime<Utc>,
    ) -> Result<Situation, CapError> {
        let trace = Trace::new(&point.times, &point.stage);
        if trace.times.is_empty() {
            return Err(CapError::EmptyForecast(point.name.clone()));
        }
        let ahead = trace.ahead(now);
        let crest = ahead.crest().ok_or_else(|| CapError::NonFinite {
            key: point.name.clone(),
            field: "stage",
        })?;
        let level = threshold.seen_on(&ahead);
        Ok(Situation {
            reach_id: ctx.reach_id.clone(),
            reach_name: ctx.reach_name.clone(),
            point_id: point.id.clone(),
            point_name: point.name.clone(),
            point_kind: point.kind,
            chainage: point.chainage,
            level_id: level.id,
            level_kind: level.kind,
            threshold_name: level.name,
            elevation: level.elevation,
            severity: level.severity,
            exceeded: level.exceeded,
            above_now: level.above_now,
            above_since: level.above_since,
            above_since_start: level.above_since_start,
            first_above: level.first_above,
            back_below: level.back_below,
            crest_stage: crest.stage,
            crest_time: crest.time,
            margin: level.margin,
            run_id: ctx.run_id,
            run_finished: ctx.run_finished,
            stale: ctx.stale,
            location: None,
            chance: None,
            alert_floor: None,
        })
    }

    pub(super) fn check_finite(&self) -> Result<(), CapError> {
        let fields = [
            ("chainage", self.chainage),
            ("elevation", self.elevation),
            ("crest_stage", self.crest_stage),
            ("margin", self.margin),
        ];
        for (field, v) in fields {
            if !v.is_finite() {
                return Err(CapError::NonFinite {
                    key: self.key().to_string(),
                    field,
                });
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::cap::fixtures::{situation, t};

    fn point(times: Vec<DateTime<Utc>>, stage: Vec<f64>) -> (PointForecast, LevelOutlook) {
        let point = PointForecast {
            id: "sallowgate-bridge".into(),
            name: "Sallowgate Bridge".into(),
            channel: None,
            chainage: 4200.0,
            kind: PointKind::Bridge,
            bed_elevation: 8.0,
            low_chord: None,
            deck: None,
            discharge: vec![0.0; times.len()],
            times,
            stage,
            crest_stage: 0.0,
            crest_time: t(0, 0),
            peak_discharge: 0.0,
            low_chord_margin: None,
            deck_margin: None,
            levels: vec![],
        };
        let th = LevelOutlook {
            id: "road-closed".into(),
            kind: LevelKind::Threshold,
            name: "Road closed".into(),
            elevation: 12.0,
            severity: Severity::Moderate,
            also_named: vec![],
            exceeded: true,
            above_now: false,
            above_since: None,
            above_since_start: false,
            first_above: None,
            back_below: None,
            duration_above_s: 0.0,
            margin: 0.0,
            chance: None,
        };
        (point, th)
    }

    #[test]
    fn from_forecast_reads_the_series_from_now_on() {
        let ctx = RunContext {
            reach_id: "brindlemoor".into(),
            reach_name: "Brindlemoor River".into(),
            run_id: 3,
            run_finished: t(5, 0),
            stale: false,
        };
        // Above 12 m only between 06:00 and 08:00, peaking 13 m at 07:00.
        let times = vec![t(5, 0), t(6, 0), t(7, 0), t(8, 0), t(9, 0)];
        let (p, th) = point(times, vec![11.0, 12.0, 13.0, 12.0, 11.0]);
        // At 06:30 it is above now (12.5 m), back below at 08:00.
        let s = Situation::from_forecast(&ctx, &p, &th, t(6, 30)).expect("situation");
        assert!(s.above_now && s.exceeded);
        assert_eq!(s.first_above, Some(t(6, 30)));
        assert_eq!(s.back_below, Some(t(8, 0)));
        assert_eq!((s.crest_stage, s.crest_time), (13.0, t(7, 0)));
        // At 08:30 the exceedance is over: no chain should open.
        let s = Situation::from_forecast(&ctx, &p, &th, t(8, 30)).expect("situation");
        assert!(!s.above_now && !s.exceeded && !s.is_active());
        // Before the forecast starts, the whole series is read, not "now".
        let s = Situation::from_forecast(&ctx, &p, &th, t(4, 0)).expect("situation");
        assert!(!s.above_now && s.exceeded);
        assert_eq!(s.first_above, Some(t(6, 0)));
        // After it ends, the last stage is carried forward.
        let s = Situation::from_forecast(&ctx, &p, &th, t(10, 0)).expect("situation");
        assert!(!s.exceeded);
        let (empty, th) = point(vec![], vec![]);
        assert!(matches!(
            Situation::from_forecast(&ctx, &empty, &th, t(6, 0)),
            Err(CapError::EmptyForecast(_))
        ));
    }

    #[test]
    fn key_digest_is_fnv1a_with_unit_separators() {
        // Cross-checked with an independent FNV-1a 64 implementation (Python,
        // over "brindlemoor␟sallowgate-bridge␟road-closed"), which
        // also gives the published test vector FNV-1a("a") = af63dc4c8601ec8c.
        assert_eq!(situation().key().digest(), 0x2fa4_2d3a_144b_ea9c);
    }
}

//! Gauge readings as the domain sees them: the checks an incoming reading
//! must pass, and the plan for a batch (insert, duplicate, revision, and the
//! rate-of-rise flag). Pure functions; no I/O, no SQL, no HTTP.

use std::collections::BTreeMap;

use chrono::{DateTime, NaiveDateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{Gauge, Measures};
use crate::row_error::RowError;

/// Quality of a reading, from the WaterML 2.0 quality vocabulary
/// (`good`, `suspect`, `estimate`, `unchecked`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Quality {
    Good,
    Suspect,
    Estimate,
    Unchecked,
}

impl Quality {
    /// Every quality, for building SQL from [`for_forecast`].
    pub const ALL: [Quality; 4] = [
        Quality::Good,
        Quality::Suspect,
        Quality::Estimate,
        Quality::Unchecked,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Quality::Good => "good",
            Quality::Suspect => "suspect",
            Quality::Estimate => "estimate",
            Quality::Unchecked => "unchecked",
        }
    }

    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "good" => Some(Quality::Good),
            "suspect" => Some(Quality::Suspect),
            "estimate" => Some(Quality::Estimate),
            "unchecked" => Some(Quality::Unchecked),
            _ => None,
        }
    }
}

/// Outcome of the rate-of-rise check.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum RateCheck {
    /// Within the gauge's plausible rate.
    Ok,
    /// Changed faster than plausible: stored, but not used for forecasting
    /// until confirmed.
    Suspect,
    /// Was suspect; a forecaster confirmed it.
    Confirmed,
}

impl RateCheck {
    /// Every outcome, for building SQL from [`for_forecast`].
    pub const ALL: [RateCheck; 3] = [RateCheck::Ok, RateCheck::Suspect, RateCheck::Confirmed];

    pub fn as_str(self) -> &'static str {
        match self {
            RateCheck::Ok => "ok",
            RateCheck::Suspect => "suspect",
            RateCheck::Confirmed => "confirmed",
        }
    }

    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "ok" => Some(RateCheck::Ok),
            "suspect" => Some(RateCheck::Suspect),
            "confirmed" => Some(RateCheck::Confirmed),
            _ => None,
        }
    }
}

/// A reading that passed the checks, ready to store. Times are Unix
/// milliseconds, UTC.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NewReading {
    pub time_ms: i64,
    pub stage_m: Option<f64>,
    pub discharge_m3s: Option<f64>,
    pub quality: Quality,
}

impl NewReading {
    fn same_values(&self, other: &StoredReading) -> bool {
        self.stage_m == other.stage_m
            && self.discharge_m3s == other.discharge_m3s
            && self.quality == other.quality
    }
}

/// Whether a reading feeds forecasts: the one rule, which the API's
/// `for_forecast` flag, the rate check's choice of neighbours and the
/// store's SQL (built from this function) all follow.
///
/// Common practice: data flagged suspect are not used until confirmed.
/// A reading is held back when its sender marked it `suspect` (WaterML 2.0
/// quality) or the rate check did; a forecaster's confirmation lets it in
/// whatever flagged it. `estimate` and `unchecked` readings are used: they
/// are what most automatic gauges send.
pub fn for_forecast(quality: Quality, check: RateCheck) -> bool {
    match check {
        RateCheck::Confirmed => true,
        RateCheck::Suspect => false,
        RateCheck::Ok => quality != Quality::Suspect,
    }
}

/// A reading as stored.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredReading {
    pub time_ms: i64,
    pub stage_m: Option<f64>,
    pub discharge_m3s: Option<f64>,
    pub quality: Quality,
    pub rate_check: RateCheck,
    pub revision: i64,
    pub received_at_ms: i64,
    pub key_id: String,
}

impl StoredReading {
    /// Whether this reading feeds forecasts ([`for_forecast`]).
    pub fn for_forecast(&self) -> bool {
        for_forecast(self.quality, self.rate_check)
    }
}

/// An earlier value of a reading, replaced by a revision.
#[derive(Debug, Clone, PartialEq)]
pub struct Revision {
    /// The reading as it was, with who sent it and when.
    pub reading: StoredReading,
    /// When it was replaced (Unix ms) and by which key.
    pub replaced_at_ms: i64,
    pub replaced_by: String,
}

/// One input field as the body carried it.
#[derive(Debug, Clone, PartialEq)]
pub enum Field<T> {
    Absent,
    Value(T),
    /// Present but of the wrong kind; the text says what was expected.
    Invalid(String),
}

/// One input row before checking, whatever its format.
#[derive(Debug, Clone, PartialEq)]
pub struct RawReading {
    pub time: Field<String>,
    pub stage: Field<f64>,
    pub discharge: Field<f64>,
    pub quality: Field<String>,
}

/// Limits that do not come from the gauge.
#[derive(Debug, Clone, Copy)]
pub struct Limits {
    /// Server time now, Unix ms.
    pub now_ms: i64,
    /// How far ahead of `now_ms` a reading may lie.
    pub max_future_ms: i64,
    /// The earliest plausible reading time, Unix ms.
    pub earliest_ms: i64,
}

/// 1 January of `year`, 00:00 UTC, in Unix ms (year 1 to 9999).
pub fn earliest_ms(year: u64) -> i64 {
    let year = i32::try_from(year.clamp(1, 9_999)).unwrap_or(1);
    chrono::NaiveDate::from_ymd_opt(year, 1, 1)
        .and_then(|d| d.and_hms_opt(0, 0, 0))
        .map_or(i64::MIN, |t| t.and_utc().timestamp_millis())
}

/// Parses an RFC 3339 date-time (RFC 3339 §5.6: the offset, `Z` or
/// `±hh:mm`, is required) to Unix milliseconds. Digits below the
/// millisecond are truncated.
pub fn parse_time(text: &str) -> Result<i64, String> {
    match DateTime::parse_from_rfc3339(text.trim()) {
        Ok(t) => Ok(t.timestamp_millis()),
        Err(_) => {
            let naive = ["%Y-%m-%dT%H:%M:%S%.f", "%Y-%m-%d %H:%M:%S%.f"]
                .iter()
                .any(|f| NaiveDateTime::parse_from_str(text.trim(), f).is_ok());
            if naive {
                Err(format!(
                    "`{text}` has no UTC offset; RFC 3339 requires `Z` or `±hh:mm`, e.g. 2026-03-01T04:15:00+01:00"
                ))
            } else {
                Err(format!(
                    "`{text}` is not an RFC 3339 date-time such as 2026-03-01T04:15:00+01:00"
                ))
            }
        }
    }
}

/// Unix milliseconds as a UTC time. Stored times come from [`parse_time`],
/// so they are in chrono's range; anything outside is clamped to its ends.
pub fn utc(ms: i64) -> DateTime<Utc> {
    DateTime::<Utc>::from_timestamp_millis(ms).unwrap_or(if ms < 0 {
        DateTime::<Utc>::MIN_UTC
    } else {
        DateTime::<Utc>::MAX_UTC
    })
}

/// Unix milliseconds in the one wire form of a time
/// ([`crate::wire_time::format`]), for CSV and messages.
pub fn format_time(ms: i64) -> String {
    crate::wire_time::format(utc(ms))
}

/// A reading's time in Unix ms, within the plausible span of `limits`.
fn checked_time(time: &Field<String>, limits: Limits) -> Result<i64, String> {
    let time_ms = match time {
        Field::Absent => return Err("is required".to_owned()),
        Field::Invalid(why) => return Err(why.clone()),
        Field::Value(t) => parse_time(t)?,
    };
    if time_ms < limits.earliest_ms {
        return Err(format!(
            "{} is before the earliest plausible time {} (ingest.earliest_year)",
            format_time(time_ms),
            format_time(limits.earliest_ms)
        ));
    }
    if time_ms > limits.now_ms.saturating_add(limits.max_future_ms) {
        return Err(format!(
            "{} is more than {} s ahead of the server clock ({})",
            format_time(time_ms),
            limits.max_future_ms / 1000,
            format_time(limits.now_ms)
        ));
    }
    Ok(time_ms)
}

/// Checks one row against the gauge and the limits.
pub fn check(
    row: usize,
    raw: &RawReading,
    gauge: &Gauge,
    limits: Limits,
) -> Result<NewReading, RowError> {
    let err = |field: &str, message: String| RowError {
        row,
        field: field.to_owned(),
        message,
    };
    let time_ms = checked_time(&raw.time, limits).map_err(|why| err("time", why))?;
    let number = |name: &str, f: &Field<f64>| -> Result<Option<f64>, RowError> {
        match f {
            Field::Absent => Ok(None),
            Field::Invalid(why) => Err(err(name, why.clone())),
            Field::Value(v) if !v.is_finite() => {
                Err(err(name, format!("must be a finite number, got {v}")))
            }
            Field::Value(v) => Ok(Some(*v)),
        }
    };
    let stage_m = number("stage", &raw.stage)?;
    let discharge_m3s = number("discharge", &raw.discharge)?;
    let quality = match &raw.quality {
        Field::Absent => Quality::Unchecked,
        Field::Invalid(why) => return Err(err("quality", why.clone())),
        Field::Value(q) => Quality::parse(q).ok_or_else(|| {
            err(
                "quality",
                format!("`{q}` is not one of good, suspect, estimate, unchecked"),
            )
        })?,
    };
    if stage_m.is_none() && discharge_m3s.is_none() {
        return Err(err(
            "stage",
            "stage or discharge (or both) is required".to_owned(),
        ));
    }
    if stage_m.is_some() && gauge.spec.measures == Measures::Discharge {
        return Err(err(
            "stage",
            format!("gauge `{}` measures discharge only", gauge.id),
        ));
    }
    if discharge_m3s.is_some() && gauge.spec.measures == Measures::Stage {
        return Err(err(
            "discharge",
            format!("gauge `{}` measures stage only", gauge.id),
        ));
    }
    if let Some(s) = stage_m
        && (s < gauge.spec.stage_min_m || s > gauge.spec.stage_max_m)
    {
        return Err(err(
            "stage",
            format!(
                "{s} m is outside the gauge's plausible range {} to {} m",
                gauge.spec.stage_min_m, gauge.spec.stage_max_m
            ),
        ));
    }
    if let Some(q) = discharge_m3s {
        if q < 0.0 {
            return Err(err(
                "discharge",
                format!("must not be negative, got {q} m³/s"),
            ));
        }
        if gauge.spec.discharge_min_m3s.is_some_and(|m| q < m)
            || gauge.spec.discharge_max_m3s.is_some_and(|m| q > m)
        {
            return Err(err(
                "discharge",
                format!(
                    "{q} m³/s is outside the gauge's plausible range {} to {} m³/s",
                    gauge
                        .spec
                        .discharge_min_m3s
                        .map_or("-".to_owned(), |v| v.to_string()),
                    gauge
                        .spec
                        .discharge_max_m3s
                        .map_or("-".to_owned(), |v| v.to_string())
                ),
            ));
        }
    }
    Ok(NewReading {
        time_ms,
        stage_m,
        discharge_m3s,
        quality,
    })
}

/// Removes repeats of the same time inside one batch: an identical repeat
/// counts as a duplicate; a repeat with other values is rejected (a batch
/// must not contradict itself). Returns the rows sorted by time, the number
/// of in-batch duplicates and the rejections.
pub fn dedupe_batch(rows: Vec<(usize, NewReading)>) -> (Vec<NewReading>, usize, Vec<RowError>) {
    let mut by_time: BTreeMap<i64, (usize, NewReading)> = BTreeMap::new();
    let mut duplicates = 0;
    let mut errors = Vec::new();
    for (row, r) in rows {
        match by_time.get(&r.time_ms) {
            None => {
                by_time.insert(r.time_ms, (row, r));
            }
            Some((_, first)) if first == &r => duplicates += 1,
            Some((first_row, _)) => errors.push(RowError {
                row,
                field: "time".to_owned(),
                message: format!(
                    "{} appears earlier in this batch (row {first_row}) with other values",
                    format_time(r.time_ms)
                ),
            }),
        }
    }
    (
        by_time.into_values().map(|(_, r)| r).collect(),
        duplicates,
        errors,
    )
}

/// Whether the change between two stages is faster than `max_m_per_h`.
pub fn too_fast(a: (i64, f64), b: (i64, f64), max_m_per_h: f64) -> bool {
    let hours = (b.0 - a.0).unsigned_abs() as f64 / 3_600_000.0;
    if hours == 0.0 {
        return false;
    }
    (b.1 - a.1).abs() / hours > max_m_per_h
}

/// What to do with one incoming reading.
#[derive(Debug, Clone, PartialEq)]
pub enum Action {
    Insert(NewReading, RateCheck),
    Duplicate,
    Revise {
        new: NewReading,
        check: RateCheck,
        old: StoredReading,
    },
}

/// Plans a batch against what is stored. `existing` holds the stored
/// readings in the batch's time span; `before` and `after` are the nearest
/// usable ([`for_forecast`]) stored stages outside it. Each new or revised stage is compared
/// with its nearest usable neighbours in time (stored, or earlier in this
/// batch); a change (rise or fall) faster than the gauge's plausible rate
/// marks it suspect.
pub fn plan(
    gauge: &Gauge,
    rows: &[NewReading],
    existing: &BTreeMap<i64, StoredReading>,
    before: Option<(i64, f64)>,
    after: Option<(i64, f64)>,
) -> Vec<Action> {
    let mut anchors: BTreeMap<i64, f64> = existing
        .values()
        .filter(|r| r.for_forecast())
        .filter_map(|r| r.stage_m.map(|s| (r.time_ms, s)))
        .collect();
    anchors.extend(before);
    anchors.extend(after);
    let mut actions = Vec::with_capacity(rows.len());
    for r in rows {
        let old = existing.get(&r.time_ms);
        if let Some(old) = old
            && r.same_values(old)
        {
            actions.push(Action::Duplicate);
            continue;
        }
        let check = match r.stage_m {
            None => RateCheck::Ok,
            Some(s) => {
                let here = (r.time_ms, s);
                let prev = anchors.range(..r.time_ms).next_back();
                let next = anchors.range(r.time_ms + 1..).next();
                let fast = prev
                    .is_some_and(|(t, v)| too_fast((*t, *v), here, gauge.spec.max_rise_m_per_h))
                    || next.is_some_and(|(t, v)| {
                        too_fast(here, (*t, *v), gauge.spec.max_rise_m_per_h)
                    });
                if fast {
                    RateCheck::Suspect
                } else {
                    RateCheck::Ok
                }
            }
        };
        // Only readings that feed forecasts anchor their neighbours' check.
        match r.stage_m.filter(|_| for_forecast(r.quality, check)) {
            Some(s) => {
                anchors.insert(r.time_ms, s);
            }
            None => {
                anchors.remove(&r.time_ms);
            }
        }
        actions.push(match old {
            None => Action::Insert(*r, check),
            Some(old) => Action::Revise {
                new: *r,
                check,
                old: old.clone(),
            },
        });
    }
    actions
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gauge() -> Gauge {
        Gauge {
            id: "g".into(),
            spec: crate::gauge::GaugeSpec {
                name: "G".into(),
                reach: None,
                chainage_m: None,
                measures: Measures::Both,
                rating_curve: None,
                stage_min_m: 0.0,
                stage_max_m: 10.0,
                max_rise_m_per_h: 1.0,
                discharge_min_m3s: None,
                discharge_max_m3s: None,
            },
            created_at: chrono::DateTime::UNIX_EPOCH,
            updated_at: chrono::DateTime::UNIX_EPOCH,
        }
    }

    fn raw(time: &str, stage: Option<f64>) -> RawReading {
        RawReading {
            time: Field::Value(time.to_owned()),
            stage: stage.map_or(Field::Absent, Field::Value),
            discharge: Field::Absent,
            quality: Field::Absent,
        }
    }

    const LIMITS: Limits = Limits {
        now_ms: 1_900_000_000_000,
        max_future_ms: 600_000,
        // 1900-01-01T00:00:00Z is 2,208,988,800 s before the Unix epoch:
        // the offset between the NTP and Unix epochs (RFC 5905 §6).
        earliest_ms: -2_208_988_800_000,
    };

    /// Year 0000 (a gauge clock reset) is refused naming `time`; the first
    /// instant of the earliest year is accepted.
    #[test]
    fn implausibly_early_times_are_refused() {
        assert_eq!(earliest_ms(1900), LIMITS.earliest_ms);
        assert_eq!(earliest_ms(1970), 0);
        for (time, ok) in [
            ("0000-01-01T00:00:00Z", false),
            ("1899-12-31T23:59:59Z", false),
            ("1900-01-01T00:00:00Z", true),
        ] {
            let r = check(1, &raw(time, Some(1.0)), &gauge(), LIMITS);
            assert_eq!(r.is_ok(), ok, "{time}: {r:?}");
            if let Err(e) = r {
                assert_eq!(e.field, "time");
                assert!(e.message.contains("earliest plausible"), "{}", e.message);
            }
        }
    }

    /// RFC 3339 §5.6: time-offset is required ("Z" / time-numoffset);
    /// §5.8 examples: 1996-12-19T16:39:57-08:00 is 1996-12-20T00:39:57Z.
    #[test]
    fn rfc3339_offsets() {
        assert_eq!(
            parse_time("1996-12-19T16:39:57-08:00"),
            parse_time("1996-12-20T00:39:57Z")
        );
        // 1996-12-20T00:39:57Z = 851042397 s after the Unix epoch (computed
        // by hand: 9484 days × 86400 + 2397 s).
        assert_eq!(parse_time("1996-12-20T00:39:57Z"), Ok(851_042_397_000));
        let e = parse_time("2026-03-01T04:15:00").unwrap_err();
        assert!(e.contains("no UTC offset"), "{e}");
        let e = parse_time("yesterday").unwrap_err();
        assert!(e.contains("not an RFC 3339"), "{e}");
    }

    #[test]
    fn checks_name_the_field() {
        let g = gauge();
        let ok = check(1, &raw("2026-03-01T04:15:00+01:00", Some(1.0)), &g, LIMITS).expect("ok");
        assert_eq!(ok.quality, Quality::Unchecked);
        let e = check(
            2,
            &raw("2026-03-01T04:15:00+01:00", Some(f64::NAN)),
            &g,
            LIMITS,
        )
        .unwrap_err();
        assert_eq!((e.row, e.field.as_str()), (2, "stage"));
        let e = check(3, &raw("2026-03-01T04:15:00+01:00", Some(11.0)), &g, LIMITS).unwrap_err();
        assert_eq!(e.field, "stage");
        assert!(e.message.contains("plausible range"), "{}", e.message);
        let mut neg = raw("2026-03-01T04:15:00Z", None);
        neg.discharge = Field::Value(-1.0);
        assert_eq!(check(4, &neg, &g, LIMITS).unwrap_err().field, "discharge");
        let e = check(5, &raw("2031-03-01T04:15:00Z", Some(1.0)), &g, LIMITS).unwrap_err();
        assert_eq!(e.field, "time");
        let e = check(6, &raw("2026-03-01T04:15:00Z", None), &g, LIMITS).unwrap_err();
        assert!(e.message.contains("required"));
    }

    #[test]
    fn rate_is_per_hour() {
        // 0.5 m in 15 min = 2 m/h.
        assert!(too_fast((0, 1.0), (900_000, 1.5), 1.9));
        assert!(!too_fast((0, 1.0), (900_000, 1.5), 2.1));
        assert!(too_fast((0, 1.5), (900_000, 1.0), 1.9), "falls count too");
    }

    /// Common practice: data flagged suspect are not used until confirmed.
    #[test]
    fn the_forecast_rule() {
        for q in Quality::ALL {
            assert!(for_forecast(q, RateCheck::Confirmed), "{q:?}");
            assert!(!for_forecast(q, RateCheck::Suspect), "{q:?}");
        }
        assert!(!for_forecast(Quality::Suspect, RateCheck::Ok));
        for q in [Quality::Good, Quality::Estimate, Quality::Unchecked] {
            assert!(for_forecast(q, RateCheck::Ok), "{q:?}");
        }
    }

    /// A stage its sender marked suspect is not a neighbour for the rate
    /// check: the next stage is compared with the last usable one.
    #[test]
    fn a_sender_suspect_stage_anchors_nothing() {
        let g = gauge();
        let r = |t: i64, s: f64, quality: Quality| NewReading {
            time_ms: t * 900_000,
            stage_m: Some(s),
            discharge_m3s: None,
            quality,
        };
        // 1.0 → 1.2 in 15 min is 0.8 m/h (fine); 1.2 → 0.9 in 15 min would
        // be 1.2 m/h, but 1.0 → 0.9 in 30 min is 0.2 m/h.
        let rows = [
            r(0, 1.0, Quality::Good),
            r(1, 1.2, Quality::Suspect),
            r(2, 0.9, Quality::Good),
        ];
        let actions = plan(&g, &rows, &BTreeMap::new(), None, None);
        assert!(
            actions
                .iter()
                .all(|a| matches!(a, Action::Insert(_, RateCheck::Ok))),
            "{actions:?}"
        );
    }

    #[test]
    fn plan_flags_a_jump_and_recovers() {
        let g = gauge();
        let r = |t: i64, s: f64| NewReading {
            time_ms: t * 900_000,
            stage_m: Some(s),
            discharge_m3s: None,
            quality: Quality::Good,
        };
        let rows = [r(0, 1.0), r(1, 1.1), r(2, 5.0), r(3, 1.2)];
        let actions = plan(&g, &rows, &BTreeMap::new(), None, None);
        let checks: Vec<RateCheck> = actions
            .iter()
            .map(|a| match a {
                Action::Insert(_, c) => *c,
                other => panic!("{other:?}"),
            })
            .collect();
        assert_eq!(
            checks,
            [
                RateCheck::Ok,
                RateCheck::Ok,
                RateCheck::Suspect,
                RateCheck::Ok
            ]
        );
    }
}

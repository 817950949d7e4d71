//! The forecast inflow hydrograph: observed upstream discharge up to the
//! last usable reading, then the forecaster's upload or, without one, a
//! documented extrapolation, out to `now + horizon`.
//!
//! Every routing run starts here, so the function is pure (the caller passes
//! `now`, the readings, the gauge basis, the upload it picked and the rules)
//! and returns, beside the series, a [`Provenance`] that is stored with the
//! run and shown to users: where each part of the inflow came from, what was
//! left out and why, and what the user should be wary of.
//!
//! # Joining rules
//!
//! 1. **Readings.** Readings may come in any order. Readings sharing a time
//!    are duplicates: the one that comes last in the slice wins (a later
//!    correction supersedes the original, even when it marks the value
//!    suspect). Readings after `now` are excluded and counted (clock skew or
//!    a test feed; a forecast must not start from the future). Readings with
//!    `usable == false` are excluded as suspect. The rest are converted with
//!    the [`GaugeBasis`]: under `Discharge` the discharge value is used (a
//!    stage-only reading cannot be converted and is excluded); under
//!    `Stage` the stage goes through the rating (a discharge-only reading is
//!    excluded too, since mixing the gauge's own discharges with ours would
//!    mix two ratings). A missing, non-finite or negative value, or a rating
//!    error, makes a reading *unconvertible*. The suspect and unconvertible
//!    counts are of readings inside the lookback window (older ones would not
//!    have been used anyway); duplicates and future readings are counted
//!    over the whole input.
//! 2. **Observed part.** Converted readings from `max(now − lookback, first
//!    reading)` to the last one at or before `now`. An interval between
//!    consecutive observations longer than `max_gap` is a *long gap*: the
//!    observations before it are dropped and the series starts after it
//!    (the latest long gap wins), because a line drawn across hours of
//!    silence would be invented data feeding the routing's initial state.
//!    An interval longer than `step` but at most `max_gap` is a *short gap*:
//!    it is filled with linearly interpolated samples every `step` and
//!    listed in the provenance. The routing interpolates linearly between
//!    samples anyway; the inserted samples make the series say so by
//!    itself, whoever reads or plots it.
//! 3. **Beyond the last observation** (and so beyond `now`):
//!    * With an upload, its samples strictly after the last observation are
//!      used; where the upload overlaps the observations, the observations
//!      win. If the upload starts later than the last observation, the two
//!      are joined by a straight line (samples every `step`). If the upload
//!      ends at or before the last observation, or starts after
//!      `now + horizon`, it is not used: the extrapolation rule applies and a
//!      warning says so.
//!    * **Mismatch at the join.** If the upload's value where it meets the
//!      observations (its interpolated value at the last observation time
//!      when it covers that time, else its first sample) differs from the
//!      last observation by more than [`JUMP_WARN_FRACTION`] of the larger
//!      of the two, both are kept as they are and a warning gives both
//!      values. We do not blend (a linear blend over an hour is common
//!      practice): a blend produces a hydrograph that neither the gauge nor
//!      the forecaster produced and hides their disagreement, whereas the
//!      warning puts it in front of the forecaster, who can upload a revision
//!      that starts from the observed flow. The routing sees a steep ramp
//!      between two samples, which the solver handles.
//!    * Without an upload (or when it is not used), the [`Extrapolation`]
//!      rule continues from the last observation with samples every `step`.
//!      Persistence holds the last value; the recession decays towards a base
//!      flow. Neither can forecast a rise: on a rising limb the forecast
//!      *will* be low. The provenance always warns about this, and more
//!      strongly when the observations are rising.
//! 4. **Horizon.** The series ends exactly at `now + horizon`: an upload
//!    reaching further is cut there (with an interpolated end sample), and
//!    one ending earlier is continued from its last sample with the
//!    extrapolation rule, with a warning.
//! 5. **No observations.** With no usable observation in the window, the
//!    upload is used alone over `[now − lookback, now + horizon]` (warned);
//!    with no upload either, [`AssembleError::NoData`].
//! 6. **Staleness.** The gauge is stale when the newest usable reading at or
//!    before `now` (inside the window or not) is more than `stale_after` old,
//!    or when there is none. "Usable" means a discharge came out of it, so a
//!    gauge whose readings are all suspect is stale too; the counts tell the
//!    user which case it is.
//!
//! The output satisfies what [`crate::forecast::run::run`] checks: at least
//! two samples, strictly increasing times, finite non-negative discharges.
//! A final check enforces it, so a future edit that breaks it fails with
//! [`AssembleError::InvalidOutput`] instead of a confusing routing error.

use chrono::{DateTime, Duration, Utc};
use serde::{Deserialize, Serialize};

use super::hydrograph::Hydrograph;
use crate::{engine::rating::RatingError, gauge::ratings::Ratings};

/// Relative difference between the last observation and the upload where
/// they meet above which the provenance warns (fraction of the larger value).
/// A quarter is well beyond the usual disagreement between a rating and a
/// forecaster's starting value (a rating is often trusted to about ±10 %,
/// common practice), so a warning means a real mismatch, not noise.
pub const JUMP_WARN_FRACTION: f64 = 0.25;

/// How far back (minutes) the last observation is compared with to detect a
/// rising limb.
pub const RISE_WINDOW_MINUTES: i64 = 60;

/// Relative increase over [`RISE_WINDOW_MINUTES`] above which the
/// observations count as rising (filters gauge noise).
pub const RISE_TOLERANCE: f64 = 0.01;

/// Upper bound on `(lookback + horizon) / step`, which bounds how many
/// samples the assembly generates; a smaller step is a configuration error,
/// not a request for millions of samples.
pub const MAX_STEPS: i64 = 200_000;

/// One gauge reading as stored.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Reading {
    /// When the reading was taken.
    #[serde(with = "crate::wire_time")]
    pub time: DateTime<Utc>,
    /// Stage (m), if the gauge reports one.
    pub stage: Option<f64>,
    /// Discharge (m³/s), if the gauge reports one.
    pub discharge: Option<f64>,
    /// `false` when the reading is flagged suspect and not confirmed, or
    /// its quality code says it must not be used.
    pub usable: bool,
}

/// How the discharge of a reading is obtained.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", content = "rating", rename_all = "snake_case")]
pub enum GaugeBasis {
    /// Use the readings' discharge values.
    Discharge,
    /// Convert the readings' stages with the rating valid at each
    /// reading's time (versions and shifts).
    Stage(Ratings),
}

/// A forecaster's uploaded inflow forecast (the newest non-withdrawn one;
/// the caller picks it).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Upload {
    /// Version number, shown to users.
    pub version: i64,
    /// When it was issued.
    #[serde(with = "crate::wire_time")]
    pub issued_at: DateTime<Utc>,
    /// Who issued it.
    pub issued_by: String,
    /// The forecaster's hydrograph.
    pub series: Hydrograph,
}

/// What happens beyond the last observation when no upload is used.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Extrapolation {
    /// Hold the last observed discharge (common practice as the baseline
    /// every forecast should beat).
    Persistence,
    /// Exponential recession towards a base flow,
    /// Q(t) = Qb + (Q0 − Qb)·exp(−t/k): the outflow of a single linear
    /// reservoir (storage S = k·Q) with constant inflow Qb. Simple and
    /// monotone; it never overshoots Qb, and when Q0 < Qb it rises towards
    /// Qb, which is what the reservoir would do.
    Recession {
        /// Recession constant k (hours, > 0).
        k_hours: f64,
        /// Base flow Qb (m³/s, ≥ 0).
        base_flow: f64,
    },
}

impl Extrapolation {
    /// Discharge `hours` after an anchor sample of discharge `q0`.
    pub fn value(&self, q0: f64, hours: f64) -> f64 {
        match *self {
            Extrapolation::Persistence => q0,
            Extrapolation::Recession { k_hours, base_flow } => {
                base_flow + (q0 - base_flow) * (-hours / k_hours).exp()
            }
        }
    }

    fn source(&self) -> Source {
        match self {
            Extrapolation::Persistence => Source::Persistence,
            Extrapolation::Recession { .. } => Source::Recession,
        }
    }

    fn describe(&self) -> String {
        match *self {
            Extrapolation::Persistence => "persistence (the last value held)".to_owned(),
            Extrapolation::Recession { k_hours, base_flow } => {
                format!("exponential recession towards {base_flow} m³/s with k = {k_hours} h")
            }
        }
    }
}

/// The rules of assembly (configuration, per reach).
#[derive(Debug, Clone, PartialEq)]
pub struct Rules {
    /// How far back observations are used (e.g. 24 h); > 0.
    pub lookback: Duration,
    /// Forecast length beyond `now` (e.g. 48 h); > 0.
    pub horizon: Duration,
    /// Gaps up to this are interpolated linearly (e.g. 1 h); longer ones
    /// restart the observed part after the gap. ≥ 0.
    pub max_gap: Duration,
    /// The gauge is stale when its newest usable reading is older; ≥ 0.
    pub stale_after: Duration,
    /// Spacing of generated samples (interpolated and extrapolated), e.g.
    /// 15 min; at least one second. Intervals between observations longer
    /// than this count as gaps, so set it at or above the gauge's reporting
    /// interval.
    pub step: Duration,
    /// What to do beyond the last observation without an upload.
    pub extrapolation: Extrapolation,
}

impl Rules {
    /// Checks every rule, naming the offending field.
    pub fn validate(&self) -> Result<(), AssembleError> {
        let zero = Duration::zero();
        if self.lookback <= zero {
            return Err(invalid_rule("lookback", "must be positive"));
        }
        if self.horizon <= zero {
            return Err(invalid_rule("horizon", "must be positive"));
        }
        if self.max_gap < zero {
            return Err(invalid_rule("max_gap", "must not be negative"));
        }
        if self.stale_after < zero {
            return Err(invalid_rule("stale_after", "must not be negative"));
        }
        if self.step < Duration::seconds(1) {
            return Err(invalid_rule("step", "must be at least one second"));
        }
        let span = self
            .lookback
            .checked_add(&self.horizon)
            .ok_or_else(|| invalid_rule("horizon", "lookback + horizon is too long"))?;
        let steps = span.num_milliseconds() / self.step.num_milliseconds().max(1);
        if steps > MAX_STEPS {
            return Err(invalid_rule(
                "step",
                format!(
                    "(lookback + horizon) / step is {steps}, more than {MAX_STEPS}; use a longer step"
                ),
            ));
        }
        if let Extrapolation::Recession { k_hours, base_flow } = self.extrapolation {
            if !(k_hours.is_finite() && k_hours > 0.0) {
                return Err(invalid_rule(
                    "extrapolation.k_hours",
                    format!("must be finite and positive, got {k_hours}"),
                ));
            }
            if !(base_flow.is_finite() && base_flow >= 0.0) {
                return Err(invalid_rule(
                    "extrapolation.base_flow",
                    format!("must be finite and non-negative, got {base_flow}"),
                ));
            }
        }
        Ok(())
    }
}

/// Where the series comes from after the last observation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Source {
    /// The forecaster's upload (possibly continued by the extrapolation rule
    /// after its end; see [`Provenance::extrapolated_from`]).
    Upload,
    /// The last observed value held.
    Persistence,
    /// An exponential recession from the last observed value.
    Recession,
}

/// A time interval, `from` < `to`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Gap {
    /// Start (the earlier sample).
    #[serde(with = "crate::wire_time")]
    pub from: DateTime<Utc>,
    /// End (the later sample).
    #[serde(with = "crate::wire_time")]
    pub to: DateTime<Utc>,
}

/// How the series was assembled; stored with each run and shown to users.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Provenance {
    /// First observation used (after a long-gap restart); `None` without
    /// observations.
    #[serde(with = "crate::wire_time::option")]
    pub observed_from: Option<DateTime<Utc>>,
    /// Last observation used: the forecast part starts after it.
    #[serde(with = "crate::wire_time::option")]
    pub observed_to: Option<DateTime<Utc>>,
    /// Number of observations used (interpolated samples not counted).
    pub observed_count: usize,
    /// Readings in the window excluded as suspect.
    pub excluded_suspect: usize,
    /// Readings in the window that yielded no discharge (missing value for
    /// the basis, non-finite or negative value, rating error).
    pub excluded_unconvertible: usize,
    /// Readings dated after `now`, excluded.
    pub excluded_future: usize,
    /// Readings replaced by a later reading with the same time.
    pub duplicates_replaced: usize,
    /// Short gaps filled by linear interpolation.
    pub gaps_interpolated: Vec<Gap>,
    /// The (latest) long gap; observations before it were dropped.
    pub gap_restart: Option<Gap>,
    /// Straight-line join from the last observation to a later-starting
    /// upload.
    pub upload_join: Option<Gap>,
    /// Source of the series after the last observation.
    pub source_beyond_now: Source,
    /// Version of the upload used, if one was.
    pub upload_version: Option<i64>,
    /// When the upload used was issued.
    #[serde(with = "crate::wire_time::option")]
    pub upload_issued_at: Option<DateTime<Utc>>,
    /// Who issued the upload used.
    pub upload_issued_by: Option<String>,
    /// After this time the series comes from the extrapolation rule (the
    /// last observation, or the end of an upload that ended early).
    #[serde(with = "crate::wire_time::option")]
    pub extrapolated_from: Option<DateTime<Utc>>,
    /// Seconds from the newest usable reading to `now`; `None` when there is
    /// none.
    pub last_reading_age_s: Option<i64>,
    /// No usable reading within `stale_after` of `now`.
    pub stale: bool,
    /// What the user should know, in plain words.
    pub warnings: Vec<String>,
}

/// The assembled inflow and how it was made.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Assembled {
    /// The forecast inflow, ending at `now + horizon`.
    pub series: Hydrograph,
    /// Where it came from.
    pub provenance: Provenance,
}

/// Why no series could be assembled.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AssembleError {
    /// No usable observation in the lookback window and no upload.
    #[error("no usable observations in the lookback window and no forecast upload")]
    NoData,
    /// A rule is invalid.
    #[error("rule `{field}`: {message}")]
    InvalidRule {
        /// Field of [`Rules`], e.g. `step` or `extrapolation.k_hours`.
        field: &'static str,
        /// What is wrong.
        message: String,
    },
    /// The gauge's rating is invalid.
    #[error("`{field}`: {source}")]
    InvalidRating {
        /// Always `basis.rating`.
        field: &'static str,
        /// The rating's own error (it names the rating field).
        source: RatingError,
    },
    /// No observations and the upload does not overlap the window.
    #[error(
        "no usable observations, and upload version {version} ({first} to {last}) does not overlap {window_start} to {end}"
    )]
    UploadOutsideWindow {
        /// Upload version.
        version: i64,
        /// Its first sample time.
        first: DateTime<Utc>,
        /// Its last sample time.
        last: DateTime<Utc>,
        /// `now − lookback`.
        window_start: DateTime<Utc>,
        /// `now + horizon`.
        end: DateTime<Utc>,
    },
    /// The assembled series broke its contract (a bug, not bad input).
    #[error("assembled series is invalid at sample {index}: {message}")]
    InvalidOutput {
        /// Index of the offending sample.
        index: usize,
        /// What is wrong.
        message: String,
    },
}

fn invalid_rule(field: &'static str, message: impl Into<String>) -> AssembleError {
    AssembleError::InvalidRule {
        field,
        message: message.into(),
    }
}

type Sample = (DateTime<Utc>, f64);

/// Assembles the forecast inflow hydrograph; see the module documentation
/// for the rules.
pub fn assemble(
    now: DateTime<Utc>,
    readings: &[Reading],
    basis: &GaugeBasis,
    upload: Option<&Upload>,
    rules: &Rules,
) -> Result<Assembled, AssembleError> {
    rules.validate()?;
    let window_start = now.checked_sub_signed(rules.lookback).ok_or_else(|| {
        invalid_rule("lookback", "reaches before the earliest representable time")
    })?;
    let end = now
        .checked_add_signed(rules.horizon)
        .ok_or_else(|| invalid_rule("horizon", "reaches past the latest representable time"))?;
    if let GaugeBasis::Stage(rating) = basis {
        rating
            .validate()
            .map_err(|source| AssembleError::InvalidRating {
                field: "basis.rating",
                source,
            })?;
    }

    let mut prov = Provenance {
        observed_from: None,
        observed_to: None,
        observed_count: 0,
        excluded_suspect: 0,
        excluded_unconvertible: 0,
        excluded_future: 0,
        duplicates_replaced: 0,
        gaps_interpolated: Vec::new(),
        gap_restart: None,
        upload_join: None,
        source_beyond_now: rules.extrapolation.source(),
        upload_version: None,
        upload_issued_at: None,
        upload_issued_by: None,
        extrapolated_from: None,
        last_reading_age_s: None,
        stale: true,
        warnings: Vec::new(),
    };

    let all_obs = observations(now, window_start, readings, basis, rules, &mut prov);
    let obs = drop_before_long_gap(&all_obs, rules.max_gap, &mut prov);

    let series = match obs.last() {
        Some(&last) => {
            let mut series = fill_short_gaps(obs, rules.step, &mut prov);
            prov.observed_from = obs.first().map(|s| s.0);
            prov.observed_to = Some(last.0);
            prov.observed_count = obs.len();
            forecast_part(&mut series, obs, last, upload, end, rules, &mut prov);
            series
        }
        None => {
            let u = upload.ok_or(AssembleError::NoData)?;
            upload_alone(u, now, window_start, end, rules, &mut prov)?
        }
    };

    Ok(Assembled {
        series: check_output(series)?,
        provenance: prov,
    })
}

/// Discharge of one reading under the basis, or why there is none.
fn discharge_of(r: &Reading, basis: &GaugeBasis) -> Result<f64, String> {
    let q = match basis {
        GaugeBasis::Discharge => match (r.discharge, r.stage) {
            (Some(q), _) => q,
            (None, Some(_)) => {
                return Err(
                    "stage only, but the gauge basis is discharge (no rating to convert it)"
                        .to_owned(),
                );
            }
            (None, None) => return Err("no discharge value".to_owned()),
        },
        GaugeBasis::Stage(rating) => match r.stage {
            Some(h) => rating
                .discharge(r.time, h)
                .map_err(|e| format!("rating: {e}"))?,
            None => return Err("no stage value, and the gauge basis is stage".to_owned()),
        },
    };
    if q.is_finite() && q >= 0.0 {
        Ok(q)
    } else {
        Err(format!("discharge {q} is not finite and non-negative"))
    }
}

/// Deduplicates, filters and converts the readings; fills the exclusion
/// counts and staleness. Returns the window's observations, times strictly
/// increasing.
fn observations(
    now: DateTime<Utc>,
    window_start: DateTime<Utc>,
    readings: &[Reading],
    basis: &GaugeBasis,
    rules: &Rules,
    prov: &mut Provenance,
) -> Vec<Sample> {
    let mut sorted: Vec<&Reading> = readings.iter().collect();
    // Stable: equal times keep their input order, so the last one wins below.
    sorted.sort_by_key(|r| r.time);
    let mut unique: Vec<&Reading> = Vec::with_capacity(sorted.len());
    for r in sorted {
        match unique.last_mut() {
            Some(prev) if prev.time == r.time => {
                *prev = r;
                prov.duplicates_replaced += 1;
            }
            _ => unique.push(r),
        }
    }

    let mut obs = Vec::with_capacity(unique.len());
    let mut newest_usable: Option<DateTime<Utc>> = None;
    let mut first_unconvertible: Option<(DateTime<Utc>, String)> = None;
    for r in unique {
        if r.time > now {
            prov.excluded_future += 1;
            continue;
        }
        let in_window = r.time >= window_start;
        if !r.usable {
            if in_window {
                prov.excluded_suspect += 1;
            }
            continue;
        }
        match discharge_of(r, basis) {
            Ok(q) => {
                newest_usable = Some(r.time);
                if in_window {
                    obs.push((r.time, q));
                }
            }
            Err(reason) => {
                if in_window {
                    prov.excluded_unconvertible += 1;
                    first_unconvertible.get_or_insert((r.time, reason));
                }
            }
        }
    }

    if prov.duplicates_replaced > 0 {
        prov.warnings.push(format!(
            "{} reading(s) shared a time with a later reading and were replaced by it",
            prov.duplicates_replaced
        ));
    }
    if prov.excluded_future > 0 {
        prov.warnings.push(format!(
            "{} reading(s) dated after now ({now}) were excluded; check the gauge clock",
            prov.excluded_future
        ));
    }
    if prov.excluded_suspect > 0 {
        prov.warnings.push(format!(
            "{} reading(s) in the window were excluded as suspect or of poor quality",
            prov.excluded_suspect
        ));
    }
    if let Some((t, reason)) = first_unconvertible {
        prov.warnings.push(format!(
            "{} reading(s) in the window gave no discharge and were excluded; the first, at {t}: {reason}",
            prov.excluded_unconvertible
        ));
    }

    match newest_usable {
        Some(t) => {
            let age = now - t;
            prov.last_reading_age_s = Some(age.num_seconds());
            prov.stale = age > rules.stale_after;
            if prov.stale {
                prov.warnings.push(format!(
                    "the gauge is stale: its newest usable reading, at {t}, is {} min old (stale after {} min)",
                    age.num_minutes(),
                    rules.stale_after.num_minutes()
                ));
            }
        }
        None => {
            prov.stale = true;
            prov.warnings
                .push("the gauge is stale: it has no usable reading at or before now".to_owned());
        }
    }
    obs
}

/// The observations after the latest interval longer than `max_gap`.
fn drop_before_long_gap<'a>(
    obs: &'a [Sample],
    max_gap: Duration,
    prov: &mut Provenance,
) -> &'a [Sample] {
    let mut restart = 0;
    let mut long_gaps = 0usize;
    for (i, pair) in obs.windows(2).enumerate() {
        if let [a, b] = pair
            && b.0 - a.0 > max_gap
        {
            restart = i + 1;
            long_gaps += 1;
            prov.gap_restart = Some(Gap { from: a.0, to: b.0 });
        }
    }
    if let Some(g) = prov.gap_restart {
        let mut text = format!(
            "no usable reading from {} to {} ({} min, longer than max_gap): the {restart} observation(s) before it were dropped and the series starts at {}",
            g.from,
            g.to,
            (g.to - g.from).num_minutes(),
            g.to
        );
        if long_gaps > 1 {
            text.push_str(&format!(
                " ({long_gaps} long gaps in the window; the latest is used)"
            ));
        }
        prov.warnings.push(text);
    }
    obs.get(restart..).unwrap_or(&[])
}

/// The observations with samples every `step` inserted in intervals longer
/// than `step` (all at most `max_gap` by now).
fn fill_short_gaps(obs: &[Sample], step: Duration, prov: &mut Provenance) -> Vec<Sample> {
    let mut out = Vec::with_capacity(obs.len());
    let mut prev: Option<Sample> = None;
    for &s in obs {
        if let Some(p) = prev
            && s.0 - p.0 > step
        {
            prov.gaps_interpolated.push(Gap { from: p.0, to: s.0 });
            fill_linear(&mut out, p, s, step);
        }
        out.push(s);
        prev = Some(s);
    }
    out
}

/// Pushes samples at `a.0 + k·step` strictly between `a` and `b`, on the
/// straight line between them.
fn fill_linear(out: &mut Vec<Sample>, a: Sample, b: Sample, step: Duration) {
    let span = (b.0 - a.0).num_milliseconds() as f64;
    let mut k: i32 = 1;
    while let Some(t) = step.checked_mul(k).and_then(|d| a.0.checked_add_signed(d)) {
        if t >= b.0 || span <= 0.0 {
            break;
        }
        let w = (t - a.0).num_milliseconds() as f64 / span;
        out.push((t, a.1 + (b.1 - a.1) * w));
        k += 1;
    }
}

/// Pushes samples at `anchor.0 + k·step` before `end`, then one at `end`,
/// from the extrapolation rule anchored at `anchor`. `anchor.0 < end`.
fn extrapolate(out: &mut Vec<Sample>, anchor: Sample, end: DateTime<Utc>, rules: &Rules) {
    let hours = |t: DateTime<Utc>| (t - anchor.0).num_milliseconds() as f64 / 3_600_000.0;
    let rule = rules.extrapolation;
    let mut k: i32 = 1;
    while let Some(t) = rules
        .step
        .checked_mul(k)
        .and_then(|d| anchor.0.checked_add_signed(d))
    {
        if t >= end {
            break;
        }
        out.push((t, rule.value(anchor.1, hours(t))));
        k += 1;
    }
    if anchor.0 < end {
        out.push((end, rule.value(anchor.1, hours(end))));
    }
}

/// Value of the piecewise-linear series at `t`; `None` outside its span.
fn value_at(s: &[Sample], t: DateTime<Utc>) -> Option<f64> {
    let i = s.partition_point(|p| p.0 <= t);
    let &(ta, qa) = s.get(i.checked_sub(1)?)?;
    if ta == t {
        return Some(qa);
    }
    let &(tb, qb) = s.get(i)?;
    let w = (t - ta).num_milliseconds() as f64 / (tb - ta).num_milliseconds() as f64;
    Some(qa + (qb - qa) * w)
}

/// The series restricted to `[lo, hi]`, with interpolated samples at `lo`
/// and `hi` where it crosses them.
fn clip(s: &[Sample], lo: DateTime<Utc>, hi: DateTime<Utc>) -> Vec<Sample> {
    let mut out = Vec::with_capacity(s.len() + 2);
    let has_sample_at = |t: DateTime<Utc>| s.iter().any(|p| p.0 == t);
    if !has_sample_at(lo)
        && let Some(v) = value_at(s, lo)
    {
        out.push((lo, v));
    }
    out.extend(s.iter().copied().filter(|p| p.0 >= lo && p.0 <= hi));
    if !has_sample_at(hi)
        && let Some(v) = value_at(s, hi)
    {
        out.push((hi, v));
    }
    out
}

fn differs_a_lot(a: f64, b: f64) -> bool {
    relative_difference(a, b) > JUMP_WARN_FRACTION
}

/// `|a − b|` as a fraction of the larger magnitude (0 when both are 0): the
/// scale of the mismatch warning where observed flow meets an upload.
pub fn relative_difference(a: f64, b: f64) -> f64 {
    let scale = a.abs().max(b.abs());
    if scale > 0.0 {
        (a - b).abs() / scale
    } else {
        0.0
    }
}

/// Whether the last observation exceeds the observed flow
/// [`RISE_WINDOW_MINUTES`] earlier (or the first observation, if the record
/// is shorter) by more than [`RISE_TOLERANCE`].
fn rising(obs: &[Sample]) -> bool {
    let (Some(&first), Some(&last)) = (obs.first(), obs.last()) else {
        return false;
    };
    let t_ref = last.0 - Duration::minutes(RISE_WINDOW_MINUTES);
    let q_ref = if first.0 >= t_ref {
        first.1
    } else {
        value_at(obs, t_ref).unwrap_or(first.1)
    };
    last.1 > q_ref * (1.0 + RISE_TOLERANCE)
}

fn record_upload(prov: &mut Provenance, u: &Upload) {
    prov.source_beyond_now = Source::Upload;
    prov.upload_version = Some(u.version);
    prov.upload_issued_at = Some(u.issued_at);
    prov.upload_issued_by = Some(u.issued_by.clone());
}

/// Continues an upload that ended before `end` with the extrapolation rule.
fn extend_upload_end(
    series: &mut Vec<Sample>,
    u: &Upload,
    end: DateTime<Utc>,
    rules: &Rules,
    prov: &mut Provenance,
) {
    if let Some(&last) = series.last()
        && last.0 < end
    {
        prov.extrapolated_from = Some(last.0);
        prov.warnings.push(format!(
            "upload version {} ends at {}, before the forecast end {end}; continued from its last value ({} m³/s) with {}",
            u.version,
            last.0,
            last.1,
            rules.extrapolation.describe()
        ));
        extrapolate(series, last, end, rules);
    }
}

/// Appends the part after the last observation `last` to `series`.
fn forecast_part(
    series: &mut Vec<Sample>,
    obs: &[Sample],
    last: Sample,
    upload: Option<&Upload>,
    end: DateTime<Utc>,
    rules: &Rules,
    prov: &mut Provenance,
) {
    if let Some(u) = upload {
        let after: Vec<Sample> = clip(u.series.samples(), last.0, end)
            .into_iter()
            .filter(|p| p.0 > last.0)
            .collect();
        if let (Some(&first_used), Some(&(u_first, _))) =
            (after.first(), u.series.samples().first())
        {
            record_upload(prov, u);
            let meets = value_at(u.series.samples(), last.0).unwrap_or(first_used.1);
            if differs_a_lot(last.1, meets) {
                prov.warnings.push(format!(
                    "upload version {} gives {meets:.3} m³/s where it meets the last observation ({:.3} m³/s at {}); both are kept as they are, not blended",
                    u.version, last.1, last.0
                ));
            }
            if u_first > last.0 {
                prov.upload_join = Some(Gap {
                    from: last.0,
                    to: first_used.0,
                });
                if first_used.0 - last.0 > rules.max_gap {
                    prov.warnings.push(format!(
                        "upload version {} starts at {}, {} min after the last observation; joined by a straight line",
                        u.version,
                        first_used.0,
                        (first_used.0 - last.0).num_minutes()
                    ));
                }
                fill_linear(series, last, first_used, rules.step);
            }
            series.extend(after);
            extend_upload_end(series, u, end, rules, prov);
            return;
        }
        let why = match u.series.samples().last() {
            Some(&(u_last, _)) if u_last <= last.0 => format!(
                "ends at {u_last}, not after the last observation at {}",
                last.0
            ),
            _ => format!("starts after the forecast end {end}"),
        };
        prov.warnings.push(format!(
            "upload version {} (issued {} by {}) {why}; it was not used",
            u.version, u.issued_at, u.issued_by
        ));
    }

    prov.source_beyond_now = rules.extrapolation.source();
    prov.extrapolated_from = Some(last.0);
    prov.warnings.push(format!(
        "no forecast upload is used: after {} the inflow follows {}, which cannot forecast a rise",
        last.0,
        rules.extrapolation.describe()
    ));
    if rising(obs) {
        prov.warnings.push(format!(
            "the observed inflow is rising (last {:.3} m³/s at {}) but, without an upload, the forecast does not rise: expect it to be too low",
            last.1, last.0
        ));
    }
    extrapolate(series, last, end, rules);
}

/// The upload alone over the window, when there are no observations.
fn upload_alone(
    u: &Upload,
    now: DateTime<Utc>,
    window_start: DateTime<Utc>,
    end: DateTime<Utc>,
    rules: &Rules,
    prov: &mut Provenance,
) -> Result<Vec<Sample>, AssembleError> {
    let mut series = clip(u.series.samples(), window_start, end);
    let outside = || AssembleError::UploadOutsideWindow {
        version: u.version,
        first: u.series.samples().first().map_or(window_start, |s| s.0),
        last: u.series.samples().last().map_or(window_start, |s| s.0),
        window_start,
        end,
    };
    let first = series.first().map(|s| s.0).ok_or_else(outside)?;
    if first >= end {
        return Err(outside());
    }
    record_upload(prov, u);
    prov.warnings.push(format!(
        "no usable observations in the lookback window: the series is upload version {} alone",
        u.version
    ));
    if first > now {
        prov.warnings.push(format!(
            "the series starts at {first}, after now: upload version {} begins in the future",
            u.version
        ));
    }
    extend_upload_end(&mut series, u, end, rules, prov);
    Ok(series)
}

/// The assembly's own contract (a failure is a bug, not bad input).
fn check_output(series: Vec<Sample>) -> Result<Hydrograph, AssembleError> {
    Hydrograph::parse(series).map_err(|errors| {
        let first = &errors[0];
        AssembleError::InvalidOutput {
            index: first.row.saturating_sub(1),
            message: format!("{}: {}", first.field, first.message),
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::rating::PowerSegment;
    use crate::engine::rating::RatingCurve;
    use chrono::TimeZone;

    fn now() -> DateTime<Utc> {
        Utc.with_ymd_and_hms(2026, 3, 10, 12, 0, 0).unwrap()
    }

    /// `min` minutes from `now`.
    fn at(min: i64) -> DateTime<Utc> {
        now() + Duration::minutes(min)
    }

    fn q(min: i64, discharge: f64) -> Reading {
        Reading {
            time: at(min),
            stage: None,
            discharge: Some(discharge),
            usable: true,
        }
    }

    fn rules(extrapolation: Extrapolation) -> Rules {
        Rules {
            lookback: Duration::hours(24),
            horizon: Duration::hours(48),
            max_gap: Duration::hours(1),
            stale_after: Duration::hours(1),
            step: Duration::minutes(15),
            extrapolation,
        }
    }

    fn upload(version: i64, points: &[(i64, f64)]) -> Upload {
        Upload {
            version,
            issued_at: at(-30),
            issued_by: "forecaster.alder".to_owned(),
            series: Hydrograph::parse(points.iter().map(|&(m, v)| (at(m), v)).collect())
                .expect("test upload"),
        }
    }

    fn value(a: &Assembled, min: i64) -> f64 {
        a.series
            .iter()
            .find(|s| s.0 == at(min))
            .unwrap_or_else(|| panic!("no sample at {min} min"))
            .1
    }

    fn has_warning(a: &Assembled, needle: &str) -> bool {
        a.provenance.warnings.iter().any(|w| w.contains(needle))
    }

    /// The contract of `run::run` plus the horizon rule.
    fn assert_contract(series: &[Sample], now: DateTime<Utc>, rules: &Rules) {
        assert!(series.len() >= 2, "{series:?}");
        for w in series.windows(2) {
            assert!(w[1].0 > w[0].0, "not increasing: {w:?}");
        }
        for s in series {
            assert!(s.1.is_finite() && s.1 >= 0.0, "bad value {s:?}");
        }
        assert_eq!(series.last().unwrap().0, now + rules.horizon);
        assert!(series[0].0 >= now - rules.lookback);
    }

    /// Readings every 15 min from `from` to `to` minutes, discharge f(min).
    fn every_15(from: i64, to: i64, f: impl Fn(i64) -> f64) -> Vec<Reading> {
        (from..=to).step_by(15).map(|m| q(m, f(m))).collect()
    }

    #[test]
    fn persistence_holds_last_value() {
        let r = rules(Extrapolation::Persistence);
        let readings = every_15(-180, 0, |m| 50.0 - m as f64 / 10.0);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_contract(&a.series, now(), &r);
        // 13 observations, then 48 h at 15 min: 192 samples ending at the horizon.
        assert_eq!(a.series.len(), 13 + 192);
        assert_eq!(value(&a, -180), 68.0);
        // Persistence (common practice): every later sample is the last value.
        for s in a.series.iter().filter(|s| s.0 > now()) {
            assert_eq!(s.1, 50.0);
        }
        let p = &a.provenance;
        assert_eq!(p.source_beyond_now, Source::Persistence);
        assert_eq!(p.observed_count, 13);
        assert_eq!(
            (p.observed_from, p.observed_to),
            (Some(at(-180)), Some(now()))
        );
        assert_eq!(p.extrapolated_from, Some(now()));
        assert!(has_warning(&a, "cannot forecast a rise"));
        assert!(!has_warning(&a, "is rising"), "falling record");
        assert!(!p.stale);
        assert_eq!(p.last_reading_age_s, Some(0));
    }

    #[test]
    fn recession_matches_closed_form() {
        // Exponential recession / linear reservoir (common practice, hydrology
        // textbooks' baseflow recession Q = Qb + (Q0 − Qb)·e^(−t/k)).
        let (q0, qb, k) = (200.0, 20.0, 10.0);
        let r = rules(Extrapolation::Recession {
            k_hours: k,
            base_flow: qb,
        });
        let readings = [q(-15, 210.0), q(0, q0)];
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_contract(&a.series, now(), &r);
        let closed = |hours: f64| qb + (q0 - qb) * (-hours / k).exp();
        for (min, hours) in [
            (15, 0.25),
            (60, 1.0),
            (600, 10.0),
            (1440, 24.0),
            (2880, 48.0),
        ] {
            assert!(
                (value(&a, min) - closed(hours)).abs() < 1e-9,
                "t = {hours} h"
            );
        }
        // At t = k the excess has fallen to 1/e: e^−1 ≈ 0.3678794 (from
        // memory), so Q ≈ 20 + 180 × 0.3678794 = 86.2183.
        assert!((value(&a, 600) - 86.2183).abs() < 1e-3);
        // At 48 h: e^−4.8 ≈ 0.0082297 (from memory), Q ≈ 21.4813.
        assert!((value(&a, 2880) - 21.4813).abs() < 1e-3);
        // Decays monotonically and never undershoots the base flow.
        let beyond: Vec<f64> = a
            .series
            .iter()
            .filter(|s| s.0 > now())
            .map(|s| s.1)
            .collect();
        assert!(beyond.windows(2).all(|w| w[1] < w[0]));
        assert!(beyond.iter().all(|&v| v > qb));
        assert_eq!(a.provenance.source_beyond_now, Source::Recession);
    }

    #[test]
    fn recession_is_anchored_at_the_last_observation_not_now() {
        let r = rules(Extrapolation::Recession {
            k_hours: 5.0,
            base_flow: 0.0,
        });
        let a = assemble(
            now(),
            &[q(-45, 80.0), q(-30, 64.0)],
            &GaugeBasis::Discharge,
            None,
            &r,
        )
        .unwrap();
        assert_contract(&a.series, now(), &r);
        // now is 0.5 h after the anchor; the end 48.5 h.
        assert!((value(&a, 0) - 64.0 * (-0.5f64 / 5.0).exp()).abs() < 1e-9);
        assert!((value(&a, 2880) - 64.0 * (-48.5f64 / 5.0).exp()).abs() < 1e-9);
        assert_eq!(a.provenance.extrapolated_from, Some(at(-30)));
    }

    #[test]
    fn short_gap_is_interpolated_linearly_and_reported() {
        let r = rules(Extrapolation::Persistence);
        let readings = [
            q(-120, 40.0),
            q(-105, 40.0),
            q(-90, 40.0),
            // 60 min of silence = max_gap: still a short gap.
            q(-30, 70.0),
            q(-15, 70.0),
            q(0, 70.0),
        ];
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert_eq!(value(&a, -75), 47.5);
        assert_eq!(value(&a, -60), 55.0);
        assert_eq!(value(&a, -45), 62.5);
        let p = &a.provenance;
        assert_eq!(
            p.gaps_interpolated,
            vec![Gap {
                from: at(-90),
                to: at(-30)
            }]
        );
        assert_eq!(p.gap_restart, None);
        assert_eq!(
            p.observed_count, 6,
            "interpolated samples are not observations"
        );
    }

    #[test]
    fn long_gap_drops_earlier_observations() {
        let r = rules(Extrapolation::Persistence);
        let mut readings = every_15(-900, -840, |_| 5.0);
        readings.extend(every_15(-600, -300, |_| 10.0));
        readings.extend(every_15(-120, 0, |_| 30.0));
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert_eq!(a.series[0], (at(-120), 30.0));
        assert!(a.series.iter().all(|s| s.1 == 30.0));
        let p = &a.provenance;
        assert_eq!(
            p.gap_restart,
            Some(Gap {
                from: at(-300),
                to: at(-120)
            })
        );
        assert_eq!(p.observed_from, Some(at(-120)));
        assert_eq!(p.observed_count, 9);
        // 5 + 21 observations before the latest long gap.
        assert!(has_warning(
            &a,
            "the 26 observation(s) before it were dropped"
        ));
        assert!(has_warning(&a, "2 long gaps"));
    }

    #[test]
    fn suspect_readings_are_excluded_and_counted() {
        let r = rules(Extrapolation::Persistence);
        let mut readings = every_15(-60, 0, |_| 30.0);
        readings[1].discharge = Some(999.0);
        readings[1].usable = false;
        readings[2].discharge = Some(999.0);
        readings[2].usable = false;
        // Outside the window: not counted.
        readings.push(Reading {
            usable: false,
            ..q(-2000, 999.0)
        });
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert!(a.series.iter().all(|s| s.1 == 30.0));
        let p = &a.provenance;
        assert_eq!(p.excluded_suspect, 2);
        assert_eq!(p.observed_count, 3);
        assert_eq!(
            p.gaps_interpolated,
            vec![Gap {
                from: at(-60),
                to: at(-15)
            }]
        );
        assert!(has_warning(
            &a,
            "2 reading(s) in the window were excluded as suspect"
        ));
    }

    fn power_rating() -> RatingCurve {
        RatingCurve::Power {
            segments: vec![PowerSegment {
                c: 30.0,
                e: 0.5,
                b: 1.6,
                upper_stage: None,
            }],
        }
    }

    fn stage(min: i64, h: f64) -> Reading {
        Reading {
            time: at(min),
            stage: Some(h),
            discharge: None,
            usable: true,
        }
    }

    #[test]
    fn stage_is_converted_with_a_power_rating() {
        let r = rules(Extrapolation::Persistence);
        let basis = GaugeBasis::Stage(power_rating().into());
        let readings = [
            stage(-30, 0.4), // below e: zero flow
            stage(-15, 2.5),
            q(-10, 12.0), // discharge only: not mixed with the rating
            stage(0, 2.5),
        ];
        let a = assemble(now(), &readings, &basis, None, &r).unwrap();
        assert_contract(&a.series, now(), &r);
        // By hand, Q = C(h − e)^b: 30 × 2^1.6; 2^1.6 = 2 × e^(0.6 × ln 2)
        // = 2 × e^0.415888 = 2 × 1.515717 = 3.031433, so Q ≈ 90.943.
        assert!((value(&a, -15) - 90.943).abs() < 1e-3);
        assert!((value(&a, 0) - 90.943).abs() < 1e-3);
        assert_eq!(value(&a, -30), 0.0);
        assert_eq!(a.provenance.excluded_unconvertible, 1);
        assert!(has_warning(&a, "no stage value"));
    }

    #[test]
    fn unconvertible_readings_are_excluded_and_reported() {
        let r = rules(Extrapolation::Persistence);
        // Stage only under a discharge basis.
        let readings = [stage(-30, 2.0), q(-15, 8.0), q(0, 8.0)];
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_eq!(a.provenance.excluded_unconvertible, 1);
        assert_eq!(a.provenance.observed_from, Some(at(-15)));
        assert!(has_warning(&a, "stage only"));
        // A rating error (stage outside a table) and bad values.
        let table = GaugeBasis::Stage(Ratings::from(RatingCurve::Table {
            points: vec![[1.0, 0.0], [3.0, 100.0]],
        }));
        let readings = [
            stage(-45, 5.0),
            stage(-30, f64::NAN),
            stage(-15, 2.0),
            stage(0, 2.0),
        ];
        let a = assemble(now(), &readings, &table, None, &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert_eq!(a.provenance.excluded_unconvertible, 2);
        assert_eq!(value(&a, 0), 50.0);
        assert!(has_warning(&a, "rating:"));
        let readings = [q(-30, -1.0), q(-15, f64::INFINITY), q(0, 3.0)];
        let e = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_eq!(e.provenance.excluded_unconvertible, 2);
    }

    #[test]
    fn invalid_rating_is_an_error_naming_the_field() {
        let basis = GaugeBasis::Stage(Ratings::from(RatingCurve::Power {
            segments: Vec::new(),
        }));
        let e = assemble(
            now(),
            &[stage(0, 1.0)],
            &basis,
            None,
            &rules(Extrapolation::Persistence),
        )
        .unwrap_err();
        assert!(matches!(
            e,
            AssembleError::InvalidRating {
                field: "basis.rating",
                source: RatingError::NoSegments
            }
        ));
    }

    #[test]
    fn upload_supersedes_extrapolation() {
        let r = rules(Extrapolation::Persistence);
        let readings = every_15(-120, 0, |_| 100.0);
        let points: Vec<(i64, f64)> = (-1..=48)
            .map(|h| (h * 60, 100.0 + 5.0 * h as f64))
            .collect();
        let u = upload(3, &points);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        assert_contract(&a.series, now(), &r);
        // Observations win where they overlap the upload.
        assert_eq!(value(&a, -60), 100.0);
        // After the last observation: exactly the upload's samples.
        let beyond: Vec<Sample> = a.series.iter().copied().filter(|s| s.0 > now()).collect();
        let expected: Vec<Sample> = (1..=48)
            .map(|h| (at(h * 60), 100.0 + 5.0 * h as f64))
            .collect();
        assert_eq!(beyond, expected);
        let p = &a.provenance;
        assert_eq!(p.source_beyond_now, Source::Upload);
        assert_eq!(p.upload_version, Some(3));
        assert_eq!(p.upload_issued_at, Some(at(-30)));
        assert_eq!(p.upload_issued_by.as_deref(), Some("forecaster.alder"));
        assert_eq!(p.extrapolated_from, None);
        assert_eq!(p.upload_join, None);
        assert!(!has_warning(&a, "cannot forecast a rise"));
        assert!(!has_warning(&a, "not blended"));
    }

    #[test]
    fn newer_upload_changes_the_series() {
        let r = rules(Extrapolation::Persistence);
        let readings = every_15(-60, 0, |_| 100.0);
        let v1 = upload(1, &[(0, 100.0), (2880, 100.0)]);
        let v2 = upload(2, &[(0, 100.0), (360, 300.0), (2880, 100.0)]);
        let a1 = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&v1), &r).unwrap();
        let a2 = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&v2), &r).unwrap();
        assert_contract(&a1.series, now(), &r);
        assert_contract(&a2.series, now(), &r);
        assert_eq!(value(&a1, 2880), 100.0);
        assert_eq!(value(&a2, 360), 300.0);
        assert_ne!(a1.series, a2.series);
        assert_eq!(a1.provenance.upload_version, Some(1));
        assert_eq!(a2.provenance.upload_version, Some(2));
    }

    #[test]
    fn upload_in_the_past_falls_back_with_a_warning() {
        let r = rules(Extrapolation::Persistence);
        let readings = every_15(-60, 0, |_| 42.0);
        let u = upload(7, &[(-600, 300.0), (-60, 200.0), (0, 150.0)]);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert!(a.series.iter().all(|s| s.1 == 42.0));
        let p = &a.provenance;
        assert_eq!(p.source_beyond_now, Source::Persistence);
        assert_eq!(p.upload_version, None);
        assert!(has_warning(&a, "upload version 7"));
        assert!(has_warning(&a, "it was not used"));
    }

    #[test]
    fn upload_starting_later_is_joined_linearly() {
        let r = rules(Extrapolation::Persistence);
        let readings = [q(-45, 100.0), q(-30, 100.0)];
        let u = upload(4, &[(60, 120.0), (2880, 120.0)]);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        assert_contract(&a.series, now(), &r);
        // 90 min straight line from 100 to 120.
        for (k, min) in [(1, -15), (2, 0), (3, 15), (4, 30), (5, 45)] {
            assert!((value(&a, min) - (100.0 + 20.0 * k as f64 / 6.0)).abs() < 1e-9);
        }
        assert_eq!(value(&a, 60), 120.0);
        assert_eq!(
            a.provenance.upload_join,
            Some(Gap {
                from: at(-30),
                to: at(60)
            })
        );
        assert!(has_warning(&a, "joined by a straight line"));
        assert!(
            !has_warning(&a, "not blended"),
            "16.7 % is below the threshold"
        );
    }

    #[test]
    fn large_mismatch_keeps_both_and_warns() {
        let r = rules(Extrapolation::Persistence);
        let readings = every_15(-60, 0, |_| 100.0);
        let u = upload(5, &[(-60, 300.0), (60, 300.0), (2880, 300.0)]);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert_eq!(value(&a, 0), 100.0);
        assert_eq!(value(&a, 60), 300.0);
        // Nothing inserted between the two: no blend.
        assert!(!a.series.iter().any(|s| s.0 > now() && s.0 < at(60)));
        assert!(has_warning(&a, "both are kept as they are, not blended"));
        assert!(has_warning(&a, "300.000"));
    }

    #[test]
    fn upload_ending_early_is_extended_and_reported() {
        let readings = every_15(-60, 0, |_| 50.0);
        let u = upload(2, &[(0, 50.0), (360, 90.0), (720, 80.0)]);
        let r = rules(Extrapolation::Persistence);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert_eq!(value(&a, 735), 80.0);
        assert_eq!(value(&a, 2880), 80.0);
        assert_eq!(a.provenance.extrapolated_from, Some(at(720)));
        assert_eq!(a.provenance.source_beyond_now, Source::Upload);
        assert!(has_warning(&a, "ends at"));
        let r = rules(Extrapolation::Recession {
            k_hours: 12.0,
            base_flow: 10.0,
        });
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        // 12 h after the upload's end: 10 + 70 e^−1.
        assert!((value(&a, 1440) - (10.0 + 70.0 * (-1.0f64).exp())).abs() < 1e-9);
    }

    #[test]
    fn upload_beyond_the_horizon_is_cut_at_the_end() {
        let r = rules(Extrapolation::Persistence);
        let readings = every_15(-60, 0, |_| 50.0);
        let u = upload(1, &[(-60, 50.0), (2820, 50.0), (2940, 110.0)]);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert_eq!(value(&a, 2880), 80.0, "interpolated halfway");
    }

    #[test]
    fn stale_flag() {
        let r = rules(Extrapolation::Persistence);
        let readings = every_15(-240, -180, |_| 20.0);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert!(a.provenance.stale);
        assert_eq!(a.provenance.last_reading_age_s, Some(3 * 3600));
        assert!(has_warning(&a, "stale"));
        assert_contract(&a.series, now(), &r);
        // Exactly stale_after old is not stale (strictly longer is).
        let a = assemble(
            now(),
            &[q(-75, 1.0), q(-60, 1.0)],
            &GaugeBasis::Discharge,
            None,
            &r,
        )
        .unwrap();
        assert!(!a.provenance.stale);
        // A newer suspect reading does not refresh the gauge.
        let readings = [
            q(-120, 1.0),
            Reading {
                usable: false,
                ..q(0, 1.0)
            },
        ];
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert!(a.provenance.stale);
        // No readings at all: stale, no age.
        let u = upload(1, &[(0, 5.0), (2880, 5.0)]);
        let a = assemble(now(), &[], &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        assert!(a.provenance.stale);
        assert_eq!(a.provenance.last_reading_age_s, None);
    }

    #[test]
    fn duplicates_keep_the_last() {
        let r = rules(Extrapolation::Persistence);
        let readings = [q(0, 10.0), q(-30, 5.0), q(-15, 5.0), q(0, 20.0)];
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_eq!(value(&a, 0), 20.0);
        assert_eq!(a.provenance.duplicates_replaced, 1);
        assert_eq!(a.provenance.observed_count, 3);
        // A later suspect duplicate supersedes a usable original.
        let readings = [
            q(-15, 5.0),
            q(0, 10.0),
            Reading {
                usable: false,
                ..q(0, 99.0)
            },
        ];
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert_eq!(a.provenance.observed_to, Some(at(-15)));
        assert_eq!(a.provenance.excluded_suspect, 1);
        assert!(a.series.iter().all(|s| s.1 == 5.0));
    }

    #[test]
    fn future_readings_are_excluded() {
        let r = rules(Extrapolation::Persistence);
        let readings = [q(-15, 7.0), q(0, 7.0), q(30, 999.0)];
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert!(a.series.iter().all(|s| s.1 == 7.0));
        assert_eq!(a.provenance.excluded_future, 1);
        assert!(has_warning(&a, "after now"));
    }

    #[test]
    fn rising_limb_warns_that_the_rise_is_not_forecast() {
        let r = rules(Extrapolation::Persistence);
        let readings = every_15(-120, 0, |m| 150.0 + m as f64 / 2.0);
        let a = assemble(now(), &readings, &GaugeBasis::Discharge, None, &r).unwrap();
        assert!(has_warning(&a, "is rising"));
        assert!(
            a.series
                .iter()
                .filter(|s| s.0 > now())
                .all(|s| s.1 == 150.0)
        );
    }

    #[test]
    fn no_observations() {
        let r = rules(Extrapolation::Persistence);
        assert_eq!(
            assemble(now(), &[], &GaugeBasis::Discharge, None, &r),
            Err(AssembleError::NoData)
        );
        let suspect = [Reading {
            usable: false,
            ..q(0, 1.0)
        }];
        assert_eq!(
            assemble(now(), &suspect, &GaugeBasis::Discharge, None, &r),
            Err(AssembleError::NoData)
        );
        // The upload alone, cut to the window at both ends.
        let u = upload(9, &[(-2880, 0.0), (4320, 120.0)]);
        let a = assemble(now(), &suspect, &GaugeBasis::Discharge, Some(&u), &r).unwrap();
        assert_contract(&a.series, now(), &r);
        assert_eq!(a.series.len(), 2);
        // 1 m³/s per hour from −48 h: 24 at −24 h, 96 at +48 h.
        assert!((a.series[0].1 - 24.0).abs() < 1e-9);
        assert!((a.series[1].1 - 96.0).abs() < 1e-9);
        assert_eq!(a.provenance.upload_version, Some(9));
        assert_eq!(a.provenance.observed_count, 0);
        assert!(has_warning(&a, "upload version 9 alone"));
        // An upload that ends before the window cannot stand alone.
        let old = upload(2, &[(-3000, 10.0), (-2000, 10.0)]);
        let e = assemble(now(), &[], &GaugeBasis::Discharge, Some(&old), &r).unwrap_err();
        assert!(matches!(
            e,
            AssembleError::UploadOutsideWindow { version: 2, .. }
        ));
    }

    #[test]
    fn invalid_rules_and_uploads_name_the_field() {
        let readings = [q(-15, 1.0), q(0, 1.0)];
        let field_of = |r: Rules| match assemble(now(), &readings, &GaugeBasis::Discharge, None, &r)
        {
            Err(AssembleError::InvalidRule { field, .. }) => field,
            other => panic!("{other:?}"),
        };
        let base = rules(Extrapolation::Persistence);
        assert_eq!(
            field_of(Rules {
                lookback: Duration::zero(),
                ..base.clone()
            }),
            "lookback"
        );
        assert_eq!(
            field_of(Rules {
                horizon: Duration::hours(-1),
                ..base.clone()
            }),
            "horizon"
        );
        assert_eq!(
            field_of(Rules {
                max_gap: Duration::minutes(-1),
                ..base.clone()
            }),
            "max_gap"
        );
        assert_eq!(
            field_of(Rules {
                stale_after: Duration::minutes(-1),
                ..base.clone()
            }),
            "stale_after"
        );
        assert_eq!(
            field_of(Rules {
                step: Duration::milliseconds(10),
                ..base.clone()
            }),
            "step"
        );
        assert_eq!(
            field_of(Rules {
                step: Duration::seconds(1),
                ..base.clone()
            }),
            "step"
        );
        assert_eq!(
            field_of(Rules {
                extrapolation: Extrapolation::Recession {
                    k_hours: 0.0,
                    base_flow: 1.0
                },
                ..base.clone()
            }),
            "extrapolation.k_hours"
        );
        assert_eq!(
            field_of(Rules {
                extrapolation: Extrapolation::Recession {
                    k_hours: 1.0,
                    base_flow: f64::NAN
                },
                ..base.clone()
            }),
            "extrapolation.base_flow"
        );
    }

    #[test]
    fn provenance_serializes_with_snake_case_source() {
        let r = rules(Extrapolation::Persistence);
        let a = assemble(now(), &[q(0, 1.0)], &GaugeBasis::Discharge, None, &r).unwrap();
        let json = serde_json::to_value(&a.provenance).unwrap();
        assert_eq!(json["source_beyond_now"], "persistence");
        assert_eq!(json["stale"], false);
    }

    /// Knuth's MMIX linear congruential generator (constants from memory;
    /// common practice), deterministic so a failure reproduces.
    struct Lcg(u64);

    impl Lcg {
        fn next(&mut self) -> u64 {
            self.0 = self
                .0
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            self.0 >> 33
        }
        /// Uniform integer in `lo..=hi`.
        fn int(&mut self, lo: i64, hi: i64) -> i64 {
            lo + (self.next() % (hi - lo + 1) as u64) as i64
        }
        fn unit(&mut self) -> f64 {
            self.next() as f64 / (1u64 << 31) as f64
        }
    }

    #[test]
    fn randomized_inputs_always_meet_the_contract() {
        let mut g = Lcg(0x5eed);
        let mut ok = 0;
        for case in 0..2000 {
            let extrapolation = if g.int(0, 1) == 0 {
                Extrapolation::Persistence
            } else {
                Extrapolation::Recession {
                    k_hours: 0.5 + 20.0 * g.unit(),
                    base_flow: 50.0 * g.unit(),
                }
            };
            let r = Rules {
                lookback: Duration::minutes(g.int(1, 30 * 60)),
                horizon: Duration::minutes(g.int(1, 72 * 60)),
                max_gap: Duration::minutes(g.int(0, 180)),
                stale_after: Duration::minutes(g.int(0, 240)),
                step: Duration::seconds(g.int(1, 3600)),
                extrapolation,
            };
            let basis = if g.int(0, 1) == 0 {
                GaugeBasis::Discharge
            } else {
                GaugeBasis::Stage(power_rating().into())
            };
            let n = g.int(0, 40);
            let readings: Vec<Reading> = (0..n)
                .map(|_| Reading {
                    // Minutes, so duplicates are common.
                    time: at(g.int(-30 * 60, 60) / 15 * 15),
                    stage: (g.int(0, 5) > 0).then(|| 4.0 * g.unit()),
                    discharge: match g.int(0, 12) {
                        0 => None,
                        1 => Some(f64::NAN),
                        2 => Some(-3.0),
                        _ => Some(500.0 * g.unit()),
                    },
                    usable: g.int(0, 6) > 0,
                })
                .collect();
            let upload = (g.int(0, 1) == 0).then(|| {
                let mut t = g.int(-40 * 60, 60 * 60);
                let points: Vec<(i64, f64)> = (0..g.int(2, 10))
                    .map(|_| {
                        t += g.int(1, 600);
                        (t, 800.0 * g.unit())
                    })
                    .collect();
                upload(case, &points)
            });
            match assemble(now(), &readings, &basis, upload.as_ref(), &r) {
                Ok(a) => {
                    assert_contract(&a.series, now(), &r);
                    let p = &a.provenance;
                    assert!(p.observed_count <= readings.len());
                    if p.observed_count == 0 {
                        assert_eq!(p.source_beyond_now, Source::Upload, "case {case}");
                    }
                    ok += 1;
                }
                Err(AssembleError::NoData) => assert!(upload.is_none(), "case {case}"),
                Err(AssembleError::UploadOutsideWindow { .. }) => {}
                // A random step can ask for more samples than MAX_STEPS.
                Err(AssembleError::InvalidRule { field: "step", .. }) => {}
                Err(e) => panic!("case {case}: unexpected {e}"),
            }
        }
        assert!(ok > 1000, "only {ok} cases assembled");
    }
}

//! Ratings over time: a gauge's rating is refitted after high-flow
//! gaugings and bed changes, so each version is valid from an instant on
//! (until the next version), and a forecaster may apply a shift (a
//! gauge-height offset) over a period. A reading is converted with the
//! rating valid at its own time, its stage shifted first:
//! `Q = rating(h + shift)` (shifts applied to gauge height, common
//! practice; Kennedy 1984, from memory).
//!
//! Gaugings (measured stage and discharge) are what versions are fitted
//! from: [`fit`] fits one power segment with the engine's fit and reports
//! each gauging's percentage deviation from the curve.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use crate::engine::rating::{
    PowerFit, PowerSegment, RatingCurve, RatingError, fit_power_segment, fit_power_segment_through,
};

/// One discharge measurement at a gauge.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Gauging {
    #[serde(with = "crate::wire_time")]
    pub time: DateTime<Utc>,
    pub stage_m: f64,
    pub discharge_m3s: f64,
    /// How it was measured (e.g. `acoustic-doppler`, `current-meter`).
    pub method: String,
    pub quality: GaugingQuality,
}

/// How good a gauging is, in the usual rated words (common practice).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum GaugingQuality {
    Excellent,
    Good,
    Fair,
    Poor,
}

/// Why a CSV of gaugings was refused.
#[derive(Debug, Clone, PartialEq)]
pub enum GaugingsCsvError {
    /// Not CSV, or a header without the columns.
    Malformed(String),
    /// The first bad row.
    Row(crate::row_error::RowError),
}

/// The CSV columns of gaugings, in order (the export writes them so).
pub const GAUGINGS_CSV_HEADER: [&str; 5] =
    ["time", "stage_m", "discharge_m3s", "method", "quality"];

/// Parses gaugings from RFC 4180 CSV with the header
/// [`GAUGINGS_CSV_HEADER`] (any order, `#` comment lines): RFC 3339 times,
/// numbers, a method and a quality word. Ranges are checked by the caller,
/// as for JSON.
pub fn parse_gaugings_csv(body: &[u8]) -> Result<Vec<Gauging>, GaugingsCsvError> {
    use crate::row_error::RowError;
    let malformed =
        |e: csv::Error| GaugingsCsvError::Malformed(format!("not valid CSV (RFC 4180): {e}"));
    let mut reader = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(body);
    let headers = reader.headers().map_err(malformed)?.clone();
    let col = |n: &str| headers.iter().position(|h| h.eq_ignore_ascii_case(n));
    let cols: Vec<usize> = GAUGINGS_CSV_HEADER.iter().filter_map(|n| col(n)).collect();
    if cols.len() != GAUGINGS_CSV_HEADER.len() {
        return Err(GaugingsCsvError::Malformed(format!(
            "the header must name the columns {}; found `{}`",
            GAUGINGS_CSV_HEADER.join(","),
            headers.iter().collect::<Vec<_>>().join(",")
        )));
    }
    let mut out = Vec::new();
    for (i, rec) in reader.records().enumerate() {
        let rec = rec.map_err(malformed)?;
        let row = i + 1;
        let cell = |k: usize| rec.get(cols[k]).unwrap_or("");
        let bad = |k: usize, m: &str| {
            GaugingsCsvError::Row(RowError::new(row, GAUGINGS_CSV_HEADER[k], m))
        };
        let time = DateTime::parse_from_rfc3339(cell(0))
            .map(|t| t.with_timezone(&Utc))
            .map_err(|_| bad(0, "not an RFC 3339 time with an offset"))?;
        let number = |k: usize| cell(k).parse::<f64>().map_err(|_| bad(k, "not a number"));
        let quality = serde_json::from_value(serde_json::Value::String(cell(4).to_owned()))
            .map_err(|_| bad(4, "one of excellent, good, fair, poor"))?;
        out.push(Gauging {
            time,
            stage_m: number(1)?,
            discharge_m3s: number(2)?,
            method: cell(3).to_owned(),
            quality,
        });
    }
    Ok(out)
}

/// A rating version: a curve valid from `valid_from` on.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RatingVersion {
    pub version: i64,
    #[serde(with = "crate::wire_time")]
    pub valid_from: DateTime<Utc>,
    pub curve: RatingCurve,
    pub note: String,
}

/// A gauge-height offset (m) added to stages read in `[from, to)`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Shift {
    #[serde(with = "crate::wire_time")]
    pub from: DateTime<Utc>,
    #[serde(default, with = "crate::wire_time::option")]
    pub to: Option<DateTime<Utc>>,
    pub offset_m: f64,
    pub reason: String,
}

/// Everything that converts a gauge's stages: the gauge's own curve
/// (valid before any version), its versions, its shifts.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct Ratings {
    pub base: Option<RatingCurve>,
    /// Oldest `valid_from` first.
    pub versions: Vec<RatingVersion>,
    pub shifts: Vec<Shift>,
}

impl From<RatingCurve> for Ratings {
    fn from(curve: RatingCurve) -> Self {
        Ratings {
            base: Some(curve),
            ..Ratings::default()
        }
    }
}

impl Ratings {
    /// Whether any curve exists.
    pub fn is_empty(&self) -> bool {
        self.base.is_none() && self.versions.is_empty()
    }

    /// Checks every curve.
    pub fn validate(&self) -> Result<(), RatingError> {
        self.base.iter().try_for_each(RatingCurve::validate)?;
        self.versions.iter().try_for_each(|v| v.curve.validate())
    }

    /// The curve valid at `t` and its version (`None`: the gauge's own).
    pub fn curve_at(&self, t: DateTime<Utc>) -> Option<(&RatingCurve, Option<i64>)> {
        let v = self.versions.iter().rev().find(|v| v.valid_from <= t);
        match v {
            Some(v) => Some((&v.curve, Some(v.version))),
            None => self.base.as_ref().map(|c| (c, None)),
        }
    }

    /// The sum of the shifts covering `t` (m).
    pub fn shift_at(&self, t: DateTime<Utc>) -> f64 {
        self.shifts
            .iter()
            .filter(|s| s.from <= t && s.to.is_none_or(|to| t < to))
            .map(|s| s.offset_m)
            .sum()
    }

    /// The discharge of a stage read at `t`.
    pub fn discharge(&self, t: DateTime<Utc>, stage: f64) -> Result<f64, RatingError> {
        let (curve, _) = self.curve_at(t).ok_or(RatingError::NoSegments)?;
        curve.discharge(stage + self.shift_at(t))
    }
}

/// A fitted curve and how each gauging departs from it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FitReport {
    pub curve: RatingCurve,
    /// Each segment's fit, lowest first (one without breaks).
    pub segments: Vec<PowerFit>,
    /// Per gauging (in the order given): 100 (Q_measured / Q_curve − 1).
    pub deviations_pct: Vec<f64>,
    /// Root mean square of those deviations (%).
    pub rms_deviation_pct: f64,
}

/// Why a set of gaugings could not be fitted.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FitError {
    #[error("`breaks` must be finite and strictly increasing")]
    Breaks,
    #[error("segment {segment} (stages {range}) has {count} gaugings; it needs {needed}")]
    TooFew {
        segment: usize,
        range: String,
        count: usize,
        needed: usize,
    },
    #[error("segment {segment}: {source}")]
    Segment {
        segment: usize,
        #[source]
        source: RatingError,
    },
}

/// Fits a power rating to `gaugings`: one segment Q = C (h − e)^b without
/// `breaks`; with them (stages, increasing) one segment per stage band,
/// the lowest fitted freely and each next one through the discharge of
/// the one below at their break, so the curve is continuous (least squares
/// in log space, the engine's [`fit_power_segment`] and
/// [`fit_power_segment_through`]).
pub fn fit(gaugings: &[Gauging], breaks: &[f64]) -> Result<FitReport, FitError> {
    if breaks.iter().any(|b| !b.is_finite()) || breaks.windows(2).any(|w| w[1] <= w[0]) {
        return Err(FitError::Breaks);
    }
    let points: Vec<(f64, f64)> = gaugings
        .iter()
        .map(|g| (g.stage_m, g.discharge_m3s))
        .collect();
    let mut segments: Vec<PowerSegment> = Vec::new();
    let mut fits = Vec::new();
    for k in 0..=breaks.len() {
        let lo = k.checked_sub(1).map(|i| breaks[i]);
        let hi = breaks.get(k).copied();
        let band: Vec<(f64, f64)> = points
            .iter()
            .copied()
            .filter(|&(h, _)| lo.is_none_or(|l| h > l) && hi.is_none_or(|u| h <= u))
            .collect();
        let needed = if k == 0 { 3 } else { 2 };
        if band.len() < needed {
            let range = match (lo, hi) {
                (None, Some(u)) => format!("up to {u} m"),
                (Some(l), None) => format!("above {l} m"),
                (Some(l), Some(u)) => format!("{l} m to {u} m"),
                (None, None) => "all".to_owned(),
            };
            return Err(FitError::TooFew {
                segment: k,
                range,
                count: band.len(),
                needed,
            });
        }
        let fit = match (segments.last(), lo) {
            (Some(below), Some(l)) => fit_power_segment_through(&band, (l, below.discharge(l))),
            _ => fit_power_segment(&band),
        }
        .map_err(|source| FitError::Segment { segment: k, source })?;
        segments.push(PowerSegment {
            upper_stage: hi,
            ..fit.segment()
        });
        fits.push(fit);
    }
    let curve = RatingCurve::Power { segments };
    let deviations_pct: Vec<f64> = points
        .iter()
        .map(|&(h, q)| 100.0 * (q / curve.discharge(h).unwrap_or(f64::NAN) - 1.0))
        .collect();
    let rms =
        (deviations_pct.iter().map(|d| d * d).sum::<f64>() / deviations_pct.len() as f64).sqrt();
    Ok(FitReport {
        curve,
        segments: fits,
        deviations_pct,
        rms_deviation_pct: rms,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::ensemble::rng::SplitMix64;

    fn t(h: i64) -> DateTime<Utc> {
        DateTime::from_timestamp(1_790_000_000, 0).unwrap() + chrono::Duration::hours(h)
    }

    fn power(c: f64, e: f64, b: f64) -> RatingCurve {
        RatingCurve::Power {
            segments: vec![PowerSegment {
                c,
                e,
                b,
                upper_stage: None,
            }],
        }
    }

    /// Synthetic gaugings of Q = 12 (h − 0.3)^1.6 with ±2 % multiplicative
    /// noise: the fit recovers C, e and b closely and the deviations are
    /// the noise (the generating curve is the reference).
    #[test]
    fn a_known_curve_is_recovered_from_noisy_gaugings() {
        let mut rng = SplitMix64::new(5);
        let gaugings: Vec<Gauging> = (0..25)
            .map(|k| {
                let h = 0.6 + 0.15 * f64::from(k);
                let noise = 1.0 + 0.04 * (rng.next_unit() - 0.5);
                Gauging {
                    time: t(i64::from(k)),
                    stage_m: h,
                    discharge_m3s: 12.0 * (h - 0.3f64).powf(1.6) * noise,
                    method: "acoustic-doppler".into(),
                    quality: GaugingQuality::Good,
                }
            })
            .collect();
        let r = fit(&gaugings, &[]).unwrap();
        let f = r.segments[0];
        assert!((f.b - 1.6).abs() < 0.08, "{f:?}");
        assert!((f.e - 0.3).abs() < 0.05, "{f:?}");
        // At mid-range the fitted discharge is within 1 % of the truth.
        let q = RatingCurve::discharge(&r.curve, 2.0).unwrap();
        let truth = 12.0 * 1.7f64.powf(1.6);
        assert!((q / truth - 1.0).abs() < 0.01, "{q} vs {truth}");
        assert!(r.deviations_pct.iter().all(|d| d.abs() < 2.5));
        assert!(r.rms_deviation_pct > 0.1 && r.rms_deviation_pct < 2.0);
    }

    /// A two-segment rating, continuous at its break (common practice for
    /// a control that changes, e.g. a bank or floodplain coming in):
    /// Q = 12 (h − 0.3)^1.6 up to 2.0 m, then Q = c₂ (h − 1.0)^2.2 through
    /// the same discharge at 2.0 m. From gaugings with ±2 % noise the fit
    /// with `breaks = [2.0]` recovers both exponents, is continuous at the
    /// break, and stays within 2 % of the truth across both segments.
    #[test]
    fn a_two_segment_curve_is_recovered_and_continuous_at_its_break() {
        let q1 = |h: f64| 12.0 * (h - 0.3f64).powf(1.6);
        let q_b = q1(2.0);
        let q2 = |h: f64| q_b * (h - 1.0f64).powf(2.2);
        let truth = |h: f64| if h <= 2.0 { q1(h) } else { q2(h) };
        let mut rng = SplitMix64::new(11);
        let gaugings: Vec<Gauging> = (0..40)
            .map(|k| {
                let h = 0.6 + 0.09 * f64::from(k);
                Gauging {
                    time: t(i64::from(k)),
                    stage_m: h,
                    discharge_m3s: truth(h) * (1.0 + 0.04 * (rng.next_unit() - 0.5)),
                    method: "acoustic-doppler".into(),
                    quality: GaugingQuality::Good,
                }
            })
            .collect();
        let r = fit(&gaugings, &[2.0]).unwrap();
        let [low, high] = r.segments.as_slice() else {
            panic!("two segments: {:?}", r.segments);
        };
        assert!((low.b - 1.6).abs() < 0.1, "{low:?}");
        assert!((high.b - 2.2).abs() < 0.2, "{high:?}");
        let RatingCurve::Power { segments } = &r.curve else {
            panic!("a power curve");
        };
        assert_eq!(segments[0].upper_stage, Some(2.0));
        assert_eq!(segments[1].upper_stage, None);
        let (below, above) = (segments[0].discharge(2.0), segments[1].discharge(2.0));
        assert!((above / below - 1.0).abs() < 1e-12, "{below} vs {above}");
        for h in [0.8, 1.5, 2.0, 2.5, 3.5, 4.0] {
            let q = r.curve.discharge(h).unwrap();
            assert!(
                (q / truth(h) - 1.0).abs() < 0.02,
                "{h}: {q} vs {}",
                truth(h)
            );
        }
        assert!(r.rms_deviation_pct < 2.0);
        assert_eq!(fit(&gaugings, &[2.0, 1.0]), Err(FitError::Breaks));
        assert!(matches!(
            fit(&gaugings, &[9.0]),
            Err(FitError::TooFew { segment: 1, .. })
        ));
    }

    /// A reading is converted with the rating valid at its time: before
    /// the version, the gauge's own curve; from it on, the new one; a
    /// shift adds to the stage only inside its period.
    #[test]
    fn each_reading_uses_the_rating_valid_at_its_time() {
        let r = Ratings {
            base: Some(power(10.0, 0.0, 1.5)),
            versions: vec![RatingVersion {
                version: 1,
                valid_from: t(10),
                curve: power(8.0, 0.1, 1.7),
                note: "refit after a gauging at high flow".into(),
            }],
            shifts: vec![Shift {
                from: t(20),
                to: Some(t(30)),
                offset_m: -0.05,
                reason: "weed growth".into(),
            }],
        };
        let h = 2.0;
        let close = |at: i64, want: f64| {
            let got = r.discharge(t(at), h).unwrap();
            assert!(
                (got - want).abs() < 1e-12 * want,
                "hour {at}: {got} vs {want}"
            );
        };
        close(9, 10.0 * 2f64.powf(1.5));
        close(10, 8.0 * 1.9f64.powf(1.7));
        close(25, 8.0 * 1.85f64.powf(1.7));
        close(30, 8.0 * 1.9f64.powf(1.7));
        assert_eq!(r.curve_at(t(11)).map(|(_, v)| v), Some(Some(1)));
        assert!(Ratings::default().discharge(t(0), 1.0).is_err());
    }

    /// Gaugings of any finite magnitude (stages and discharges from 1e-308
    /// to 1e308, seeded) give a fit or an error, never a panic: the service
    /// fits whatever a forecaster stored. (A fuzzer found that stages
    /// spanning hundreds of orders of magnitude made the least squares see
    /// infinite logarithms.)
    #[test]
    fn gaugings_of_any_magnitude_fit_or_fail_without_panicking() {
        let mut rng = SplitMix64::new(1);
        let wild = |rng: &mut SplitMix64| {
            let v = 10f64.powi((rng.next_unit() * 616.0 - 308.0) as i32) * rng.next_unit();
            if rng.below(2) == 0 { v } else { -v }
        };
        for trial in 0..200 {
            let n = 3 + rng.below(20);
            let set: Vec<Gauging> = (0..n)
                .map(|k| Gauging {
                    time: t(k as i64),
                    stage_m: if trial % 2 == 0 {
                        wild(&mut rng)
                    } else {
                        10.0 * rng.next_unit()
                    },
                    discharge_m3s: wild(&mut rng).abs().max(f64::MIN_POSITIVE),
                    method: "invented".into(),
                    quality: GaugingQuality::Fair,
                })
                .collect();
            if let Ok(r) = fit(&set, &[]) {
                let f = r.segments[0];
                assert!(f.c.is_finite() && f.b > 0.0, "trial {trial}: {f:?}");
            }
            // And in two segments, broken at a middle gauging's stage.
            let mut stages: Vec<f64> = set.iter().map(|g| g.stage_m).collect();
            stages.sort_by(f64::total_cmp);
            if let Ok(r) = fit(&set, &[stages[stages.len() / 2]]) {
                for f in &r.segments {
                    assert!(f.c.is_finite() && f.b > 0.0, "trial {trial}: {f:?}");
                }
            }
        }
    }

    /// The CSV the API exports reads back to the same gaugings; a bad
    /// cell names its row and column.
    #[test]
    fn gaugings_csv_reads_and_names_the_bad_cell() {
        let text = "time,stage_m,discharge_m3s,method,quality\n\
                    2026-03-14T06:00:00Z,20.5,31.25,acoustic-doppler,good\n\
                    # a comment line\n\
                    2026-03-14T09:00:00+01:00,21,45,current-meter,fair\n";
        let g = parse_gaugings_csv(text.as_bytes()).unwrap();
        assert_eq!(g.len(), 2);
        let eight = DateTime::parse_from_rfc3339("2026-03-14T08:00:00Z").unwrap();
        assert_eq!(
            g[1].time,
            eight.with_timezone(&Utc),
            "the offset is applied"
        );
        assert_eq!((g[0].stage_m, g[0].discharge_m3s), (20.5, 31.25));
        assert_eq!(g[1].quality, GaugingQuality::Fair);
        let bad =
            "time,stage_m,discharge_m3s,method,quality\n2026-03-14T06:00:00Z,20.5,lots,adcp,good\n";
        match parse_gaugings_csv(bad.as_bytes()) {
            Err(GaugingsCsvError::Row(e)) => {
                assert_eq!((e.row, e.field.as_str()), (1, "discharge_m3s"))
            }
            other => panic!("{other:?}"),
        }
        assert!(matches!(
            parse_gaugings_csv(b"time,stage\n"),
            Err(GaugingsCsvError::Malformed(_))
        ));
    }
}

//! Stage–discharge rating curves: evaluation both ways and power-law fitting.
//!
//! A rating converts a forecast discharge into a stage a user can compare
//! with a gauge board, and turns observed stages into discharges. Two forms
//! are supported:
//!
//! * **Power segments**, Q = C (h − e)^b (common practice), where `e` is the
//!   gauge height of zero flow. Segments are ordered by stage; segment `i`
//!   applies up to and including its `upper_stage`, the last one without
//!   limit. Below `e` of the first segment the discharge is zero.
//! * **Tables** of (stage, discharge) with linear interpolation. Linear rather
//!   than log-linear because a table often starts at zero flow, where a
//!   logarithm is undefined, and because the user's points are then honoured
//!   exactly with no hidden zero-flow stage. Tables do not extrapolate: a
//!   query outside the table is an error the caller must handle.
//!
//! Segments need not meet at their breakpoints. A jump is tolerated (ratings
//! fitted segment by segment rarely join exactly) and reported by
//! [`RatingCurve::breakpoint_jumps`]; the inverse then returns the lowest stage
//! at which the rating reaches the discharge.

use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// One power-law segment Q = c (h − e)^b.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PowerSegment {
    /// Coefficient C (> 0), in m³/s per m^b.
    pub c: f64,
    /// Gauge height of zero flow e (m).
    pub e: f64,
    /// Exponent b (> 0).
    pub b: f64,
    /// Highest stage this segment applies to (m); `None` only on the last
    /// segment, which applies without limit.
    #[serde(default)]
    pub upper_stage: Option<f64>,
}

impl PowerSegment {
    /// Discharge of this segment alone at `stage`; zero at or below `e`.
    pub fn discharge(&self, stage: f64) -> f64 {
        if stage > self.e {
            self.c * (stage - self.e).powf(self.b)
        } else {
            0.0
        }
    }
}

/// A stage–discharge relation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum RatingCurve {
    /// Power-law segments ordered by stage.
    Power {
        /// The segments, lowest first.
        segments: Vec<PowerSegment>,
    },
    /// Measured or published (stage m, discharge m³/s) pairs, both strictly
    /// increasing, linearly interpolated.
    Table {
        /// The pairs as `[stage, discharge]`.
        points: Vec<[f64; 2]>,
    },
}

/// A discontinuity of a power rating at a breakpoint.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BreakpointJump {
    /// Index of the segment that ends at the breakpoint.
    pub index: usize,
    /// Breakpoint stage (m).
    pub stage: f64,
    /// Discharge of the lower segment at the breakpoint (m³/s).
    pub below: f64,
    /// Discharge of the upper segment at the breakpoint (m³/s).
    pub above: f64,
}

/// Why a rating, a rating query or a fit was rejected. Variants name the
/// offending field so the user can find it in the input.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RatingError {
    /// A power rating needs at least one segment.
    #[error("`segments` is empty; a power rating needs at least one segment")]
    NoSegments,
    /// A value that must be finite is not.
    #[error("`{field}` must be finite, got {value}")]
    NonFinite {
        /// Field path, e.g. `segments[1].e`.
        field: String,
        /// Offending value.
        value: f64,
    },
    /// A value that must be positive is not.
    #[error("`{field}` must be positive, got {value}")]
    NotPositive {
        /// Field path, e.g. `segments[0].c`.
        field: String,
        /// Offending value.
        value: f64,
    },
    /// Every segment but the last needs an upper stage.
    #[error("`segments[{index}].upper_stage` is required: only the last segment may be unbounded")]
    MissingBreakpoint {
        /// Segment index.
        index: usize,
    },
    /// The last segment must be unbounded so every stage has a discharge.
    #[error(
        "`segments[{index}].upper_stage` must be omitted: the last segment applies without limit"
    )]
    LastSegmentBounded {
        /// Segment index.
        index: usize,
    },
    /// Breakpoints must strictly increase.
    #[error(
        "`segments[{index}].upper_stage` ({stage}) must be greater than the previous breakpoint ({previous})"
    )]
    BreakpointsNotIncreasing {
        /// Segment index.
        index: usize,
        /// Its upper stage.
        stage: f64,
        /// The previous segment's upper stage.
        previous: f64,
    },
    /// A segment's zero-flow stage must lie below its stage range, or it
    /// would report zero flow inside its own range.
    #[error(
        "`segments[{index}].e` ({e}) must be below {limit}, the bottom of the segment's stage range"
    )]
    ZeroFlowStageTooHigh {
        /// Segment index.
        index: usize,
        /// Its zero-flow stage.
        e: f64,
        /// The bound it must stay below.
        limit: f64,
    },
    /// A table needs at least two points.
    #[error("`points` has {count} points; a rating table needs at least 2")]
    TooFewTablePoints {
        /// Number of points given.
        count: usize,
    },
    /// Table columns must strictly increase.
    #[error("`points[{index}].{field}` ({value}) must be greater than `points[{}].{field}` ({previous})", .index - 1)]
    TableNotIncreasing {
        /// Index of the offending point.
        index: usize,
        /// `stage` or `discharge`.
        field: &'static str,
        /// Its value.
        value: f64,
        /// The previous point's value.
        previous: f64,
    },
    /// Table discharges cannot be negative.
    #[error("`points[{index}].discharge` must not be negative, got {value}")]
    NegativeDischarge {
        /// Index of the offending point.
        index: usize,
        /// Offending value.
        value: f64,
    },
    /// A query outside a table's range.
    #[error("{field} {value} is outside the rating table's range [{min}, {max}]")]
    OutOfRange {
        /// `stage` or `discharge`.
        field: &'static str,
        /// Queried value.
        value: f64,
        /// Lowest tabulated value.
        min: f64,
        /// Highest tabulated value.
        max: f64,
    },
    /// A query value is invalid (non-finite stage, negative discharge).
    #[error("`{field}` must be {requirement}, got {value}")]
    InvalidQuery {
        /// Argument name.
        field: &'static str,
        /// What it must satisfy.
        requirement: &'static str,
        /// Offending value.
        value: f64,
    },
    /// A fit needs at least three points.
    #[error("a power fit needs at least 3 points, got {count}")]
    TooFewFitPoints {
        /// Number of points given.
        count: usize,
    },
    /// Fit points must be finite with positive discharge.
    #[error("fit point {index} ({stage}, {discharge}) must be finite with positive discharge")]
    InvalidFitPoint {
        /// Index of the offending point.
        index: usize,
        /// Its stage.
        stage: f64,
        /// Its discharge.
        discharge: f64,
    },
    /// The fit could not produce a rising power law.
    #[error("the power fit failed: {reason}")]
    FitFailed {
        /// Why.
        reason: &'static str,
    },
}

impl RatingCurve {
    /// Checks the rating; every query calls this first.
    pub fn validate(&self) -> Result<(), RatingError> {
        match self {
            RatingCurve::Power { segments } => validate_segments(segments),
            RatingCurve::Table { points } => validate_table(points),
        }
    }

    /// Discharge (m³/s) at `stage` (m).
    ///
    /// Power ratings are defined for every finite stage (zero below the first
    /// segment's `e`); tables return [`RatingError::OutOfRange`] outside their
    /// stages.
    pub fn discharge(&self, stage: f64) -> Result<f64, RatingError> {
        self.validate()?;
        if !stage.is_finite() {
            return Err(RatingError::InvalidQuery {
                field: "stage",
                requirement: "finite",
                value: stage,
            });
        }
        match self {
            RatingCurve::Power { segments } => {
                let seg = segments
                    .iter()
                    .find(|s| s.upper_stage.is_none_or(|u| stage <= u))
                    .ok_or(RatingError::NoSegments)?;
                Ok(seg.discharge(stage))
            }
            RatingCurve::Table { points } => interpolate(points, 0, stage, "stage"),
        }
    }

    /// Stage (m) at which the rating carries `discharge` (m³/s).
    ///
    /// For power ratings this is the lowest stage at which the rating reaches
    /// `discharge`: zero flow maps to the first segment's `e`, and a discharge
    /// that falls inside an upward jump at a breakpoint maps to the
    /// breakpoint. Segments are inverted in closed form, h = e + (Q/C)^(1/b).
    /// Tables interpolate linearly and reject discharges outside the table.
    pub fn stage(&self, discharge: f64) -> Result<f64, RatingError> {
        self.validate()?;
        if !(discharge.is_finite() && discharge >= 0.0) {
            return Err(RatingError::InvalidQuery {
                field: "discharge",
                requirement: "finite and non-negative",
                value: discharge,
            });
        }
        match self {
            RatingCurve::Power { segments } => {
                let first = segments.first().ok_or(RatingError::NoSegments)?;
                if discharge == 0.0 {
                    return Ok(first.e);
                }
                let mut lower = f64::NEG_INFINITY;
                for s in segments {
                    let top = s.upper_stage.map_or(f64::INFINITY, |u| s.discharge(u));
                    if discharge <= top {
                        let h = s.e + (discharge / s.c).powf(1.0 / s.b);
                        let upper = s.upper_stage.unwrap_or(f64::INFINITY);
                        return Ok(h.clamp(lower, upper));
                    }
                    lower = s.upper_stage.unwrap_or(f64::INFINITY);
                }
                // The last segment is unbounded, so the loop always returns.
                Err(RatingError::NoSegments)
            }
            RatingCurve::Table { points } => interpolate(points, 1, discharge, "discharge"),
        }
    }

    /// Discontinuities of a power rating at its breakpoints (empty for a
    /// table or a rating whose segments meet). Reported rather than rejected
    /// so the user can decide whether a jump matters.
    pub fn breakpoint_jumps(&self) -> Vec<BreakpointJump> {
        let RatingCurve::Power { segments } = self else {
            return Vec::new();
        };
        segments
            .windows(2)
            .enumerate()
            .filter_map(|(index, pair)| {
                let stage = pair[0].upper_stage?;
                let below = pair[0].discharge(stage);
                let above = pair[1].discharge(stage);
                let scale = below.abs().max(above.abs()).max(f64::MIN_POSITIVE);
                ((above - below).abs() > 1e-9 * scale).then_some(BreakpointJump {
                    index,
                    stage,
                    below,
                    above,
                })
            })
            .collect()
    }
}

fn check_finite(field: impl FnOnce() -> String, value: f64) -> Result<(), RatingError> {
    if value.is_finite() {
        Ok(())
    } else {
        Err(RatingError::NonFinite {
            field: field(),
            value,
        })
    }
}

fn validate_segments(segments: &[PowerSegment]) -> Result<(), RatingError> {
    if segments.is_empty() {
        return Err(RatingError::NoSegments);
    }
    let last = segments.len() - 1;
    let mut previous: Option<f64> = None;
    for (i, s) in segments.iter().enumerate() {
        check_finite(|| format!("segments[{i}].c"), s.c)?;
        check_finite(|| format!("segments[{i}].e"), s.e)?;
        check_finite(|| format!("segments[{i}].b"), s.b)?;
        if s.c <= 0.0 {
            return Err(RatingError::NotPositive {
                field: format!("segments[{i}].c"),
                value: s.c,
            });
        }
        if s.b <= 0.0 {
            return Err(RatingError::NotPositive {
                field: format!("segments[{i}].b"),
                value: s.b,
            });
        }
        match (s.upper_stage, i == last) {
            (None, false) => return Err(RatingError::MissingBreakpoint { index: i }),
            (Some(_), true) => return Err(RatingError::LastSegmentBounded { index: i }),
            (Some(u), false) => {
                check_finite(|| format!("segments[{i}].upper_stage"), u)?;
                if let Some(p) = previous
                    && u <= p
                {
                    return Err(RatingError::BreakpointsNotIncreasing {
                        index: i,
                        stage: u,
                        previous: p,
                    });
                }
                if previous.is_none() && s.e >= u {
                    return Err(RatingError::ZeroFlowStageTooHigh {
                        index: i,
                        e: s.e,
                        limit: u,
                    });
                }
            }
            (None, true) => {}
        }
        if let Some(p) = previous
            && s.e >= p
        {
            return Err(RatingError::ZeroFlowStageTooHigh {
                index: i,
                e: s.e,
                limit: p,
            });
        }
        if s.upper_stage.is_some() {
            previous = s.upper_stage;
        }
    }
    Ok(())
}

fn validate_table(points: &[[f64; 2]]) -> Result<(), RatingError> {
    if points.len() < 2 {
        return Err(RatingError::TooFewTablePoints {
            count: points.len(),
        });
    }
    for (i, p) in points.iter().enumerate() {
        check_finite(|| format!("points[{i}].stage"), p[0])?;
        check_finite(|| format!("points[{i}].discharge"), p[1])?;
        if p[1] < 0.0 {
            return Err(RatingError::NegativeDischarge {
                index: i,
                value: p[1],
            });
        }
    }
    for (i, pair) in points.windows(2).enumerate() {
        for (col, field) in [(0, "stage"), (1, "discharge")] {
            if pair[1][col] <= pair[0][col] {
                return Err(RatingError::TableNotIncreasing {
                    index: i + 1,
                    field,
                    value: pair[1][col],
                    previous: pair[0][col],
                });
            }
        }
    }
    Ok(())
}

/// Linear interpolation in a validated table, from column `col` to the other.
fn interpolate(
    points: &[[f64; 2]],
    col: usize,
    x: f64,
    field: &'static str,
) -> Result<f64, RatingError> {
    let other = 1 - col;
    let (first, last) = match (points.first(), points.last()) {
        (Some(f), Some(l)) => (f, l),
        _ => return Err(RatingError::TooFewTablePoints { count: 0 }),
    };
    if x < first[col] || x > last[col] {
        return Err(RatingError::OutOfRange {
            field,
            value: x,
            min: first[col],
            max: last[col],
        });
    }
    let j = points
        .partition_point(|p| p[col] < x)
        .clamp(1, points.len() - 1);
    let (a, b) = (points[j - 1], points[j]);
    let t = (x - a[col]) / (b[col] - a[col]);
    Ok(a[other] + t * (b[other] - a[other]))
}

/// Result of [`fit_power_segment`]: the curve and how well it fits.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PowerFit {
    /// Coefficient C.
    pub c: f64,
    /// Gauge height of zero flow e (m).
    pub e: f64,
    /// Exponent b.
    pub b: f64,
    /// Root-mean-square residual of ln Q.
    pub rmse_log: f64,
    /// Largest |Q_fit / Q − 1| over the points.
    pub max_relative_error: f64,
    /// Coefficient of determination of ln Q.
    pub r_squared: f64,
    /// Number of points fitted.
    pub n_points: usize,
    /// True when the best `e` sits on the edge of the searched range, a sign
    /// that the data do not pin down the zero-flow stage (for example an
    /// exponential-looking rating); treat `e` and `b` with caution.
    pub e_at_search_limit: bool,
}

impl PowerFit {
    /// The fit of `points` by Q = c (h − e)^b with its residual sum of
    /// squares in ln Q and the total sum of squares of ln Q about its mean
    /// (r² is 1 when that is zero: one discharge, fitted exactly).
    fn of(
        points: &[(f64, f64)],
        (c, e, b): (f64, f64, f64),
        (rss, ss_tot): (f64, f64),
        e_at_search_limit: bool,
    ) -> Self {
        let max_relative_error = points
            .iter()
            .map(|&(h, q)| (c * (h - e).powf(b) / q - 1.0).abs())
            .fold(0.0, f64::max);
        Self {
            c,
            e,
            b,
            rmse_log: (rss / points.len() as f64).sqrt(),
            max_relative_error,
            r_squared: if ss_tot > 0.0 {
                1.0 - rss / ss_tot
            } else {
                1.0
            },
            n_points: points.len(),
            e_at_search_limit,
        }
    }

    /// The fit as an unbounded rating segment.
    pub fn segment(&self) -> PowerSegment {
        PowerSegment {
            c: self.c,
            e: self.e,
            b: self.b,
            upper_stage: None,
        }
    }
}

/// Number of trial values of ln(h_min − e) in the coarse scan.
const SCAN_STEPS: usize = 96;
/// Golden-section refinement steps after the scan.
const GOLDEN_STEPS: usize = 80;

/// The minimum of `f` on `[a, b]` by [`GOLDEN_STEPS`] golden-section steps
/// (the same evaluations, in the same order, as written inline before).
fn golden_section(f: &dyn Fn(f64) -> f64, mut a: f64, mut b: f64) -> f64 {
    let ratio = (5f64.sqrt() - 1.0) / 2.0;
    let mut x1 = b - ratio * (b - a);
    let mut x2 = a + ratio * (b - a);
    let (mut f1, mut f2) = (f(x1), f(x2));
    for _ in 0..GOLDEN_STEPS {
        if f1 <= f2 {
            b = x2;
            x2 = x1;
            f2 = f1;
            x1 = b - ratio * (b - a);
            f1 = f(x1);
        } else {
            a = x1;
            x1 = x2;
            f1 = f2;
            x2 = a + ratio * (b - a);
            f2 = f(x2);
        }
    }
    0.5 * (a + b)
}

/// The offset s = ln(h_ref − e) minimising `rss`: a coarse scan of s over
/// 10⁻⁶ to 10³ stage `range`s guards against local minima, and a
/// golden-section search refines the best scan interval. Returns it and
/// whether it sits at an end of the scan (within half a step); `None` when
/// no trial gave a finite sum.
fn search_log_offset(rss: &dyn Fn(f64) -> f64, range: f64) -> Option<(f64, bool)> {
    let s_lo = (range * 1e-6).ln();
    let s_hi = (range * 1e3).ln();
    let step = (s_hi - s_lo) / SCAN_STEPS as f64;
    let (mut best_k, mut best_rss) = (0_usize, f64::INFINITY);
    for k in 0..=SCAN_STEPS {
        let v = rss(s_lo + k as f64 * step);
        if v < best_rss {
            best_rss = v;
            best_k = k;
        }
    }
    if !best_rss.is_finite() {
        return None;
    }
    // Golden-section search on the scan interval either side of the best.
    let mut s_best = golden_section(
        rss,
        s_lo + best_k.saturating_sub(1) as f64 * step,
        s_lo + (best_k + 1).min(SCAN_STEPS) as f64 * step,
    );
    if rss(s_best) > best_rss {
        s_best = s_lo + best_k as f64 * step;
    }
    let edge = step * 0.5;
    Some((s_best, s_best <= s_lo + edge || s_best >= s_hi - edge))
}

/// Fits Q = C (h − e)^b to (stage, discharge) points by least squares in log
/// space.
///
/// For a fixed `e` the model ln Q = ln C + b ln(h − e) is linear and is solved
/// by SVD. The zero-flow stage is then found by minimising the residual sum
/// of squares over δ = h_min − e > 0: a coarse scan of ln δ from 10⁻⁶ to 10³
/// stage ranges guards against local minima, and a golden-section search
/// refines the best scan interval. Needs at least three points with finite
/// stage, positive finite discharge and more than one distinct stage.
pub fn fit_power_segment(points: &[(f64, f64)]) -> Result<PowerFit, RatingError> {
    if points.len() < 3 {
        return Err(RatingError::TooFewFitPoints {
            count: points.len(),
        });
    }
    for (index, &(stage, discharge)) in points.iter().enumerate() {
        if !(stage.is_finite() && discharge.is_finite() && discharge > 0.0) {
            return Err(RatingError::InvalidFitPoint {
                index,
                stage,
                discharge,
            });
        }
    }
    let h_min = points.iter().map(|p| p.0).fold(f64::INFINITY, f64::min);
    let h_max = points.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max);
    let range = h_max - h_min;
    if !(range > 0.0 && range.is_finite()) {
        return Err(RatingError::FitFailed {
            reason: "all stages are equal",
        });
    }
    let y = DVector::from_iterator(points.len(), points.iter().map(|p| p.1.ln()));
    let mean = y.mean();
    let ss_tot: f64 = y.iter().map(|v| (v - mean) * (v - mean)).sum();
    if ss_tot <= 0.0 {
        return Err(RatingError::FitFailed {
            reason: "all discharges are equal",
        });
    }

    // Least squares for e = h_min − exp(s); returns (rss, ln C, b).
    let solve = |s: f64| -> Option<(f64, f64, f64)> {
        let e = h_min - s.exp();
        let x = DMatrix::from_fn(points.len(), 2, |r, col| {
            if col == 0 {
                1.0
            } else {
                (points[r].0 - e).ln()
            }
        });
        // Stages spanning hundreds of orders of magnitude make ln(h − e)
        // overflow; the SVD must not see a non-finite entry (it may panic).
        if !x.iter().all(|v| v.is_finite()) {
            return None;
        }
        let coef = x.clone().svd(true, true).solve(&y, 1e-12).ok()?;
        let residual = &y - &x * &coef;
        let rss = residual.norm_squared();
        rss.is_finite().then_some((rss, coef[0], coef[1]))
    };
    let rss = |s: f64| solve(s).map_or(f64::INFINITY, |r| r.0);

    let (s_best, at_limit) = search_log_offset(&rss, range).ok_or(RatingError::FitFailed {
        reason: "least squares did not produce a finite solution",
    })?;
    let (rss_best, ln_c, exponent) = solve(s_best).ok_or(RatingError::FitFailed {
        reason: "least squares did not produce a finite solution",
    })?;
    if exponent.is_nan() || exponent <= 0.0 {
        return Err(RatingError::FitFailed {
            reason: "discharge does not rise with stage",
        });
    }
    let e = h_min - s_best.exp();
    let c = ln_c.exp();
    if !(c.is_finite() && c > 0.0 && exponent.is_finite() && e.is_finite()) {
        return Err(RatingError::FitFailed {
            reason: "the fitted curve is not finite (stages or discharges span too many orders of magnitude)",
        });
    }
    Ok(PowerFit::of(
        points,
        (c, e, exponent),
        (rss_best, ss_tot),
        at_limit,
    ))
}

/// Fits Q = C (h − e)^b to points above a break, through the break
/// `(h_b, q_b)` where the segment below ends, so the rating is continuous
/// there.
///
/// Through a fixed point, for a fixed `e` the model
/// ln Q − ln q_b = b (ln(h − e) − ln(h_b − e)) is a line through the origin,
/// solved in closed form; `e` below the break is found as in
/// [`fit_power_segment`] (a scan of ln(h_b − e), then golden section).
/// Needs at least two points above the break with positive finite
/// discharge.
pub fn fit_power_segment_through(
    points: &[(f64, f64)],
    (h_b, q_b): (f64, f64),
) -> Result<PowerFit, RatingError> {
    if points.len() < 2 {
        return Err(RatingError::TooFewFitPoints {
            count: points.len(),
        });
    }
    for (index, &(stage, discharge)) in points.iter().enumerate() {
        if !(stage.is_finite() && discharge.is_finite() && discharge > 0.0 && stage > h_b) {
            return Err(RatingError::InvalidFitPoint {
                index,
                stage,
                discharge,
            });
        }
    }
    if !(h_b.is_finite() && q_b.is_finite() && q_b > 0.0) {
        return Err(RatingError::FitFailed {
            reason: "the segment below gives no positive discharge at the break",
        });
    }
    let h_max = points.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max);
    let range = h_max - h_b;
    // For e = h_b − exp(s): (rss, b).
    let solve = |s: f64| -> Option<(f64, f64)> {
        let e = h_b - s.exp();
        let base = (h_b - e).ln();
        let xy: Vec<(f64, f64)> = points
            .iter()
            .map(|&(h, q)| ((h - e).ln() - base, q.ln() - q_b.ln()))
            .collect();
        let sxx: f64 = xy.iter().map(|(x, _)| x * x).sum();
        let b = xy.iter().map(|(x, y)| x * y).sum::<f64>() / sxx;
        let rss: f64 = xy.iter().map(|(x, y)| (y - b * x).powi(2)).sum();
        (rss.is_finite() && b.is_finite()).then_some((rss, b))
    };
    let rss = |s: f64| solve(s).map_or(f64::INFINITY, |r| r.0);
    let failed = RatingError::FitFailed {
        reason: "least squares did not produce a finite solution",
    };
    let (s_best, at_limit) = search_log_offset(&rss, range).ok_or(failed.clone())?;
    let (rss_best, exponent) = solve(s_best).ok_or(failed)?;
    if exponent <= 0.0 {
        return Err(RatingError::FitFailed {
            reason: "discharge does not rise with stage",
        });
    }
    let e = h_b - s_best.exp();
    let c = q_b / (h_b - e).powf(exponent);
    let y_mean = points.iter().map(|p| p.1.ln()).sum::<f64>() / points.len() as f64;
    let ss_tot: f64 = points.iter().map(|p| (p.1.ln() - y_mean).powi(2)).sum();
    Ok(PowerFit::of(
        points,
        (c, e, exponent),
        (rss_best, ss_tot),
        at_limit,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn seg(c: f64, e: f64, b: f64, upper: Option<f64>) -> PowerSegment {
        PowerSegment {
            c,
            e,
            b,
            upper_stage: upper,
        }
    }

    fn two_segments() -> RatingCurve {
        // Segment 0: 10 (h − 1)^2 up to h = 2 (Q = 10 there);
        // segment 1: 5 (h − 0)^1 above (Q = 10 at h = 2: continuous).
        RatingCurve::Power {
            segments: vec![seg(10.0, 1.0, 2.0, Some(2.0)), seg(5.0, 0.0, 1.0, None)],
        }
    }

    #[test]
    fn power_discharge_by_segment_and_zero_below_e() {
        let r = two_segments();
        assert_eq!(r.discharge(0.5), Ok(0.0));
        assert_eq!(r.discharge(1.0), Ok(0.0));
        assert!((r.discharge(1.5).expect("ok") - 2.5).abs() < 1e-12);
        assert!((r.discharge(2.0).expect("ok") - 10.0).abs() < 1e-12);
        assert!((r.discharge(3.0).expect("ok") - 15.0).abs() < 1e-12);
        assert!(r.breakpoint_jumps().is_empty());
        assert!(r.discharge(f64::NAN).is_err());
    }

    #[test]
    fn power_stage_inverts_discharge() {
        let r = two_segments();
        for h in [1.01, 1.3, 1.999, 2.0, 2.5, 7.0] {
            let q = r.discharge(h).expect("ok");
            let back = r.stage(q).expect("ok");
            assert!((back - h).abs() < 1e-9, "h={h} back={back}");
        }
        assert_eq!(r.stage(0.0), Ok(1.0));
        assert!(r.stage(-1.0).is_err());
        assert!(r.stage(f64::INFINITY).is_err());
    }

    #[test]
    fn jump_at_breakpoint_is_reported_and_inverse_uses_lowest_stage() {
        // Upward jump: segment 0 gives 10 at h = 2, segment 1 gives 20.
        let r = RatingCurve::Power {
            segments: vec![seg(10.0, 1.0, 2.0, Some(2.0)), seg(10.0, 0.0, 1.0, None)],
        };
        let jumps = r.breakpoint_jumps();
        assert_eq!(jumps.len(), 1);
        assert_eq!(jumps[0].stage, 2.0);
        assert!((jumps[0].below - 10.0).abs() < 1e-12);
        assert!((jumps[0].above - 20.0).abs() < 1e-12);
        // 15 m³/s lies in the gap: the lowest stage reaching it is the breakpoint.
        assert_eq!(r.stage(15.0), Ok(2.0));
        assert!((r.stage(25.0).expect("ok") - 2.5).abs() < 1e-12);
    }

    #[test]
    fn power_validation_rules() {
        let check = |segments: Vec<PowerSegment>| RatingCurve::Power { segments }.validate();
        assert_eq!(check(vec![]), Err(RatingError::NoSegments));
        assert!(matches!(
            check(vec![seg(0.0, 0.0, 1.5, None)]),
            Err(RatingError::NotPositive { field, .. }) if field == "segments[0].c"
        ));
        assert!(matches!(
            check(vec![seg(1.0, 0.0, -1.0, None)]),
            Err(RatingError::NotPositive { field, .. }) if field == "segments[0].b"
        ));
        assert!(matches!(
            check(vec![seg(1.0, f64::NAN, 1.0, None)]),
            Err(RatingError::NonFinite { field, .. }) if field == "segments[0].e"
        ));
        assert_eq!(
            check(vec![seg(1.0, 0.0, 1.0, None), seg(1.0, 0.0, 1.0, None)]),
            Err(RatingError::MissingBreakpoint { index: 0 })
        );
        assert_eq!(
            check(vec![seg(1.0, 0.0, 1.0, Some(3.0))]),
            Err(RatingError::LastSegmentBounded { index: 0 })
        );
        assert!(matches!(
            check(vec![
                seg(1.0, 0.0, 1.0, Some(3.0)),
                seg(1.0, 0.0, 1.0, Some(2.0)),
                seg(1.0, 0.0, 1.0, None)
            ]),
            Err(RatingError::BreakpointsNotIncreasing { index: 1, .. })
        ));
        assert!(matches!(
            check(vec![
                seg(1.0, 4.0, 1.0, Some(3.0)),
                seg(1.0, 0.0, 1.0, None)
            ]),
            Err(RatingError::ZeroFlowStageTooHigh { index: 0, .. })
        ));
        assert!(matches!(
            check(vec![
                seg(1.0, 0.0, 1.0, Some(3.0)),
                seg(1.0, 3.5, 1.0, None)
            ]),
            Err(RatingError::ZeroFlowStageTooHigh { index: 1, .. })
        ));
        assert_eq!(two_segments().validate(), Ok(()));
    }

    #[test]
    fn table_interpolates_both_ways_and_rejects_out_of_range() {
        let r = RatingCurve::Table {
            points: vec![[1.0, 0.0], [2.0, 10.0], [4.0, 50.0]],
        };
        assert!((r.discharge(1.5).expect("ok") - 5.0).abs() < 1e-12);
        assert!((r.discharge(3.0).expect("ok") - 30.0).abs() < 1e-12);
        assert!((r.stage(30.0).expect("ok") - 3.0).abs() < 1e-12);
        assert_eq!(r.stage(0.0), Ok(1.0));
        assert_eq!(r.discharge(4.0), Ok(50.0));
        assert!(matches!(
            r.discharge(4.5),
            Err(RatingError::OutOfRange { field: "stage", .. })
        ));
        assert!(matches!(
            r.stage(51.0),
            Err(RatingError::OutOfRange {
                field: "discharge",
                ..
            })
        ));
        assert!(r.breakpoint_jumps().is_empty());
    }

    #[test]
    fn table_validation_rules() {
        let check = |points: Vec<[f64; 2]>| RatingCurve::Table { points }.validate();
        assert_eq!(
            check(vec![[1.0, 1.0]]),
            Err(RatingError::TooFewTablePoints { count: 1 })
        );
        assert!(matches!(
            check(vec![[1.0, 1.0], [1.0, 2.0]]),
            Err(RatingError::TableNotIncreasing {
                index: 1,
                field: "stage",
                ..
            })
        ));
        assert!(matches!(
            check(vec![[1.0, 1.0], [2.0, 2.0], [3.0, 2.0]]),
            Err(RatingError::TableNotIncreasing {
                index: 2,
                field: "discharge",
                ..
            })
        ));
        assert!(matches!(
            check(vec![[1.0, -1.0], [2.0, 2.0]]),
            Err(RatingError::NegativeDischarge { index: 0, .. })
        ));
        assert!(matches!(
            check(vec![[1.0, 1.0], [f64::INFINITY, 2.0]]),
            Err(RatingError::NonFinite { .. })
        ));
    }

    #[test]
    fn serde_tags() {
        let json = r#"{"kind":"power","segments":[{"c":12.0,"e":0.4,"b":1.6}]}"#;
        let r: RatingCurve = serde_json::from_str(json).expect("valid json in test");
        assert_eq!(
            r,
            RatingCurve::Power {
                segments: vec![seg(12.0, 0.4, 1.6, None)]
            }
        );
        let t = RatingCurve::Table {
            points: vec![[0.0, 0.0], [1.0, 2.0]],
        };
        let s = serde_json::to_string(&t).expect("serialisable");
        assert!(s.contains(r#""kind":"table""#));
        assert!(
            serde_json::from_str::<RatingCurve>(
                r#"{"kind":"power","segments":[{"c":1,"e":0,"b":1,"x":2}]}"#
            )
            .is_err()
        );
    }

    #[test]
    fn fit_rejects_bad_input() {
        assert_eq!(
            fit_power_segment(&[(1.0, 1.0), (2.0, 2.0)]),
            Err(RatingError::TooFewFitPoints { count: 2 })
        );
        assert!(matches!(
            fit_power_segment(&[(1.0, 1.0), (2.0, 0.0), (3.0, 4.0)]),
            Err(RatingError::InvalidFitPoint { index: 1, .. })
        ));
        assert!(matches!(
            fit_power_segment(&[(1.0, 1.0), (f64::NAN, 2.0), (3.0, 4.0)]),
            Err(RatingError::InvalidFitPoint { index: 1, .. })
        ));
        assert!(matches!(
            fit_power_segment(&[(1.0, 1.0), (1.0, 2.0), (1.0, 4.0)]),
            Err(RatingError::FitFailed { .. })
        ));
        assert!(matches!(
            fit_power_segment(&[(1.0, 3.0), (2.0, 3.0), (3.0, 3.0)]),
            Err(RatingError::FitFailed { .. })
        ));
        assert!(matches!(
            fit_power_segment(&[(1.0, 9.0), (2.0, 4.0), (3.0, 1.0)]),
            Err(RatingError::FitFailed { .. })
        ));
    }

    #[test]
    fn fit_recovers_exact_curve_and_reports_statistics() {
        // Q = 7 (h − 0.25)^1.8 sampled at stages 0.5..3.0.
        let pts: Vec<(f64, f64)> = (0..12)
            .map(|i| {
                let h = 0.5 + 0.25 * i as f64;
                (h, 7.0 * (h - 0.25f64).powf(1.8))
            })
            .collect();
        let fit = fit_power_segment(&pts).expect("fits");
        assert!((fit.b - 1.8).abs() < 1e-4, "{fit:?}");
        assert!((fit.e - 0.25).abs() < 1e-4, "{fit:?}");
        assert!((fit.c / 7.0 - 1.0).abs() < 1e-3, "{fit:?}");
        assert!(fit.rmse_log < 1e-6);
        assert!(fit.max_relative_error < 1e-5);
        assert!(fit.r_squared > 0.999_999);
        assert_eq!(fit.n_points, 12);
        assert!(!fit.e_at_search_limit);
        let curve = RatingCurve::Power {
            segments: vec![fit.segment()],
        };
        assert!((curve.discharge(2.0).expect("ok") / (7.0 * 1.75f64.powf(1.8)) - 1.0).abs() < 1e-4);
    }
}

//! A member's inflow: the deterministic inflow with its rise above the
//! issue-time flow scaled and shifted in time, and its rated part scaled
//! by the member's rating factor.
//!
//! Only the rise is perturbed. The flow already in the river at the issue
//! time is observed (or assembled from observations), so scaling all of
//! it would claim an error in what is known; the forecast part, the rise
//! above it, is what is uncertain (common practice for perturbing a
//! single-valued inflow forecast).

use chrono::{DateTime, Duration, Utc};

use super::design::Member;
use crate::forecast::hydrograph::{Hydrograph, seconds};

/// Over this time after the last rated observation the rating factor fades
/// to 1 when a forecaster's upload continues the series: the upload is in
/// discharge, not through the rating, and the fade keeps the join smooth.
pub const RATING_FADE: Duration = Duration::hours(6);

/// Which part of an inflow came through a rating curve (the upstream
/// gauge reports stage).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RatedInflow {
    /// None of it: discharge readings, or uploads only.
    None,
    /// The observations up to `until`; an upload follows.
    Observed { until: DateTime<Utc> },
    /// All of it: the forecast part is extrapolated from rated
    /// observations.
    Whole,
}

/// The inflow of `member`, issued at `issued`. The samples keep their times;
/// the identity member gets the inflow back unchanged, bit for bit.
pub fn member_inflow(
    inflow: &Hydrograph,
    issued: DateTime<Utc>,
    member: &Member,
    rated: RatedInflow,
) -> Hydrograph {
    if !member.changes_inflow() && (member.rating == 1.0 || rated == RatedInflow::None) {
        return inflow.clone();
    }
    let series = inflow.to_series(issued);
    let base = series.at(0.0);
    // The rise above the issue-time flow, zero before the issue time.
    let rise = |t: f64| {
        if t >= 0.0 {
            (series.at(t) - base).max(0.0)
        } else {
            0.0
        }
    };
    let tau = member.shift_s;
    let samples = inflow
        .iter()
        .map(|&(time, q)| {
            let t = seconds(time, issued);
            // An earlier rise would start with a jump at the issue time;
            // it is phased in over the shift instead.
            let phase = if tau < 0.0 {
                (t / -tau).clamp(0.0, 1.0)
            } else {
                1.0
            };
            let moved = if member.changes_inflow() {
                q - rise(t) + member.peak_scale * phase * rise(t - tau)
            } else {
                q
            };
            (
                time,
                moved.max(0.0) * rating_weight(time, member.rating, rated),
            )
        })
        .collect();
    // Times are unchanged and every value finite and non-negative, so the
    // hydrograph's invariants still hold.
    Hydrograph::parse(samples).unwrap_or_else(|_| inflow.clone())
}

/// The factor on the discharge at `time` for a member's rating factor `m`.
fn rating_weight(time: DateTime<Utc>, m: f64, rated: RatedInflow) -> f64 {
    match rated {
        RatedInflow::None => 1.0,
        RatedInflow::Whole => m,
        RatedInflow::Observed { until } => {
            let after = seconds(time, until).max(0.0);
            let fade = (1.0 - after / RATING_FADE.as_seconds_f64()).max(0.0);
            1.0 + (m - 1.0) * fade
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn at(h: f64) -> DateTime<Utc> {
        DateTime::from_timestamp_millis(1_772_323_200_000 + (h * 3.6e6) as i64).unwrap()
    }

    /// 10 m³/s until hour 2, a triangle to 30 at hour 6, back to 10 at 10.
    fn flood() -> Hydrograph {
        let q = |h: f64| 10.0 + 20.0 * (1.0 - ((h - 6.0) / 4.0).abs()).max(0.0);
        Hydrograph::parse(
            (0..=16)
                .map(|h| (at(f64::from(h)), q(f64::from(h))))
                .collect(),
        )
        .unwrap()
    }

    fn member(peak_scale: f64, shift_h: f64) -> Member {
        Member {
            peak_scale,
            shift_s: shift_h * 3600.0,
            ..Member::IDENTITY
        }
    }

    fn values(h: &Hydrograph) -> Vec<f64> {
        h.iter().map(|s| s.1).collect()
    }

    #[test]
    fn identity_member_leaves_the_inflow_bit_for_bit() {
        let h = flood();
        let out = member_inflow(&h, at(1.0), &Member::IDENTITY, RatedInflow::Whole);
        assert_eq!(out, h);
    }

    /// Scaling the rise by s multiplies the peak excess over the issue-time
    /// flow by s exactly (arithmetic of the definition).
    #[test]
    fn peak_scaling_scales_only_the_rise() {
        let out = member_inflow(&flood(), at(1.0), &member(1.5, 0.0), RatedInflow::None);
        let v = values(&out);
        assert_eq!(v[1], 10.0, "the flow at issue time is kept");
        assert_eq!(v[6], 10.0 + 1.5 * 20.0);
        assert_eq!(v[16], 10.0);
    }

    /// A later shift moves the triangle's apex by the shift, an earlier one
    /// too, while the flow at the issue time stays what it was.
    #[test]
    fn timing_shift_moves_the_rise() {
        let later = values(&member_inflow(
            &flood(),
            at(0.0),
            &member(1.0, 2.0),
            RatedInflow::None,
        ));
        assert_eq!(later[8], 30.0);
        assert_eq!(later[6], 20.0);
        let earlier = values(&member_inflow(
            &flood(),
            at(0.0),
            &member(1.0, -1.0),
            RatedInflow::None,
        ));
        assert_eq!(earlier[0], 10.0);
        assert_eq!(earlier[5], 30.0);
        assert!(earlier.iter().all(|&q| q >= 10.0));
    }

    #[test]
    fn rating_factor_fades_after_the_rated_observations() {
        let m = Member {
            rating: 1.2,
            ..Member::IDENTITY
        };
        let until = at(2.0);
        let v = values(&member_inflow(
            &flood(),
            at(2.0),
            &m,
            RatedInflow::Observed { until },
        ));
        assert!((v[0] - 12.0).abs() < 1e-12, "observed part scaled");
        // Three hours into the six-hour fade: factor 1.1.
        assert!((v[5] - 1.1 * 25.0).abs() < 1e-12);
        assert_eq!(v[8], 20.0, "upload part untouched after the fade");
        let whole = values(&member_inflow(&flood(), at(2.0), &m, RatedInflow::Whole));
        assert!((whole[8] - 24.0).abs() < 1e-12);
        let none = member_inflow(&flood(), at(2.0), &m, RatedInflow::None);
        assert_eq!(none, flood());
    }
}

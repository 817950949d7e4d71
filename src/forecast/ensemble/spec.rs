//! The `ensemble` section of a reach description: how many members, which
//! percentiles, how widely each member's inputs are perturbed, and the
//! probability from which a level reached only by some members opens a
//! CAP chain.
//!
//! The spreads below are defaults, not verified error statistics: they are
//! plausible widths for an inflow forecast a day ahead, a Manning's n taken
//! from tables and a rating curve near the top of its gaugings (common
//! practice), to be replaced by the reach's own once its forecasts have a
//! verification record. A run's provenance says which were used.

use serde::{Deserialize, Serialize};

use crate::forecast::spec::SpecError;

/// Ensemble settings of a reach.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct EnsembleSpec {
    /// Members per run; 0 turns the ensemble off. The default, 50, routes
    /// in a few seconds on two cores for the demo reach (README,
    /// "Performance").
    #[serde(deserialize_with = "crate::wire_int::whole")]
    pub members: usize,
    /// Percentiles reported, in percent, strictly increasing in (0, 100).
    pub percentiles: Vec<f64>,
    /// Range of the factor on the inflow's rise above its value at the
    /// issue time (uniform).
    pub peak_scale: [f64; 2],
    /// Largest shift of that rise in time, earlier or later (h; uniform
    /// on ±this).
    pub timing_shift_hours: f64,
    /// Range of the factor on every Manning's n of the reach (uniform).
    pub manning_factor: [f64; 2],
    /// Range of the factor on discharges that come through a rating curve:
    /// the downstream rating and a stage-reporting upstream gauge (uniform).
    pub rating_factor: [f64; 2],
    /// A level the deterministic run does not reach still opens a CAP
    /// chain once this share of members reaches it (0–1).
    pub alert_probability_floor: f64,
}

impl Default for EnsembleSpec {
    fn default() -> Self {
        Self {
            members: 50,
            percentiles: vec![10.0, 50.0, 90.0],
            peak_scale: [0.8, 1.2],
            timing_shift_hours: 2.0,
            manning_factor: [0.85, 1.15],
            rating_factor: [0.9, 1.1],
            alert_probability_floor: 0.1,
        }
    }
}

/// Members of an ensemble over `scenarios` equally likely inflows (1: the
/// main series, perturbed): the same whole number for each, so each
/// counts equally, and at least one each. `asked` 0 keeps it off.
pub fn member_count(asked: usize, scenarios: usize) -> usize {
    if asked == 0 || scenarios == 0 {
        return 0;
    }
    (asked / scenarios).max(1) * scenarios
}

/// More members than this would not finish within a forecast cycle on the
/// machines the service is meant for, and would hold every member's traces
/// in memory at once.
pub const MAX_MEMBERS: usize = 2_000;

impl EnsembleSpec {
    /// The spreads in use are the built-in defaults, not the reach's own.
    /// An inflow left unperturbed (uploaded traces in its place) has no
    /// spread to be a default.
    pub fn spreads_are_defaults(&self) -> bool {
        let d = Self::default();
        let inflow = (self.peak_scale == d.peak_scale
            && self.timing_shift_hours == d.timing_shift_hours)
            || self.inflow_unperturbed();
        inflow && self.manning_factor == d.manning_factor && self.rating_factor == d.rating_factor
    }

    /// The settings of an ensemble over uploaded inflow traces: the traces
    /// are the inflow's spread, so it is not perturbed as well.
    pub fn for_traces(&self) -> Self {
        Self {
            peak_scale: [1.0, 1.0],
            timing_shift_hours: 0.0,
            ..self.clone()
        }
    }

    fn inflow_unperturbed(&self) -> bool {
        self.peak_scale == [1.0, 1.0] && self.timing_shift_hours == 0.0
    }

    /// Every field in range; errors name the field as `ensemble.<name>`.
    pub fn validate(&self) -> Result<(), SpecError> {
        if self.members > MAX_MEMBERS {
            return Err(SpecError::new(
                "ensemble.members",
                format!("at most {MAX_MEMBERS}, got {}", self.members),
            ));
        }
        check_percentiles(&self.percentiles)?;
        factor_range("ensemble.peak_scale", self.peak_scale, 0.0)?;
        factor_range("ensemble.manning_factor", self.manning_factor, 0.0)?;
        factor_range("ensemble.rating_factor", self.rating_factor, 0.0)?;
        let h = self.timing_shift_hours;
        if !(h.is_finite() && (0.0..=48.0).contains(&h)) {
            return Err(SpecError::new(
                "ensemble.timing_shift_hours",
                format!("must be between 0 and 48 h, got {h}"),
            ));
        }
        let f = self.alert_probability_floor;
        if !(f.is_finite() && f > 0.0 && f <= 1.0) {
            return Err(SpecError::new(
                "ensemble.alert_probability_floor",
                format!("must be in (0, 1], got {f}"),
            ));
        }
        Ok(())
    }
}

fn check_percentiles(p: &[f64]) -> Result<(), SpecError> {
    if p.is_empty() || p.len() > 19 {
        return Err(SpecError::new(
            "ensemble.percentiles",
            format!("between 1 and 19 percentiles, got {}", p.len()),
        ));
    }
    for (i, &v) in p.iter().enumerate() {
        let field = format!("ensemble.percentiles[{i}]");
        if !(v.is_finite() && v > 0.0 && v < 100.0) {
            return Err(SpecError::new(
                field,
                format!("must be in (0, 100), got {v}"),
            ));
        }
        if i > 0 && v <= p[i - 1] {
            return Err(SpecError::new(field, "percentiles must increase strictly"));
        }
    }
    Ok(())
}

/// `[low, high]` with `lowest < low ≤ high`, both finite and at most 10.
fn factor_range(field: &str, [lo, hi]: [f64; 2], lowest: f64) -> Result<(), SpecError> {
    if !(lo.is_finite() && hi.is_finite() && lo > lowest && hi <= 10.0) {
        return Err(SpecError::new(
            field,
            format!("factors must be finite, above {lowest} and at most 10, got [{lo}, {hi}]"),
        ));
    }
    if lo > hi {
        return Err(SpecError::new(
            field,
            format!("low must not exceed high, got [{lo}, {hi}]"),
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_are_valid_and_marked_as_defaults() {
        let d = EnsembleSpec::default();
        assert_eq!(d.validate(), Ok(()));
        assert!(d.spreads_are_defaults());
        let own = EnsembleSpec {
            peak_scale: [0.7, 1.4],
            ..d
        };
        assert!(!own.spreads_are_defaults());
    }

    #[test]
    fn each_scenario_gets_as_many_members() {
        assert_eq!(member_count(50, 1), 50);
        assert_eq!(member_count(50, 3), 48);
        assert_eq!(member_count(4, 6), 6);
        assert_eq!(member_count(0, 3), 0);
        let traces = EnsembleSpec::default().for_traces();
        assert!(traces.spreads_are_defaults(), "n and rating still default");
        let own = EnsembleSpec {
            manning_factor: [0.9, 1.1],
            ..traces
        };
        assert!(!own.spreads_are_defaults());
    }

    #[test]
    fn errors_name_the_field() {
        let bad = |f: fn(&mut EnsembleSpec)| {
            let mut s = EnsembleSpec::default();
            f(&mut s);
            s.validate().expect_err("invalid").field
        };
        assert_eq!(bad(|s| s.members = 5_000), "ensemble.members");
        assert_eq!(bad(|s| s.percentiles = vec![]), "ensemble.percentiles");
        assert_eq!(
            bad(|s| s.percentiles = vec![50.0, 10.0]),
            "ensemble.percentiles[1]"
        );
        assert_eq!(
            bad(|s| s.percentiles = vec![100.0]),
            "ensemble.percentiles[0]"
        );
        assert_eq!(bad(|s| s.peak_scale = [1.2, 0.8]), "ensemble.peak_scale");
        assert_eq!(
            bad(|s| s.manning_factor = [0.0, 1.0]),
            "ensemble.manning_factor"
        );
        assert_eq!(
            bad(|s| s.rating_factor = [f64::NAN, 1.0]),
            "ensemble.rating_factor"
        );
        assert_eq!(
            bad(|s| s.timing_shift_hours = -1.0),
            "ensemble.timing_shift_hours"
        );
        assert_eq!(
            bad(|s| s.alert_probability_floor = 0.0),
            "ensemble.alert_probability_floor"
        );
    }
}

//! Calibrated Manning's n multipliers of a reach: one factor on the main
//! channel's n and one on the overbanks' (floodplain) n of every section.
//! They live in the reach description so that a calibration, once a
//! forecaster applies it, is a new reach version like any other edit, and
//! every run made on that version used exactly these factors.

use std::borrow::Cow;

use serde::{Deserialize, Serialize};

use crate::engine::section::{CrossSection, SectionGeometry};

use super::spec::SpecError;

/// Smallest and largest multiplier a reach may carry: outside a factor of
/// five either way a "calibrated" n is no longer a plausible Manning's n
/// for the same surface (common practice: tabulated n for one channel
/// type span well under that ratio).
pub const LIMITS: (f64, f64) = (0.2, 5.0);

/// Factors on Manning's n; 1 leaves the surveyed n as it is.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct RoughnessMultipliers {
    /// Factor on the main channel's n (and on a trapezoid's single n,
    /// which is all channel).
    pub channel: f64,
    /// Factor on the left and right overbanks' n.
    pub floodplain: f64,
}

impl Default for RoughnessMultipliers {
    fn default() -> Self {
        Self::IDENTITY
    }
}

impl RoughnessMultipliers {
    /// Changes nothing.
    pub const IDENTITY: Self = Self {
        channel: 1.0,
        floodplain: 1.0,
    };

    /// Both factors are exactly 1 (the description then omits them).
    pub fn is_identity(&self) -> bool {
        *self == Self::IDENTITY
    }

    /// Each factor is finite and inside [`LIMITS`].
    pub fn validate(&self, field: &str) -> Result<(), SpecError> {
        let (lo, hi) = LIMITS;
        for (name, v) in [("channel", self.channel), ("floodplain", self.floodplain)] {
            if !(v.is_finite() && (lo..=hi).contains(&v)) {
                return Err(SpecError::new(
                    format!("{field}.{name}"),
                    format!("must be a number from {lo} to {hi}, got {v}"),
                ));
            }
        }
        Ok(())
    }

    /// `sections` with their n multiplied; borrowed unchanged when both
    /// factors are 1, so an uncalibrated reach routes bit for bit as before.
    pub fn apply<'a>(&self, sections: &'a [CrossSection]) -> Cow<'a, [CrossSection]> {
        if self.is_identity() {
            return Cow::Borrowed(sections);
        }
        Cow::Owned(sections.iter().map(|s| self.apply_one(s)).collect())
    }

    fn apply_one(&self, section: &CrossSection) -> CrossSection {
        let mut s = section.clone();
        match &mut s.geometry {
            SectionGeometry::StationElevation {
                n_left,
                n_channel,
                n_right,
                ..
            } => {
                *n_left *= self.floodplain;
                *n_channel *= self.channel;
                *n_right *= self.floodplain;
            }
            SectionGeometry::Trapezoid { n, .. } => *n *= self.channel,
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn surveyed() -> CrossSection {
        CrossSection {
            name: "S".into(),
            chainage: 0.0,
            geometry: SectionGeometry::StationElevation {
                points: vec![
                    [0.0, 3.0],
                    [10.0, 1.0],
                    [12.0, 0.0],
                    [18.0, 0.0],
                    [20.0, 1.0],
                    [30.0, 3.0],
                ],
                left_bank: 10.0,
                right_bank: 20.0,
                n_left: 0.06,
                n_channel: 0.03,
                n_right: 0.08,
                storage: vec![],
            },
        }
    }

    #[test]
    fn channel_and_floodplain_scale_their_own_n() {
        let m = RoughnessMultipliers {
            channel: 1.2,
            floodplain: 0.5,
        };
        let sections = [surveyed()];
        let out = m.apply(&sections);
        let SectionGeometry::StationElevation {
            n_left,
            n_channel,
            n_right,
            ..
        } = &out[0].geometry
        else {
            panic!("shape kept");
        };
        assert!((n_channel - 0.036).abs() < 1e-12);
        assert!((n_left - 0.03).abs() < 1e-12);
        assert!((n_right - 0.04).abs() < 1e-12);
    }

    #[test]
    fn identity_borrows_and_limits_are_enforced() {
        let s = [surveyed()];
        assert!(matches!(
            RoughnessMultipliers::IDENTITY.apply(&s),
            Cow::Borrowed(_)
        ));
        let bad = RoughnessMultipliers {
            channel: 1.0,
            floodplain: 6.0,
        };
        let e = bad.validate("roughness").expect_err("6 is above the limit");
        assert_eq!(e.field, "roughness.floodplain");
        assert!(
            RoughnessMultipliers {
                channel: f64::NAN,
                floodplain: 1.0
            }
            .validate("r")
            .is_err()
        );
    }
}

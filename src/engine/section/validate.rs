//! The checks a section and a reach of sections must pass before a table
//! is built: every error names the section and the field.

use super::types::{CrossSection, GeometryError, Shape, Survey, Trapezoid};

impl CrossSection {
    /// Checks the section for everything a table build relies on. Returns the
    /// first problem found, naming the section and the field.
    pub fn validate(&self) -> Result<(), GeometryError> {
        let name = &self.name;
        finite(name, "chainage", self.chainage)?;
        match self.geometry.shape() {
            Shape::Surveyed(survey) => validate_profile(name, &survey),
            Shape::Trapezoid(trapezoid) => validate_trapezoid(name, &trapezoid),
        }
    }
}

fn validate_trapezoid(name: &str, t: &Trapezoid) -> Result<(), GeometryError> {
    finite(name, "bed_elevation", t.bed)?;
    non_negative(name, "bottom_width", t.width)?;
    non_negative(name, "side_slope", t.side_slope)?;
    if t.width == 0.0 && t.side_slope == 0.0 {
        return Err(GeometryError::DegenerateTrapezoid {
            section: name.to_owned(),
        });
    }
    roughness(name, "n", t.n)?;
    if let Some(h) = t.height {
        finite(name, "height", h)?;
        if h <= 0.0 {
            return Err(GeometryError::NonPositiveHeight {
                section: name.to_owned(),
                value: h,
            });
        }
    }
    Ok(())
}

fn finite(section: &str, field: &str, value: f64) -> Result<(), GeometryError> {
    if value.is_finite() {
        Ok(())
    } else {
        Err(GeometryError::NonFinite {
            section: section.to_owned(),
            field: field.to_owned(),
            value,
        })
    }
}

fn non_negative(section: &str, field: &'static str, value: f64) -> Result<(), GeometryError> {
    finite(section, field, value)?;
    if value < 0.0 {
        return Err(GeometryError::Negative {
            section: section.to_owned(),
            field,
            value,
        });
    }
    Ok(())
}

fn roughness(section: &str, field: &'static str, value: f64) -> Result<(), GeometryError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(GeometryError::InvalidRoughness {
            section: section.to_owned(),
            field,
            value,
        })
    }
}

fn validate_profile(name: &str, survey: &Survey<'_>) -> Result<(), GeometryError> {
    let Survey {
        points,
        left_bank,
        right_bank,
        n,
        storage,
    } = *survey;
    if points.len() < 3 {
        return Err(GeometryError::TooFewPoints {
            section: name.to_owned(),
            count: points.len(),
        });
    }
    for (i, p) in points.iter().enumerate() {
        finite(name, &format!("points[{i}].station"), p[0])?;
        finite(name, &format!("points[{i}].elevation"), p[1])?;
    }
    for (i, pair) in points.windows(2).enumerate() {
        if pair[1][0] <= pair[0][0] {
            return Err(GeometryError::StationsNotIncreasing {
                section: name.to_owned(),
                index: i + 1,
                station: pair[1][0],
                previous: pair[0][0],
            });
        }
    }
    for (field, value) in [("n_left", n[0]), ("n_channel", n[1]), ("n_right", n[2])] {
        roughness(name, field, value)?;
    }
    let (min, max) = (points[0][0], points[points.len() - 1][0]);
    for (field, value) in [("left_bank", left_bank), ("right_bank", right_bank)] {
        finite(name, field, value)?;
        if value < min || value > max {
            return Err(GeometryError::BankOutsideProfile {
                section: name.to_owned(),
                field,
                value,
                min,
                max,
            });
        }
    }
    if left_bank >= right_bank {
        return Err(GeometryError::BanksOutOfOrder {
            section: name.to_owned(),
            left: left_bank,
            right: right_bank,
        });
    }
    for (index, zone) in storage.iter().enumerate() {
        finite(name, &format!("storage[{index}].from"), zone.from)?;
        finite(name, &format!("storage[{index}].to"), zone.to)?;
        if zone.from < min || zone.to > max || zone.from >= zone.to {
            return Err(GeometryError::StorageOutsideProfile {
                section: name.to_owned(),
                index,
                from: zone.from,
                to: zone.to,
                min,
                max,
            });
        }
        if zone.from < right_bank && zone.to > left_bank {
            return Err(GeometryError::StorageInChannel {
                section: name.to_owned(),
                index,
                from: zone.from,
                to: zone.to,
            });
        }
    }
    Ok(())
}

/// Checks every section and that chainages strictly increase downstream.
pub fn validate_reach(sections: &[CrossSection]) -> Result<(), GeometryError> {
    if sections.is_empty() {
        return Err(GeometryError::EmptyReach);
    }
    for s in sections {
        s.validate()?;
    }
    for pair in sections.windows(2) {
        let (a, b) = (&pair[0], &pair[1]);
        if b.chainage == a.chainage {
            return Err(GeometryError::DuplicateChainage {
                section: b.name.clone(),
                chainage: b.chainage,
                other: a.name.clone(),
            });
        }
        if b.chainage < a.chainage {
            return Err(GeometryError::ChainageOrder {
                section: b.name.clone(),
                chainage: b.chainage,
                previous_section: a.name.clone(),
                previous: a.chainage,
            });
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::section::fixtures::{err, profile, rect, v_profile, xs};
    use crate::engine::section::{SectionGeometry, StorageZone};

    #[test]
    fn valid_sections_pass() {
        assert_eq!(xs("a", 0.0, v_profile()).validate(), Ok(()));
        assert_eq!(xs("a", 0.0, rect(5.0, 1.0, 0.03)).validate(), Ok(()));
    }

    #[test]
    fn rejects_too_few_points() {
        let e = err(profile(vec![[0.0, 1.0], [1.0, 0.0]], 0.0, 1.0));
        assert!(matches!(e, GeometryError::TooFewPoints { count: 2, .. }));
        assert!(e.to_string().contains("xs-test"));
    }

    #[test]
    fn rejects_non_increasing_station_and_names_index() {
        let e = err(profile(
            vec![[0.0, 2.0], [1.0, 0.0], [1.0, 0.5], [3.0, 2.0]],
            0.0,
            3.0,
        ));
        assert!(matches!(
            e,
            GeometryError::StationsNotIncreasing { index: 2, .. }
        ));
        assert!(e.to_string().contains("points[2]"));
        assert!(e.to_string().contains("points[1]"));
    }

    #[test]
    fn rejects_non_finite_point() {
        let e = err(profile(
            vec![[0.0, 2.0], [1.0, f64::NAN], [3.0, 2.0]],
            0.0,
            3.0,
        ));
        match e {
            GeometryError::NonFinite { field, .. } => assert_eq!(field, "points[1].elevation"),
            other => panic!("unexpected {other:?}"),
        }
    }

    #[test]
    fn rejects_bad_roughness() {
        for bad in [0.0, -0.01, f64::INFINITY, f64::NAN] {
            let mut g = v_profile();
            if let SectionGeometry::StationElevation { n_right, .. } = &mut g {
                *n_right = bad;
            }
            let e = err(g);
            assert!(
                matches!(
                    e,
                    GeometryError::InvalidRoughness {
                        field: "n_right",
                        ..
                    }
                ),
                "{e:?}"
            );
        }
        let e = err(SectionGeometry::Trapezoid {
            bed_elevation: 0.0,
            bottom_width: 1.0,
            side_slope: 1.0,
            n: 0.0,
            height: None,
        });
        assert!(matches!(
            e,
            GeometryError::InvalidRoughness { field: "n", .. }
        ));
    }

    #[test]
    fn rejects_bank_outside_profile_and_reversed_banks() {
        let e = err(profile(
            vec![[0.0, 12.0], [10.0, 10.0], [20.0, 12.0]],
            -1.0,
            15.0,
        ));
        assert!(matches!(
            e,
            GeometryError::BankOutsideProfile {
                field: "left_bank",
                ..
            }
        ));
        let e = err(profile(
            vec![[0.0, 12.0], [10.0, 10.0], [20.0, 12.0]],
            5.0,
            20.5,
        ));
        assert!(matches!(
            e,
            GeometryError::BankOutsideProfile {
                field: "right_bank",
                ..
            }
        ));
        let e = err(profile(
            vec![[0.0, 12.0], [10.0, 10.0], [20.0, 12.0]],
            15.0,
            15.0,
        ));
        assert!(matches!(e, GeometryError::BanksOutOfOrder { .. }));
        let e = err(profile(
            vec![[0.0, 12.0], [10.0, 10.0], [20.0, 12.0]],
            f64::NAN,
            15.0,
        ));
        assert!(matches!(e, GeometryError::NonFinite { field, .. } if field == "left_bank"));
    }

    #[test]
    fn rejects_bad_storage_zones() {
        let with_zone = |from: f64, to: f64| {
            let mut g = profile(
                vec![
                    [0.0, 12.0],
                    [4.0, 11.0],
                    [10.0, 10.0],
                    [16.0, 11.0],
                    [20.0, 12.0],
                ],
                5.0,
                15.0,
            );
            if let SectionGeometry::StationElevation { storage, .. } = &mut g {
                storage.push(StorageZone { from, to });
            }
            g
        };
        assert!(matches!(
            err(with_zone(-1.0, 2.0)),
            GeometryError::StorageOutsideProfile { index: 0, .. }
        ));
        assert!(matches!(
            err(with_zone(3.0, 2.0)),
            GeometryError::StorageOutsideProfile { .. }
        ));
        assert!(matches!(
            err(with_zone(18.0, 21.0)),
            GeometryError::StorageOutsideProfile { .. }
        ));
        assert!(matches!(
            err(with_zone(f64::NAN, 2.0)),
            GeometryError::NonFinite { field, .. } if field == "storage[0].from"
        ));
        assert!(matches!(
            err(with_zone(3.0, 6.0)),
            GeometryError::StorageInChannel { .. }
        ));
        assert_eq!(xs("ok", 0.0, with_zone(0.0, 5.0)).validate(), Ok(()));
    }

    #[test]
    fn rejects_bad_trapezoids() {
        let trap = |w: f64, m: f64, h: Option<f64>| SectionGeometry::Trapezoid {
            bed_elevation: 0.0,
            bottom_width: w,
            side_slope: m,
            n: 0.03,
            height: h,
        };
        assert!(matches!(
            err(trap(-1.0, 1.0, None)),
            GeometryError::Negative {
                field: "bottom_width",
                ..
            }
        ));
        assert!(matches!(
            err(trap(1.0, -1.0, None)),
            GeometryError::Negative {
                field: "side_slope",
                ..
            }
        ));
        assert!(matches!(
            err(trap(0.0, 0.0, None)),
            GeometryError::DegenerateTrapezoid { .. }
        ));
        assert!(matches!(
            err(trap(1.0, 1.0, Some(0.0))),
            GeometryError::NonPositiveHeight { .. }
        ));
        assert!(matches!(
            err(trap(f64::NAN, 1.0, None)),
            GeometryError::NonFinite { .. }
        ));
    }

    #[test]
    fn reach_order_and_duplicates() {
        let a = xs("up", 0.0, v_profile());
        let b = xs("down", 100.0, v_profile());
        assert_eq!(validate_reach(&[a.clone(), b.clone()]), Ok(()));
        let e = validate_reach(&[b.clone(), a.clone()]);
        assert!(matches!(e, Err(GeometryError::ChainageOrder { .. })));
        let c = xs("twin", 100.0, v_profile());
        let e = validate_reach(&[a.clone(), b, c]);
        match e {
            Err(GeometryError::DuplicateChainage { section, other, .. }) => {
                assert_eq!(section, "twin");
                assert_eq!(other, "down");
            }
            other => panic!("unexpected {other:?}"),
        }
        assert_eq!(validate_reach(&[]), Err(GeometryError::EmptyReach));
        let mut bad = a;
        bad.chainage = f64::NAN;
        assert!(matches!(
            validate_reach(&[bad]),
            Err(GeometryError::NonFinite { .. })
        ));
    }
}

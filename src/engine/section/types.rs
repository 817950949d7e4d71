//! What a cross-section is: its survey or trapezoid shorthand, where it
//! lies along the reach, and every way the input can be wrong
//! ([`GeometryError`]).

use serde::{Deserialize, Serialize};

/// A station range whose width stores water but conveys none (for example a
/// backwater pond or a building footprint on the floodplain).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StorageZone {
    /// Start station (m).
    pub from: f64,
    /// End station (m); must be greater than `from`.
    pub to: f64,
}

/// Shape of one cross-section.
///
/// Surveyed sections are station–elevation profiles; the trapezoid shorthand
/// exists for design channels and for tests with closed-form answers.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "shape", rename_all = "snake_case", deny_unknown_fields)]
pub enum SectionGeometry {
    /// A surveyed profile of (station m, elevation m) points.
    StationElevation {
        /// Survey points as `[station, elevation]`, stations strictly increasing.
        points: Vec<[f64; 2]>,
        /// Station of the left bank: division between left overbank and channel.
        left_bank: f64,
        /// Station of the right bank: division between channel and right overbank.
        right_bank: f64,
        /// Manning's n of the left overbank.
        n_left: f64,
        /// Manning's n of the main channel.
        n_channel: f64,
        /// Manning's n of the right overbank.
        n_right: f64,
        /// Storage-only zones (may be empty). They must lie outside the main
        /// channel, which always conveys.
        #[serde(default)]
        storage: Vec<StorageZone>,
    },
    /// A symmetric trapezoid, all of it main channel.
    Trapezoid {
        /// Bed elevation (m).
        bed_elevation: f64,
        /// Bottom width (m); zero gives a triangle.
        bottom_width: f64,
        /// Side slope, horizontal per vertical, both sides; zero gives a rectangle.
        side_slope: f64,
        /// Manning's n.
        n: f64,
        /// Height of the banks above the bed (m). Above it the section is
        /// continued with vertical walls and flagged as extrapolated. Without a
        /// height the side slopes continue indefinitely.
        #[serde(default)]
        height: Option<f64>,
    },
}

impl SectionGeometry {
    /// The shape with its fields gathered, so the checks and the geometry
    /// read a section's fields in one place.
    pub(super) fn shape(&self) -> Shape<'_> {
        match self {
            SectionGeometry::StationElevation {
                points,
                left_bank,
                right_bank,
                n_left,
                n_channel,
                n_right,
                storage,
            } => Shape::Surveyed(Survey {
                points,
                left_bank: *left_bank,
                right_bank: *right_bank,
                n: [*n_left, *n_channel, *n_right],
                storage,
            }),
            SectionGeometry::Trapezoid {
                bed_elevation,
                bottom_width,
                side_slope,
                n,
                height,
            } => Shape::Trapezoid(Trapezoid {
                bed: *bed_elevation,
                width: *bottom_width,
                side_slope: *side_slope,
                n: *n,
                height: *height,
            }),
        }
    }
}

impl SectionGeometry {
    /// Elevations of the left and right bank tops (m): the survey at the
    /// bank stations (linear between survey points), or a trapezoid's bed
    /// plus its height; `None` for a trapezoid without a height.
    pub fn bank_tops(&self) -> [Option<f64>; 2] {
        match self.shape() {
            Shape::Surveyed(s) => [
                survey_elevation(s.points, s.left_bank),
                survey_elevation(s.points, s.right_bank),
            ],
            Shape::Trapezoid(t) => {
                let top = t.height.map(|h| t.bed + h);
                [top, top]
            }
        }
    }
}

/// The surveyed elevation at `station`, linear between points; `None`
/// outside the survey.
fn survey_elevation(points: &[[f64; 2]], station: f64) -> Option<f64> {
    let k = points.partition_point(|p| p[0] < station);
    if k < points.len() && points[k][0] == station {
        return Some(points[k][1]);
    }
    if k == 0 || k == points.len() {
        return None;
    }
    let ([x0, z0], [x1, z1]) = (points[k - 1], points[k]);
    Some(z0 + (z1 - z0) * (station - x0) / (x1 - x0))
}

/// A [`SectionGeometry`] seen through its fields.
pub(super) enum Shape<'a> {
    Surveyed(Survey<'a>),
    Trapezoid(Trapezoid),
}

/// The fields of [`SectionGeometry::StationElevation`], Manning's n
/// ordered left overbank, channel, right overbank.
#[derive(Debug, Clone, Copy)]
pub(super) struct Survey<'a> {
    pub(super) points: &'a [[f64; 2]],
    pub(super) left_bank: f64,
    pub(super) right_bank: f64,
    pub(super) n: [f64; 3],
    pub(super) storage: &'a [StorageZone],
}

/// The fields of [`SectionGeometry::Trapezoid`].
#[derive(Debug, Clone, Copy)]
pub(super) struct Trapezoid {
    pub(super) bed: f64,
    pub(super) width: f64,
    pub(super) side_slope: f64,
    pub(super) n: f64,
    pub(super) height: Option<f64>,
}

/// One surveyed cross-section located along the reach.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CrossSection {
    /// Name used in error messages and reports.
    pub name: String,
    /// Distance along the reach (m), increasing downstream.
    pub chainage: f64,
    /// The section shape.
    pub geometry: SectionGeometry,
}

/// Why a cross-section, a reach or a table request was rejected. Every variant
/// names the section (where there is one) and the offending field so a user
/// can fix the input without reading code.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum GeometryError {
    /// A number that must be finite is NaN or infinite.
    #[error("section `{section}`: `{field}` must be finite, got {value}")]
    NonFinite {
        /// Section name.
        section: String,
        /// Field path, e.g. `points[3].elevation`.
        field: String,
        /// Offending value.
        value: f64,
    },
    /// Fewer than three survey points.
    #[error("section `{section}`: `points` has {count} points, at least 3 are needed")]
    TooFewPoints {
        /// Section name.
        section: String,
        /// Number of points given.
        count: usize,
    },
    /// Stations must strictly increase.
    #[error(
        "section `{section}`: station of points[{index}] ({station}) must be greater than that of points[{}] ({previous})",
        .index - 1
    )]
    StationsNotIncreasing {
        /// Section name.
        section: String,
        /// Index of the first point whose station does not increase.
        index: usize,
        /// Its station.
        station: f64,
        /// Station of the point before it.
        previous: f64,
    },
    /// Manning's n must be positive and finite.
    #[error("section `{section}`: `{field}` must be a positive finite Manning's n, got {value}")]
    InvalidRoughness {
        /// Section name.
        section: String,
        /// Field name.
        field: &'static str,
        /// Offending value.
        value: f64,
    },
    /// A bank station lies outside the surveyed stations.
    #[error(
        "section `{section}`: `{field}` = {value} lies outside the surveyed stations [{min}, {max}]"
    )]
    BankOutsideProfile {
        /// Section name.
        section: String,
        /// `left_bank` or `right_bank`.
        field: &'static str,
        /// Offending value.
        value: f64,
        /// First surveyed station.
        min: f64,
        /// Last surveyed station.
        max: f64,
    },
    /// The left bank must lie left of the right bank.
    #[error("section `{section}`: `left_bank` ({left}) must be less than `right_bank` ({right})")]
    BanksOutOfOrder {
        /// Section name.
        section: String,
        /// Left bank station.
        left: f64,
        /// Right bank station.
        right: f64,
    },
    /// A storage zone is empty, reversed or reaches outside the survey.
    #[error(
        "section `{section}`: `storage[{index}]` ({from}..{to}) must satisfy {min} <= from < to <= {max}"
    )]
    StorageOutsideProfile {
        /// Section name.
        section: String,
        /// Index of the zone.
        index: usize,
        /// Zone start.
        from: f64,
        /// Zone end.
        to: f64,
        /// First surveyed station.
        min: f64,
        /// Last surveyed station.
        max: f64,
    },
    /// A storage zone overlaps the main channel, which must always convey.
    #[error(
        "section `{section}`: `storage[{index}]` ({from}..{to}) overlaps the main channel between the banks"
    )]
    StorageInChannel {
        /// Section name.
        section: String,
        /// Index of the zone.
        index: usize,
        /// Zone start.
        from: f64,
        /// Zone end.
        to: f64,
    },
    /// A dimension that cannot be negative is negative.
    #[error("section `{section}`: `{field}` must not be negative, got {value}")]
    Negative {
        /// Section name.
        section: String,
        /// Field name.
        field: &'static str,
        /// Offending value.
        value: f64,
    },
    /// A trapezoid height must be positive when given.
    #[error("section `{section}`: `height` must be positive, got {value}")]
    NonPositiveHeight {
        /// Section name.
        section: String,
        /// Offending value.
        value: f64,
    },
    /// Zero bottom width together with zero side slope encloses no area.
    #[error(
        "section `{section}`: a trapezoid with zero `bottom_width` and zero `side_slope` has no area"
    )]
    DegenerateTrapezoid {
        /// Section name.
        section: String,
    },
    /// Sections must be listed in increasing chainage.
    #[error(
        "section `{section}`: `chainage` {chainage} is less than {previous} of the preceding section `{previous_section}`; list sections in downstream order"
    )]
    ChainageOrder {
        /// Section name.
        section: String,
        /// Its chainage.
        chainage: f64,
        /// Name of the preceding section.
        previous_section: String,
        /// Chainage of the preceding section.
        previous: f64,
    },
    /// Two sections at the same chainage.
    #[error("section `{section}`: `chainage` {chainage} duplicates that of section `{other}`")]
    DuplicateChainage {
        /// Section name.
        section: String,
        /// The duplicated chainage.
        chainage: f64,
        /// The other section at that chainage.
        other: String,
    },
    /// A reach needs at least one section.
    #[error("a reach needs at least one cross-section")]
    EmptyReach,
    /// A table or node-building option is out of range.
    #[error("`{field}` must be {requirement}, got {value}")]
    InvalidOption {
        /// Option name.
        field: &'static str,
        /// What the option must satisfy.
        requirement: &'static str,
        /// Offending value.
        value: f64,
    },
    /// The table would be unreasonably large.
    #[error(
        "section `{section}`: the property table would need {rows} rows (limit {limit}); use a coarser `spacing`"
    )]
    TableTooLarge {
        /// Section name.
        section: String,
        /// Rows needed.
        rows: usize,
        /// The limit, [`MAX_TABLE_ROWS`](super::MAX_TABLE_ROWS).
        limit: usize,
    },
    /// Node building would create unreasonably many nodes.
    #[error("`max_spacing` {max_spacing} m would create {count} nodes (limit {limit})")]
    TooManyNodes {
        /// Requested spacing.
        max_spacing: f64,
        /// Nodes needed.
        count: usize,
        /// The limit, [`MAX_NODES`](super::MAX_NODES).
        limit: usize,
    },
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::section::fixtures::{v_profile, xs};

    /// Bank tops read off the survey by hand: the left bank at station
    /// 15 lies half-way between (10, 10.0) and (20, 6.0), so 8.0 m; the
    /// right bank is on the survey point (30, 6.5). A trapezoid's banks are
    /// its bed plus its height, unknown without one.
    #[test]
    fn bank_tops_interpolate_the_survey() {
        let g = SectionGeometry::StationElevation {
            points: vec![
                [0.0, 12.0],
                [10.0, 10.0],
                [20.0, 6.0],
                [30.0, 6.5],
                [40.0, 11.0],
            ],
            left_bank: 15.0,
            right_bank: 30.0,
            n_left: 0.06,
            n_channel: 0.035,
            n_right: 0.06,
            storage: vec![],
        };
        assert_eq!(g.bank_tops(), [Some(8.0), Some(6.5)]);
        let trapezoid = |height| SectionGeometry::Trapezoid {
            bed_elevation: 3.0,
            bottom_width: 4.0,
            side_slope: 1.5,
            n: 0.03,
            height,
        };
        assert_eq!(trapezoid(Some(2.5)).bank_tops(), [Some(5.5), Some(5.5)]);
        assert_eq!(trapezoid(None).bank_tops(), [None, None]);
    }

    #[test]
    fn serde_round_trip_and_tags() {
        let json = r#"{"name":"xs-7","chainage":250.0,"geometry":{"shape":"trapezoid",
            "bed_elevation":3.0,"bottom_width":4.0,"side_slope":1.5,"n":0.03}}"#;
        let s: CrossSection = serde_json::from_str(json).expect("valid json in test");
        assert_eq!(
            s.geometry,
            SectionGeometry::Trapezoid {
                bed_elevation: 3.0,
                bottom_width: 4.0,
                side_slope: 1.5,
                n: 0.03,
                height: None
            }
        );
        let back = serde_json::to_string(&xs("p", 1.0, v_profile())).expect("serialisable");
        assert!(back.contains(r#""shape":"station_elevation""#));
        let again: CrossSection = serde_json::from_str(&back).expect("round trip");
        assert_eq!(again, xs("p", 1.0, v_profile()));
        let with_zone = r#"{"name":"xs-8","chainage":0,"geometry":{"shape":"station_elevation",
            "points":[[0,5],[4,2],[8,5]],"left_bank":2,"right_bank":6,
            "n_left":0.05,"n_channel":0.03,"n_right":0.05,"storage":[{"from":0,"to":1.5}]}}"#;
        let s: CrossSection = serde_json::from_str(with_zone).expect("valid json in test");
        assert_eq!(s.validate(), Ok(()));
        let typo = json.replace("\"n\"", "\"manning\"");
        assert!(serde_json::from_str::<CrossSection>(&typo).is_err());
    }
}

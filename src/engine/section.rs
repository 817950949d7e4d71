//! Cross-sections: survey geometry, validation, and precomputed property tables.
//!
//! A routing solver evaluates section properties millions of times per run, so
//! the survey is turned once into a [`PropertyTable`]: a uniform grid in
//! water-surface elevation holding exact areas, wetted perimeter and composite
//! conveyance at every row. A lookup is then index arithmetic plus a short
//! polynomial evaluation and never allocates.
//!
//! Conventions (common practice unless stated otherwise):
//!
//! * Stations increase from the left bank to the right bank looking downstream;
//!   chainage increases downstream.
//! * Conveyance is subdivided at the bank stations into left overbank, main
//!   channel and right overbank, each with its own Manning's n. The vertical
//!   division lines carry no shear and are not part of the wetted perimeter.
//! * Storage-only zones hold water (they count in storage area and top width,
//!   which continuity uses) but convey nothing.
//! * Every part of the profile whose ground lies below the water surface is
//!   treated as wet, even a pocket cut off from the channel by higher ground.
//!   This is a common simplification; it overstates storage at low stages in
//!   sections with disconnected low areas.
//! * Where the water rises above an end point of the survey, the section is
//!   closed by a vertical frictional wall at that end. Properties that depend
//!   on such a wall are flagged [`Props::extrapolated`].

use serde::{Deserialize, Serialize};

use crate::engine::props::{Hydraulics, Props};

/// Default grid spacing of a [`PropertyTable`] in elevation (m).
pub const DEFAULT_SPACING: f64 = 0.01;
/// Default minimum number of grid intervals; shallow sections get a finer grid.
pub const DEFAULT_MIN_ROWS: usize = 200;
/// Default height (m) the table extends above the highest surveyed point.
pub const DEFAULT_HEADROOM: f64 = 2.0;
/// Largest table a single section may produce. Guards memory against an
/// accidental tiny spacing or an absurd survey relief.
pub const MAX_TABLE_ROWS: usize = 200_000;
/// Largest number of computational nodes [`build_nodes`] will create.
pub const MAX_NODES: usize = 20_000;
/// Depth (m) to which a trapezoid without a `height` is tabulated; above the
/// table its properties continue exactly along the side slopes.
pub const UNBOUNDED_TRAPEZOID_DEPTH: f64 = 10.0;

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
        /// The limit, [`MAX_TABLE_ROWS`].
        limit: usize,
    },
    /// Node building would create unreasonably many nodes.
    #[error("`max_spacing` {max_spacing} m would create {count} nodes (limit {limit})")]
    TooManyNodes {
        /// Requested spacing.
        max_spacing: f64,
        /// Nodes needed.
        count: usize,
        /// The limit, [`MAX_NODES`].
        limit: usize,
    },
}

impl CrossSection {
    /// Checks the section for everything a table build relies on. Returns the
    /// first problem found, naming the section and the field.
    pub fn validate(&self) -> Result<(), GeometryError> {
        let name = &self.name;
        finite(name, "chainage", self.chainage)?;
        match &self.geometry {
            SectionGeometry::StationElevation {
                points,
                left_bank,
                right_bank,
                n_left,
                n_channel,
                n_right,
                storage,
            } => validate_profile(
                name,
                points,
                *left_bank,
                *right_bank,
                [*n_left, *n_channel, *n_right],
                storage,
            ),
            SectionGeometry::Trapezoid {
                bed_elevation,
                bottom_width,
                side_slope,
                n,
                height,
            } => {
                finite(name, "bed_elevation", *bed_elevation)?;
                non_negative(name, "bottom_width", *bottom_width)?;
                non_negative(name, "side_slope", *side_slope)?;
                if *bottom_width == 0.0 && *side_slope == 0.0 {
                    return Err(GeometryError::DegenerateTrapezoid {
                        section: name.clone(),
                    });
                }
                roughness(name, "n", *n)?;
                if let Some(h) = *height {
                    finite(name, "height", h)?;
                    if h <= 0.0 {
                        return Err(GeometryError::NonPositiveHeight {
                            section: name.clone(),
                            value: h,
                        });
                    }
                }
                Ok(())
            }
        }
    }
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

fn validate_profile(
    name: &str,
    points: &[[f64; 2]],
    left_bank: f64,
    right_bank: f64,
    n: [f64; 3],
    storage: &[StorageZone],
) -> Result<(), GeometryError> {
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

// ---------------------------------------------------------------------------
// Internal profile: the section split into straight ground pieces, each wholly
// in one class (left overbank, channel, right overbank, storage).

const LEFT: usize = 0;
const CHANNEL: usize = 1;
const RIGHT: usize = 2;
const STORAGE: usize = 3;

#[derive(Debug, Clone, Copy)]
struct Piece {
    x0: f64,
    x1: f64,
    g0: f64,
    g1: f64,
    class: usize,
}

/// Continuation of the section beyond an end point: a straight side rising
/// from elevation `g` with `slope` (H:V); zero is a vertical wall.
#[derive(Debug, Clone, Copy)]
struct Extension {
    g: f64,
    slope: f64,
    class: usize,
}

#[derive(Debug, Clone)]
struct Profile {
    pieces: Vec<Piece>,
    ends: [Extension; 2],
    inv_n: [f64; 3],
    bed: f64,
    /// Highest elevation the geometry describes directly.
    survey_top: f64,
    /// Elevation above which properties rely on invented walls.
    flag_elevation: f64,
}

/// Wet top width, area and perimeter of every class at one level.
#[derive(Debug, Clone, Copy, Default)]
struct Level {
    width: [f64; 4],
    area: [f64; 4],
    perimeter: [f64; 4],
}

impl Profile {
    fn from_section(section: &CrossSection) -> Result<Self, GeometryError> {
        section.validate()?;
        Ok(match &section.geometry {
            SectionGeometry::StationElevation {
                points,
                left_bank,
                right_bank,
                n_left,
                n_channel,
                n_right,
                storage,
            } => Self::surveyed(
                points,
                *left_bank,
                *right_bank,
                [*n_left, *n_channel, *n_right],
                storage,
            ),
            SectionGeometry::Trapezoid {
                bed_elevation,
                bottom_width,
                side_slope,
                n,
                height,
            } => Self::trapezoid(*bed_elevation, *bottom_width, *side_slope, *n, *height),
        })
    }

    /// Builds a validated station–elevation profile.
    fn surveyed(
        points: &[[f64; 2]],
        left_bank: f64,
        right_bank: f64,
        n: [f64; 3],
        storage: &[StorageZone],
    ) -> Self {
        let mut xs: Vec<f64> = points.iter().map(|p| p[0]).collect();
        xs.push(left_bank);
        xs.push(right_bank);
        for z in storage {
            xs.push(z.from);
            xs.push(z.to);
        }
        xs.sort_by(f64::total_cmp);
        xs.dedup();
        let ground = |x: f64| -> f64 {
            // First point with station >= x; validation guarantees x lies in range.
            let j = points.partition_point(|p| p[0] < x);
            if j == 0 {
                return points[0][1];
            }
            if j >= points.len() {
                return points[points.len() - 1][1];
            }
            let (a, b) = (points[j - 1], points[j]);
            a[1] + (b[1] - a[1]) * (x - a[0]) / (b[0] - a[0])
        };
        let pieces: Vec<Piece> = xs
            .windows(2)
            .map(|w| {
                let mid = 0.5 * (w[0] + w[1]);
                let class = if storage.iter().any(|z| z.from < mid && mid < z.to) {
                    STORAGE
                } else if mid < left_bank {
                    LEFT
                } else if mid > right_bank {
                    RIGHT
                } else {
                    CHANNEL
                };
                Piece {
                    x0: w[0],
                    x1: w[1],
                    g0: ground(w[0]),
                    g1: ground(w[1]),
                    class,
                }
            })
            .collect();
        let first = points[0][1];
        let last = points[points.len() - 1][1];
        let left_class = pieces.first().map_or(CHANNEL, |p| p.class);
        let right_class = pieces.last().map_or(CHANNEL, |p| p.class);
        let bed = points.iter().map(|p| p[1]).fold(f64::INFINITY, f64::min);
        let survey_top = points
            .iter()
            .map(|p| p[1])
            .fold(f64::NEG_INFINITY, f64::max);
        Profile {
            pieces,
            ends: [
                Extension {
                    g: first,
                    slope: 0.0,
                    class: left_class,
                },
                Extension {
                    g: last,
                    slope: 0.0,
                    class: right_class,
                },
            ],
            inv_n: [1.0 / n[0], 1.0 / n[1], 1.0 / n[2]],
            bed,
            survey_top,
            flag_elevation: first.min(last),
        }
    }

    /// Builds a validated trapezoid; all of it is main channel.
    fn trapezoid(bed: f64, width: f64, slope: f64, n: f64, height: Option<f64>) -> Self {
        let piece = |x0: f64, x1: f64, g0: f64, g1: f64| Piece {
            x0,
            x1,
            g0,
            g1,
            class: CHANNEL,
        };
        let mut pieces = Vec::with_capacity(3);
        let (ends_g, ends_slope, survey_top, flag_elevation) = match height {
            Some(h) if slope > 0.0 => {
                let run = slope * h;
                pieces.push(piece(0.0, run, bed + h, bed));
                if width > 0.0 {
                    pieces.push(piece(run, run + width, bed, bed));
                }
                pieces.push(piece(run + width, 2.0 * run + width, bed, bed + h));
                (bed + h, 0.0, bed + h, bed + h)
            }
            Some(h) => {
                // Rectangle: surveyed vertical walls from the bed up to the height.
                pieces.push(piece(0.0, width, bed, bed));
                (bed, 0.0, bed + h, bed + h)
            }
            None => {
                if width > 0.0 {
                    pieces.push(piece(0.0, width, bed, bed));
                }
                (bed, slope, bed + UNBOUNDED_TRAPEZOID_DEPTH, f64::INFINITY)
            }
        };
        let end = Extension {
            g: ends_g,
            slope: ends_slope,
            class: CHANNEL,
        };
        let inv_n = 1.0 / n;
        Profile {
            pieces,
            ends: [end, end],
            inv_n: [inv_n; 3],
            bed,
            survey_top,
            flag_elevation,
        }
    }

    /// Exact wet geometry at water level `z`. Ground exactly at `z` counts as
    /// wet (the limit from above), so a flat bed has its full width at zero depth.
    fn level(&self, z: f64) -> Level {
        let mut out = Level::default();
        for p in &self.pieces {
            let dx = p.x1 - p.x0;
            let (lo, hi) = if p.g0 <= p.g1 {
                (p.g0, p.g1)
            } else {
                (p.g1, p.g0)
            };
            let (w, a, per) = if hi == lo {
                if z >= lo {
                    (dx, dx * (z - lo), dx)
                } else {
                    (0.0, 0.0, 0.0)
                }
            } else if z <= lo {
                (0.0, 0.0, 0.0)
            } else if z >= hi {
                (dx, dx * (z - 0.5 * (lo + hi)), dx.hypot(hi - lo))
            } else {
                let f = (z - lo) / (hi - lo);
                let w = f * dx;
                (w, 0.5 * w * (z - lo), f * dx.hypot(hi - lo))
            };
            out.width[p.class] += w;
            out.area[p.class] += a;
            out.perimeter[p.class] += per;
        }
        for e in &self.ends {
            let d = z - e.g;
            if d > 0.0 {
                out.width[e.class] += e.slope * d;
                out.area[e.class] += 0.5 * e.slope * d * d;
                out.perimeter[e.class] += e.slope.hypot(1.0) * d;
            }
        }
        out
    }
}

/// Conveyance of one sub-section, (1/n) A R^(2/3) with R = A/P.
#[inline]
fn sub_conveyance(inv_n: f64, area: f64, perimeter: f64) -> f64 {
    if area > 0.0 && perimeter > 0.0 {
        let r = area / perimeter;
        inv_n * area * (r * r).cbrt()
    } else {
        0.0
    }
}

// ---------------------------------------------------------------------------
// Property table.

/// Options for building a [`PropertyTable`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TableOptions {
    /// Largest grid spacing in elevation (m).
    pub spacing: f64,
    /// Minimum number of grid intervals from bed to table top; a shallow
    /// section gets a finer spacing than `spacing` to reach it.
    pub min_rows: usize,
    /// Height (m) above the highest surveyed point covered by the table.
    /// Above the table, properties continue analytically, so this only
    /// decides where interpolation hands over to closed form.
    pub headroom: f64,
}

impl Default for TableOptions {
    fn default() -> Self {
        TableOptions {
            spacing: DEFAULT_SPACING,
            min_rows: DEFAULT_MIN_ROWS,
            headroom: DEFAULT_HEADROOM,
        }
    }
}

impl TableOptions {
    fn validate(&self) -> Result<(), GeometryError> {
        if !(self.spacing.is_finite() && self.spacing > 0.0) {
            return Err(GeometryError::InvalidOption {
                field: "spacing",
                requirement: "positive and finite",
                value: self.spacing,
            });
        }
        if !(self.headroom.is_finite() && self.headroom >= 0.0) {
            return Err(GeometryError::InvalidOption {
                field: "headroom",
                requirement: "non-negative and finite",
                value: self.headroom,
            });
        }
        if self.min_rows == 0 {
            return Err(GeometryError::InvalidOption {
                field: "min_rows",
                requirement: "at least 1",
                value: 0.0,
            });
        }
        Ok(())
    }
}

/// One grid row: values at the row's elevation and the coefficients of the
/// interpolant over the interval up to the next row. With h the height above
/// the row and Δz the spacing, a quantity V is
/// V(h) = V_i + h (s + c (h − Δz)), a quadratic through the row, the interval
/// midpoint and the next row; its derivative is s + c (2h − Δz). Keeping
/// everything in one row makes a lookup read one contiguous record.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
struct Row {
    storage_area: f64,
    /// Secant slope of the storage area over the interval.
    storage_width: f64,
    storage_curvature: f64,
    flow_area: f64,
    /// Secant slope of the flow area over the interval.
    flow_width: f64,
    flow_curvature: f64,
    perimeter: f64,
    perimeter_slope: f64,
    conveyance: f64,
    conveyance_slope: f64,
    conveyance_curvature: f64,
}

/// Coefficients (s, c) of the quadratic through `v0`, `vm`, `v1` at heights
/// 0, Δz/2, Δz: V(h) = v0 + h (s + c (h − Δz)).
///
/// The curvature is limited to |c| Δz ≤ |s| so the derivative keeps the sign
/// of the secant over the whole interval: a non-decreasing quantity stays
/// non-decreasing, and a top width never turns negative, even where a kink
/// in the geometry falls inside the interval.
fn quadratic(v0: f64, vm: f64, v1: f64, inv_dz: f64) -> (f64, f64) {
    let s = (v1 - v0) * inv_dz;
    let c = 4.0 * (0.5 * (v0 + v1) - vm) * inv_dz * inv_dz;
    let limit = s.abs() * inv_dz;
    (s, c.clamp(-limit, limit))
}

/// Closed-form geometry of one sub-section above the top of a table:
/// A(x) = a + t x + dt x²/2, T(x) = t + dt x, P(x) = p + dp x.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
struct Continuation {
    a: f64,
    t: f64,
    dt: f64,
    p: f64,
    dp: f64,
    inv_n: f64,
}

/// The analytic continuation of one constituent section above its table top,
/// with its weight in the (possibly blended) table.
#[derive(Debug, Clone, Copy, PartialEq)]
struct BeyondTerm {
    weight: f64,
    /// Depth above the bed where this term's coefficients apply.
    depth: f64,
    sub: [Continuation; 3],
    /// Storage-only area, width and width growth.
    storage: [f64; 3],
}

/// Section properties precomputed on a uniform elevation grid.
///
/// Rows hold exact storage area, flow area, wetted perimeter and composite
/// conveyance, computed from the geometry at every row and every interval
/// midpoint. Between rows, areas and conveyance follow the quadratic through
/// those three exact values (curvature limited so monotone data stay
/// monotone) and the wetted perimeter is linear. The reported top widths and
/// dK/dz are the exact derivatives of the area and conveyance interpolants,
/// so a Newton solver sees one consistent, continuous function, and the
/// storage area is non-decreasing by construction. Areas of a trapezoid are
/// reproduced exactly; conveyance, which grows like depth^(5/3), has a
/// relative interpolation error of order (Δz/depth)³. Top widths and dK/dz
/// may jump slightly at a row where a survey breakpoint falls inside the
/// neighbouring interval.
///
/// Below the bed everything is zero. Above the table the section continues in
/// closed form (vertical walls for surveys, the side slopes for an unbounded
/// trapezoid), so any finite elevation has finite properties.
#[derive(Debug, Clone, PartialEq)]
pub struct PropertyTable {
    bed: f64,
    dz: f64,
    inv_dz: f64,
    /// (rows − 1) as f64: the grid index of the table top.
    last: f64,
    /// Depth above which properties rely on invented walls (may be infinite).
    flag_depth: f64,
    rows: Vec<Row>,
    beyond: Vec<BeyondTerm>,
}

impl PropertyTable {
    /// Builds the table of a section with default [`TableOptions`].
    pub fn from_section(section: &CrossSection) -> Result<Self, GeometryError> {
        Self::build(section, &TableOptions::default())
    }

    /// Validates the section and builds its table.
    pub fn build(section: &CrossSection, options: &TableOptions) -> Result<Self, GeometryError> {
        options.validate()?;
        let profile = Profile::from_section(section)?;
        let height = profile.survey_top + options.headroom - profile.bed;
        let (dz, intervals) = grid(height, options, &section.name)?;
        // Samples at every row and every interval midpoint.
        let samples: Vec<[f64; 4]> = (0..=2 * intervals)
            .map(|k| {
                let l = profile.level(profile.bed + k as f64 * 0.5 * dz);
                let flow = l.area[LEFT] + l.area[CHANNEL] + l.area[RIGHT];
                let perimeter = l.perimeter[LEFT] + l.perimeter[CHANNEL] + l.perimeter[RIGHT];
                let k = (0..3)
                    .map(|s| sub_conveyance(profile.inv_n[s], l.area[s], l.perimeter[s]))
                    .sum::<f64>();
                [flow + l.area[STORAGE], flow, perimeter, k]
            })
            .collect();
        let top = profile.level(profile.bed + intervals as f64 * dz);
        let mut growth = [[0.0; 2]; 4];
        for e in &profile.ends {
            growth[e.class][0] += e.slope;
            growth[e.class][1] += e.slope.hypot(1.0);
        }
        let mut sub = [Continuation::default(); 3];
        for (s, c) in sub.iter_mut().enumerate() {
            *c = Continuation {
                a: top.area[s],
                t: top.width[s],
                dt: growth[s][0],
                p: top.perimeter[s],
                dp: growth[s][1],
                inv_n: profile.inv_n[s],
            };
        }
        let beyond = vec![BeyondTerm {
            weight: 1.0,
            depth: intervals as f64 * dz,
            sub,
            storage: [top.area[STORAGE], top.width[STORAGE], growth[STORAGE][0]],
        }];
        Ok(Self::assemble(
            profile.bed,
            dz,
            &samples,
            profile.flag_elevation - profile.bed,
            beyond,
        ))
    }

    /// Turns samples `[storage_area, flow_area, perimeter, conveyance]`,
    /// taken at every row and every interval midpoint (so `2 n + 1` samples for
    /// `n` intervals), into rows with interval slopes and curvatures.
    fn assemble(
        bed: f64,
        dz: f64,
        samples: &[[f64; 4]],
        flag_depth: f64,
        beyond: Vec<BeyondTerm>,
    ) -> Self {
        let inv_dz = 1.0 / dz;
        let n_rows = samples.len() / 2 + 1;
        // Guard monotonicity of the areas against rounding.
        let mut monotone: Vec<[f64; 4]> = samples.to_vec();
        for k in 1..monotone.len() {
            let previous = monotone[k - 1];
            for (v, p) in monotone[k].iter_mut().zip(previous).take(2) {
                *v = v.max(p);
            }
        }
        let mut rows: Vec<Row> = Vec::with_capacity(n_rows);
        for k in (0..monotone.len()).step_by(2) {
            let v = monotone[k];
            let mut row = Row {
                storage_area: v[0],
                flow_area: v[1],
                perimeter: v[2],
                conveyance: v[3],
                ..Row::default()
            };
            if let (Some(mid), Some(next)) = (monotone.get(k + 1), monotone.get(k + 2)) {
                let (s, c) = quadratic(v[0], mid[0], next[0], inv_dz);
                row.storage_width = s;
                row.storage_curvature = c;
                let (s, c) = quadratic(v[1], mid[1], next[1], inv_dz);
                row.flow_width = s;
                row.flow_curvature = c;
                row.perimeter_slope = (next[2] - v[2]) * inv_dz;
                let (s, c) = quadratic(v[3], mid[3], next[3], inv_dz);
                row.conveyance_slope = s;
                row.conveyance_curvature = c;
            }
            rows.push(row);
        }
        let last = rows.len().saturating_sub(1) as f64;
        let mut table = PropertyTable {
            bed,
            dz,
            inv_dz,
            last,
            flag_depth,
            rows,
            beyond,
        };
        // The top row's slopes are never used for lookup inside the table;
        // fill them with the continuation so the row reads sensibly.
        let top = table.beyond_props(table.bed + last * dz);
        if let Some(row) = table.rows.last_mut() {
            row.storage_width = top.storage_top_width;
            row.flow_width = top.flow_top_width;
            row.conveyance_slope = top.dconveyance_dz;
        }
        table
    }

    /// Lowest bed elevation (m): the table's first row.
    pub fn bed(&self) -> f64 {
        self.bed
    }

    /// Grid spacing in elevation (m).
    pub fn spacing(&self) -> f64 {
        self.dz
    }

    /// Number of grid rows.
    pub fn row_count(&self) -> usize {
        self.rows.len()
    }

    /// Elevation of the last grid row (m); above it properties are closed form.
    pub fn top_elevation(&self) -> f64 {
        self.bed + self.last * self.dz
    }

    /// Elevation above which [`Props::extrapolated`] is set (m); infinite for
    /// an unbounded trapezoid.
    pub fn extrapolation_elevation(&self) -> f64 {
        self.bed + self.flag_depth
    }

    /// Properties above the table top, from the closed-form continuation of
    /// every constituent section at the same depth.
    #[cold]
    fn beyond_props(&self, z: f64) -> Props {
        let depth = z - self.bed;
        let mut out = Props {
            z,
            extrapolated: depth > self.flag_depth,
            ..Props::default()
        };
        for term in &self.beyond {
            let x = (depth - term.depth).max(0.0);
            let w = term.weight;
            for c in &term.sub {
                let a = c.a + x * (c.t + 0.5 * c.dt * x);
                let t = c.t + c.dt * x;
                let p = c.p + c.dp * x;
                out.flow_area += w * a;
                out.flow_top_width += w * t;
                out.wetted_perimeter += w * p;
                if a > 0.0 && p > 0.0 {
                    let r23 = ((a / p) * (a / p)).cbrt();
                    out.conveyance += w * c.inv_n * a * r23;
                    out.dconveyance_dz +=
                        w * c.inv_n * r23 * (5.0 / 3.0 * t - 2.0 / 3.0 * (a / p) * c.dp);
                }
            }
            let [sa, st, sdt] = term.storage;
            out.storage_area += w * (sa + x * (st + 0.5 * sdt * x));
            out.storage_top_width += w * (st + sdt * x);
        }
        out.storage_area += out.flow_area;
        out.storage_top_width += out.flow_top_width;
        out
    }

    /// Table for a section between `a` (weight `1 − w`) and `b` (weight `w`),
    /// `0 ≤ w ≤ 1`, e.g. at a fraction `w` of the way from `a`'s chainage to
    /// `b`'s.
    ///
    /// Properties are interpolated at equal depth above each section's bed:
    /// the bed elevation interpolates linearly and the hydraulic properties
    /// travel with it, which keeps a sloping reach from being flooded or
    /// drained by the interpolation. The grid is the finer of the two; above
    /// both tables the closed-form continuations are blended the same way.
    pub fn blend(a: &PropertyTable, b: &PropertyTable, w: f64) -> Result<Self, GeometryError> {
        if !(0.0..=1.0).contains(&w) {
            return Err(GeometryError::InvalidOption {
                field: "w",
                requirement: "within [0, 1]",
                value: w,
            });
        }
        let dz = a.dz.min(b.dz);
        let height = (a.last * a.dz).max(b.last * b.dz);
        let intervals = (height / dz - 1e-9).ceil().max(1.0);
        if intervals >= MAX_TABLE_ROWS as f64 {
            return Err(GeometryError::TableTooLarge {
                section: "(interpolated)".to_owned(),
                rows: intervals as usize + 1,
                limit: MAX_TABLE_ROWS,
            });
        }
        let intervals = intervals as usize;
        let samples: Vec<[f64; 4]> = (0..=2 * intervals)
            .map(|k| {
                let d = k as f64 * 0.5 * dz;
                let pa = a.props(a.bed + d);
                let pb = b.props(b.bed + d);
                let mix = |x: f64, y: f64| (1.0 - w) * x + w * y;
                [
                    mix(pa.storage_area, pb.storage_area),
                    mix(pa.flow_area, pb.flow_area),
                    mix(pa.wetted_perimeter, pb.wetted_perimeter),
                    mix(pa.conveyance, pb.conveyance),
                ]
            })
            .collect();
        let beyond = a
            .beyond
            .iter()
            .map(|t| (t, 1.0 - w))
            .chain(b.beyond.iter().map(|t| (t, w)))
            .filter(|(_, weight)| *weight > 0.0)
            .map(|(t, weight)| BeyondTerm {
                weight: t.weight * weight,
                ..*t
            })
            .collect();
        let flag_depth = match (w > 0.0, w < 1.0) {
            (true, true) => a.flag_depth.min(b.flag_depth),
            (true, false) => b.flag_depth,
            _ => a.flag_depth,
        };
        Ok(Self::assemble(
            (1.0 - w) * a.bed + w * b.bed,
            dz,
            &samples,
            flag_depth,
            beyond,
        ))
    }
}

/// Grid spacing and number of intervals for a table of the given height.
fn grid(height: f64, options: &TableOptions, section: &str) -> Result<(f64, usize), GeometryError> {
    let mut dz = options.spacing;
    if height > 0.0 {
        dz = dz.min(height / options.min_rows as f64);
    }
    let intervals = (height / dz - 1e-9).ceil().max(1.0);
    if intervals >= MAX_TABLE_ROWS as f64 {
        return Err(GeometryError::TableTooLarge {
            section: section.to_owned(),
            rows: if intervals < usize::MAX as f64 {
                intervals as usize + 1
            } else {
                usize::MAX
            },
            limit: MAX_TABLE_ROWS,
        });
    }
    Ok((dz, intervals as usize))
}

impl Hydraulics for PropertyTable {
    fn bed_elevation(&self) -> f64 {
        self.bed
    }

    #[inline]
    fn props(&self, z: f64) -> Props {
        let s = (z - self.bed) * self.inv_dz;
        if s >= 0.0 && s < self.last {
            let i = s as usize;
            let h = z - (self.bed + i as f64 * self.dz);
            // `s < last` makes `i` at most rows − 2.
            let r = &self.rows[i];
            let g = h - self.dz;
            let hg = h + g;
            Props {
                z,
                flow_area: r.flow_area + h * (r.flow_width + r.flow_curvature * g),
                storage_area: r.storage_area + h * (r.storage_width + r.storage_curvature * g),
                flow_top_width: r.flow_width + r.flow_curvature * hg,
                storage_top_width: r.storage_width + r.storage_curvature * hg,
                wetted_perimeter: r.perimeter + h * r.perimeter_slope,
                conveyance: r.conveyance + h * (r.conveyance_slope + r.conveyance_curvature * g),
                dconveyance_dz: r.conveyance_slope + r.conveyance_curvature * hg,
                extrapolated: z - self.bed > self.flag_depth,
            }
        } else if s >= self.last {
            self.beyond_props(z)
        } else {
            // Below the bed (or NaN): dry.
            Props {
                z,
                ..Props::default()
            }
        }
    }
}

/// A computational node: a chainage and the table the solver uses there.
#[derive(Debug, Clone, PartialEq)]
pub struct Node {
    /// Distance along the reach (m).
    pub chainage: f64,
    /// Section properties at this node.
    pub table: PropertyTable,
}

impl Hydraulics for Node {
    fn bed_elevation(&self) -> f64 {
        self.table.bed
    }

    #[inline]
    fn props(&self, z: f64) -> Props {
        self.table.props(z)
    }
}

/// Validates a reach and builds its computational nodes with default
/// [`TableOptions`]: one node per section plus interpolated nodes so that no
/// two neighbours are more than `max_spacing` metres apart.
pub fn build_nodes(
    sections: &[CrossSection],
    max_spacing: f64,
) -> Result<Vec<Node>, GeometryError> {
    build_nodes_with(sections, max_spacing, &TableOptions::default())
}

/// [`build_nodes`] with explicit table options.
///
/// Each gap between surveyed sections is split into equal parts; interpolated
/// nodes use [`PropertyTable::blend`] with the fractional distance as weight.
pub fn build_nodes_with(
    sections: &[CrossSection],
    max_spacing: f64,
    options: &TableOptions,
) -> Result<Vec<Node>, GeometryError> {
    if !(max_spacing.is_finite() && max_spacing > 0.0) {
        return Err(GeometryError::InvalidOption {
            field: "max_spacing",
            requirement: "positive and finite",
            value: max_spacing,
        });
    }
    validate_reach(sections)?;
    let mut parts = Vec::with_capacity(sections.len());
    let mut count = 1_usize;
    for pair in sections.windows(2) {
        let gap = pair[1].chainage - pair[0].chainage;
        let k = (gap / max_spacing - 1e-9).ceil().max(1.0);
        // Float-to-integer casts saturate, so a huge `k` cannot wrap.
        let k = k as usize;
        count = count.saturating_add(k);
        if count > MAX_NODES {
            return Err(GeometryError::TooManyNodes {
                max_spacing,
                count,
                limit: MAX_NODES,
            });
        }
        parts.push(k);
    }
    if count > MAX_NODES {
        return Err(GeometryError::TooManyNodes {
            max_spacing,
            count,
            limit: MAX_NODES,
        });
    }
    let tables = sections
        .iter()
        .map(|s| PropertyTable::build(s, options))
        .collect::<Result<Vec<_>, _>>()?;
    let mut nodes = Vec::with_capacity(count);
    for (i, (section, table)) in sections.iter().zip(&tables).enumerate() {
        nodes.push(Node {
            chainage: section.chainage,
            table: table.clone(),
        });
        if let (Some(&k), Some(next), Some(next_table)) =
            (parts.get(i), sections.get(i + 1), tables.get(i + 1))
        {
            let gap = next.chainage - section.chainage;
            for j in 1..k {
                let w = j as f64 / k as f64;
                nodes.push(Node {
                    chainage: section.chainage + w * gap,
                    table: PropertyTable::blend(table, next_table, w)?,
                });
            }
        }
    }
    Ok(nodes)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn xs(name: &str, chainage: f64, geometry: SectionGeometry) -> CrossSection {
        CrossSection {
            name: name.to_owned(),
            chainage,
            geometry,
        }
    }

    fn rect(width: f64, bed: f64, n: f64) -> SectionGeometry {
        SectionGeometry::Trapezoid {
            bed_elevation: bed,
            bottom_width: width,
            side_slope: 0.0,
            n,
            height: None,
        }
    }

    fn profile(points: Vec<[f64; 2]>, left: f64, right: f64) -> SectionGeometry {
        SectionGeometry::StationElevation {
            points,
            left_bank: left,
            right_bank: right,
            n_left: 0.05,
            n_channel: 0.03,
            n_right: 0.05,
            storage: vec![],
        }
    }

    fn v_profile() -> SectionGeometry {
        profile(vec![[0.0, 12.0], [10.0, 10.0], [20.0, 12.0]], 5.0, 15.0)
    }

    fn close(a: f64, b: f64, rel: f64) -> bool {
        (a - b).abs() <= rel * b.abs().max(1e-12)
    }

    fn err(geometry: SectionGeometry) -> GeometryError {
        match xs("xs-test", 0.0, geometry).validate() {
            Err(e) => e,
            Ok(()) => panic!("expected a validation error"),
        }
    }

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

    #[test]
    fn table_dry_below_bed_and_zero_at_bed() {
        let t = PropertyTable::from_section(&xs("v", 0.0, v_profile())).expect("valid");
        assert_eq!(t.bed(), 10.0);
        let p = t.props(9.0);
        assert_eq!(p.storage_area, 0.0);
        assert_eq!(p.conveyance, 0.0);
        assert_eq!(p.storage_top_width, 0.0);
        let p = t.props(10.0);
        assert_eq!(p.flow_area, 0.0);
        assert_eq!(p.conveyance, 0.0);
        let p = t.props(f64::NAN);
        assert_eq!(p.storage_area, 0.0);
    }

    #[test]
    fn v_section_area_matches_triangle() {
        // Triangle with side slope 5 H : 1 V both sides: A = 5 d², T = 10 d.
        let t = PropertyTable::from_section(&xs("v", 0.0, v_profile())).expect("valid");
        for d in [0.3, 1.0, 1.777, 2.0] {
            let p = t.props(10.0 + d);
            assert!(
                close(p.flow_area, 5.0 * d * d, 1e-4),
                "d={d} A={}",
                p.flow_area
            );
            assert!((p.flow_top_width - 10.0 * d).abs() <= 10.0 * t.spacing());
            let perimeter = 2.0 * d * 26f64.sqrt();
            assert!(close(p.wetted_perimeter, perimeter, 1e-4));
            assert!(!p.extrapolated);
        }
    }

    #[test]
    fn storage_area_non_decreasing_and_width_is_its_derivative() {
        let g = profile(
            vec![
                [0.0, 15.0],
                [3.0, 11.0],
                [6.0, 13.0],
                [8.0, 9.0],
                [12.0, 9.5],
                [14.0, 12.0],
                [30.0, 12.0],
                [31.0, 16.0],
            ],
            6.0,
            14.0,
        );
        let t = PropertyTable::from_section(&xs("w", 0.0, g)).expect("valid");
        let mut prev = t.props(8.5);
        let mut z = 8.5;
        while z < 20.0 {
            z += 0.0037;
            let p = t.props(z);
            assert!(p.storage_area >= prev.storage_area);
            assert!(p.flow_area <= p.storage_area + 1e-12);
            prev = p;
        }
        // Within one interval the width is the exact derivative of the area
        // (a quadratic, so the central difference is exact up to rounding).
        let dz = t.spacing();
        for z0 in [9.2031, 11.2031, 12.5057, 15.0049] {
            let d = 0.1 * dz;
            assert_eq!(
                ((z0 - d - t.bed()) / dz).floor(),
                ((z0 + d - t.bed()) / dz).floor(),
                "probe must stay inside one interval"
            );
            let (a, b, m) = (t.props(z0 - d), t.props(z0 + d), t.props(z0));
            let fd = (b.storage_area - a.storage_area) / (2.0 * d);
            assert!(close(fd, m.storage_top_width, 1e-6), "z={z0}");
            let fd = (b.conveyance - a.conveyance) / (2.0 * d);
            assert!(close(fd, m.dconveyance_dz, 1e-6), "z={z0}");
        }
    }

    #[test]
    fn disconnected_pocket_counts_as_wet() {
        // A pocket at station 2..4 (bed 10.5) separated from the channel by a
        // ridge at 11.5; at z = 11 both the pocket and the channel hold water.
        let g = profile(
            vec![
                [0.0, 13.0],
                [2.0, 10.5],
                [4.0, 11.5],
                [8.0, 10.0],
                [12.0, 13.0],
            ],
            4.0,
            12.0,
        );
        let t = PropertyTable::from_section(&xs("pocket", 0.0, g)).expect("valid");
        let p = t.props(11.0);
        // Pocket: left side slope 2.5/2 → width 0.4 at 0.5 depth; right side
        // 1/2 → width 1.0. Area 0.5 * 1.4 * 0.5 = 0.35.
        // Channel (stations 4..12 from bed 10): right side 3/4 → width 4/3 at
        // depth 1; left side from (4,11.5) to (8,10): width 4/1.5 * 1. Area = 0.5 * (8/3 + 4/3) * 1 = 2.
        assert!(close(p.flow_area, 2.35, 1e-3), "A={}", p.flow_area);
    }

    #[test]
    fn vertical_walls_above_survey() {
        let t = PropertyTable::from_section(&xs("v", 0.0, v_profile())).expect("valid");
        assert_eq!(t.extrapolation_elevation(), 12.0);
        let at = t.props(12.0);
        let above = t.props(12.5);
        assert!(!t.props(11.99).extrapolated);
        assert!(above.extrapolated);
        assert!(close(above.flow_area, at.flow_area + 20.0 * 0.5, 1e-6));
        assert!(close(
            above.wetted_perimeter,
            at.wetted_perimeter + 2.0 * 0.5,
            1e-6
        ));
        // Beyond the table top the continuation is analytic and continuous.
        let top = t.top_elevation();
        let below_top = t.props(top - 1e-9);
        let past = t.props(top + 1e-9);
        assert!(close(past.flow_area, below_top.flow_area, 1e-8));
        assert!(close(past.conveyance, below_top.conveyance, 1e-6));
        let far = t.props(top + 100.0);
        assert!(far.extrapolated);
        assert!(close(far.storage_top_width, 20.0, 1e-12));
        assert!(far.conveyance.is_finite() && far.conveyance > past.conveyance);
    }

    #[test]
    fn conveyance_slope_matches_finite_difference_above_table() {
        let t = PropertyTable::from_section(&xs("v", 0.0, v_profile())).expect("valid");
        let z = t.top_elevation() + 3.0;
        let h = 1e-5;
        let fd = (t.props(z + h).conveyance - t.props(z - h).conveyance) / (2.0 * h);
        assert!(close(t.props(z).dconveyance_dz, fd, 1e-5));
    }

    #[test]
    fn unbounded_trapezoid_never_extrapolated() {
        let g = SectionGeometry::Trapezoid {
            bed_elevation: 0.0,
            bottom_width: 2.0,
            side_slope: 1.0,
            n: 0.03,
            height: None,
        };
        let t = PropertyTable::from_section(&xs("t", 0.0, g)).expect("valid");
        let d = 40.0; // well above the table
        let p = t.props(d);
        assert!(!p.extrapolated);
        assert!(close(p.flow_area, (2.0 + d) * d, 1e-12));
        assert!(close(p.flow_top_width, 2.0 + 2.0 * d, 1e-12));
    }

    #[test]
    fn trapezoid_with_height_flags_above_height() {
        let g = SectionGeometry::Trapezoid {
            bed_elevation: 1.0,
            bottom_width: 2.0,
            side_slope: 1.0,
            n: 0.03,
            height: Some(1.0),
        };
        let t = PropertyTable::from_section(&xs("t", 0.0, g)).expect("valid");
        assert!(!t.props(1.9).extrapolated);
        let p = t.props(2.5);
        assert!(p.extrapolated);
        // Area below bank height 1*(2+1)=3, then top width 4 above it.
        assert!(close(p.flow_area, 3.0 + 4.0 * 0.5, 1e-6));
        let rect = SectionGeometry::Trapezoid {
            bed_elevation: 0.0,
            bottom_width: 3.0,
            side_slope: 0.0,
            n: 0.03,
            height: Some(2.0),
        };
        let t = PropertyTable::from_section(&xs("r", 0.0, rect)).expect("valid");
        assert!(!t.props(1.5).extrapolated);
        assert!(t.props(2.5).extrapolated);
        assert!(close(t.props(2.5).flow_area, 7.5, 1e-9));
    }

    #[test]
    fn options_are_validated_and_grid_respects_min_rows() {
        let s = xs("v", 0.0, v_profile());
        let bad = TableOptions {
            spacing: 0.0,
            ..TableOptions::default()
        };
        assert!(matches!(
            PropertyTable::build(&s, &bad),
            Err(GeometryError::InvalidOption {
                field: "spacing",
                ..
            })
        ));
        let bad = TableOptions {
            headroom: -1.0,
            ..TableOptions::default()
        };
        assert!(PropertyTable::build(&s, &bad).is_err());
        let bad = TableOptions {
            min_rows: 0,
            ..TableOptions::default()
        };
        assert!(PropertyTable::build(&s, &bad).is_err());
        let tiny = TableOptions {
            spacing: 1e-7,
            ..TableOptions::default()
        };
        assert!(matches!(
            PropertyTable::build(&s, &tiny),
            Err(GeometryError::TableTooLarge { .. })
        ));
        let coarse = TableOptions {
            spacing: 1.0,
            min_rows: 400,
            headroom: 0.0,
        };
        let t = PropertyTable::build(&s, &coarse).expect("valid");
        assert!(t.row_count() > 400);
        assert!(t.spacing() <= 2.0 / 400.0 + 1e-15);
    }

    #[test]
    fn blend_interpolates_at_equal_depth() {
        let a = PropertyTable::from_section(&xs("a", 0.0, rect(10.0, 5.0, 0.03))).expect("ok");
        let b = PropertyTable::from_section(&xs("b", 100.0, rect(20.0, 4.0, 0.03))).expect("ok");
        let m = PropertyTable::blend(&a, &b, 0.25).expect("ok");
        assert!(close(m.bed(), 4.75, 1e-12));
        for d in [0.5, 1.0, 3.0, 30.0] {
            let p = m.props(4.75 + d);
            let width = 0.75 * 10.0 + 0.25 * 20.0;
            assert!(close(p.storage_area, width * d, 1e-9), "d={d}");
            let k = 0.75 * a.props(5.0 + d).conveyance + 0.25 * b.props(4.0 + d).conveyance;
            assert!(close(p.conveyance, k, 1e-9), "d={d}");
        }
        let same = PropertyTable::blend(&a, &b, 0.0).expect("ok");
        assert!(close(
            same.props(6.3).conveyance,
            a.props(6.3).conveyance,
            1e-12
        ));
        assert!(PropertyTable::blend(&a, &b, 1.5).is_err());
        assert!(PropertyTable::blend(&a, &b, f64::NAN).is_err());
    }

    #[test]
    fn blend_of_unlike_sections_is_consistent() {
        let a = PropertyTable::from_section(&xs("a", 0.0, v_profile())).expect("ok");
        let g = profile(
            vec![
                [0.0, 9.0],
                [3.0, 7.5],
                [10.0, 7.5],
                [11.0, 5.0],
                [16.0, 5.0],
                [17.0, 7.5],
                [30.0, 8.0],
            ],
            10.0,
            17.0,
        );
        let b = PropertyTable::from_section(&xs("b", 0.0, g)).expect("ok");
        let w = 0.4;
        let m = PropertyTable::blend(&a, &b, w).expect("ok");
        // At equal depth every quantity is the weighted mean, both on the
        // grid and above all tables (closed-form continuation).
        for d in [0.25, 1.333, 2.5, 3.75, 6.0, 50.0] {
            let (pa, pb, pm) = (a.props(10.0 + d), b.props(5.0 + d), m.props(m.bed() + d));
            let mix = |x: f64, y: f64| (1.0 - w) * x + w * y;
            assert!(close(
                pm.storage_area,
                mix(pa.storage_area, pb.storage_area),
                1e-6
            ));
            assert!(close(
                pm.wetted_perimeter,
                mix(pa.wetted_perimeter, pb.wetted_perimeter),
                1e-6
            ));
            assert!(
                close(pm.conveyance, mix(pa.conveyance, pb.conveyance), 1e-5),
                "d={d}"
            );
            assert_eq!(pm.extrapolated, pa.extrapolated || pb.extrapolated, "d={d}");
        }
        // Continuous across the table top and monotone storage throughout.
        let top = m.top_elevation();
        let (lo, hi) = (m.props(top - 1e-9), m.props(top + 1e-9));
        assert!(close(hi.storage_area, lo.storage_area, 1e-8));
        assert!(close(hi.conveyance, lo.conveyance, 1e-6));
        let mut prev = 0.0;
        let mut z = m.bed() - 0.1;
        while z < top + 2.0 {
            let p = m.props(z);
            assert!(p.storage_area >= prev);
            assert!(p.storage_top_width >= 0.0);
            prev = p.storage_area;
            z += 0.00731;
        }
        // Blending a blend again keeps the same rules.
        let mm = PropertyTable::blend(&m, &b, 0.5).expect("ok");
        let d = 40.0;
        let expect = 0.5 * m.props(m.bed() + d).conveyance + 0.5 * b.props(5.0 + d).conveyance;
        assert!(close(mm.props(mm.bed() + d).conveyance, expect, 1e-9));
    }

    #[test]
    fn build_nodes_inserts_interpolated_nodes() {
        let s = vec![
            xs("a", 0.0, rect(10.0, 5.0, 0.03)),
            xs("b", 250.0, rect(20.0, 4.0, 0.03)),
            xs("c", 300.0, rect(20.0, 3.9, 0.03)),
        ];
        let nodes = build_nodes(&s, 100.0).expect("ok");
        let ch: Vec<f64> = nodes.iter().map(|n| n.chainage).collect();
        assert_eq!(ch.len(), 5);
        assert!(close(ch[1], 250.0 / 3.0, 1e-12));
        assert_eq!(ch[3], 250.0);
        assert_eq!(ch[4], 300.0);
        for w in ch.windows(2) {
            assert!(w[1] - w[0] <= 100.0 + 1e-9);
        }
        assert!(close(nodes[1].bed_elevation(), 5.0 - 1.0 / 3.0, 1e-12));
        assert!(matches!(
            build_nodes(&s, 0.0),
            Err(GeometryError::InvalidOption { .. })
        ));
        assert!(matches!(
            build_nodes(&s, 1e-4),
            Err(GeometryError::TooManyNodes { .. })
        ));
        assert_eq!(build_nodes(&[], 10.0), Err(GeometryError::EmptyReach));
        let one = build_nodes(&s[..1], 10.0).expect("ok");
        assert_eq!(one.len(), 1);
    }
}

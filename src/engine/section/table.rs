//! The property table: a section's properties precomputed on a uniform
//! elevation grid, so a solver's lookup is index arithmetic plus a short
//! polynomial and never allocates.

use super::profile::{CHANNEL, LEFT, Profile, RIGHT, STORAGE, sub_conveyance};
use super::types::{CrossSection, GeometryError};
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
pub(super) struct Continuation {
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
pub(super) struct BeyondTerm {
    pub(super) weight: f64,
    /// Depth above the bed where this term's coefficients apply.
    pub(super) depth: f64,
    pub(super) sub: [Continuation; 3],
    /// Storage-only area, width and width growth.
    pub(super) storage: [f64; 3],
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
    pub(super) bed: f64,
    pub(super) dz: f64,
    inv_dz: f64,
    /// (rows − 1) as f64: the grid index of the table top.
    pub(super) last: f64,
    /// Depth above which properties rely on invented walls (may be infinite).
    pub(super) flag_depth: f64,
    rows: Vec<Row>,
    pub(super) beyond: Vec<BeyondTerm>,
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
            samples,
            profile.flag_elevation - profile.bed,
            beyond,
        ))
    }

    /// Turns samples `[storage_area, flow_area, perimeter, conveyance]`,
    /// taken at every row and every interval midpoint (so `2 n + 1` samples for
    /// `n` intervals), into rows with interval slopes and curvatures. Takes
    /// the samples by value and makes them monotone in place, sparing a
    /// copy of them for each of a reach's node tables (about 3 % of
    /// building the tables of the `engine` bench's prismatic reach).
    pub(super) fn assemble(
        bed: f64,
        dz: f64,
        samples: Vec<[f64; 4]>,
        flag_depth: f64,
        beyond: Vec<BeyondTerm>,
    ) -> Self {
        let inv_dz = 1.0 / dz;
        let n_rows = samples.len() / 2 + 1;
        // Guard monotonicity of the areas against rounding.
        let mut monotone = samples;
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

    /// Whether `other` has the same properties at every depth above its
    /// bed (same grid, rows, continuation and flag depth): the sections of
    /// a prismatic reach differ only in bed elevation.
    pub(super) fn same_shape(&self, other: &Self) -> bool {
        self.dz == other.dz
            && self.last == other.last
            && self.flag_depth == other.flag_depth
            && self.rows == other.rows
            && self.beyond == other.beyond
    }

    /// This table moved to another bed elevation.
    pub(super) fn with_bed(&self, bed: f64) -> Self {
        Self {
            bed,
            ..self.clone()
        }
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
        let mut p = Props::default();
        self.props_into(z, &mut p);
        p
    }

    // Always inlined: the solver calls it for every node of every Newton
    // iteration.
    #[inline(always)]
    fn props_into(&self, z: f64, out: &mut Props) {
        let s = (z - self.bed) * self.inv_dz;
        if s >= 0.0 && s < self.last {
            let i = s as usize;
            let h = z - (self.bed + i as f64 * self.dz);
            // `s < last` makes `i` at most rows − 2.
            let r = &self.rows[i];
            let g = h - self.dz;
            let hg = h + g;
            out.z = z;
            out.flow_area = r.flow_area + h * (r.flow_width + r.flow_curvature * g);
            out.storage_area = r.storage_area + h * (r.storage_width + r.storage_curvature * g);
            out.flow_top_width = r.flow_width + r.flow_curvature * hg;
            out.storage_top_width = r.storage_width + r.storage_curvature * hg;
            out.wetted_perimeter = r.perimeter + h * r.perimeter_slope;
            out.conveyance = r.conveyance + h * (r.conveyance_slope + r.conveyance_curvature * g);
            out.dconveyance_dz = r.conveyance_slope + r.conveyance_curvature * hg;
            out.extrapolated = z - self.bed > self.flag_depth;
        } else if s >= self.last {
            *out = self.beyond_props(z);
        } else {
            // Below the bed (or NaN): dry.
            *out = Props {
                z,
                ..Props::default()
            };
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::section::fixtures::{close, profile, v_profile, xs};

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
    fn conveyance_slope_matches_finite_difference_above_table() {
        let t = PropertyTable::from_section(&xs("v", 0.0, v_profile())).expect("valid");
        let z = t.top_elevation() + 3.0;
        let h = 1e-5;
        let fd = (t.props(z + h).conveyance - t.props(z - h).conveyance) / (2.0 * h);
        assert!(close(t.props(z).dconveyance_dz, fd, 1e-5));
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
}

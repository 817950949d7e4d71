//! The section as geometry: the station–elevation profile (or trapezoid)
//! cut into straight ground pieces, each wholly in one class (left
//! overbank, channel, right overbank, storage), closed at its ends by
//! walls or side slopes, and the exact wet geometry of every class at a
//! water level.

use super::types::{CrossSection, GeometryError, Shape, Survey, Trapezoid};

/// Depth (m) to which a trapezoid without a `height` is tabulated; above the
/// table its properties continue exactly along the side slopes.
pub const UNBOUNDED_TRAPEZOID_DEPTH: f64 = 10.0;

/// Ground classes: the indices of [`Level`]'s per-class arrays, conveying
/// classes first so that [`Profile::inv_n`] is indexed the same way.
pub(super) const LEFT: usize = 0;
pub(super) const CHANNEL: usize = 1;
pub(super) const RIGHT: usize = 2;
pub(super) const STORAGE: usize = 3;

/// Straight ground from `(x0, g0)` to `(x1, g1)`, all in one class.
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
pub(super) struct Extension {
    pub(super) g: f64,
    pub(super) slope: f64,
    pub(super) class: usize,
}

/// A validated section as ground pieces, end extensions and roughness.
#[derive(Debug, Clone)]
pub(super) struct Profile {
    pieces: Vec<Piece>,
    pub(super) ends: [Extension; 2],
    pub(super) inv_n: [f64; 3],
    pub(super) bed: f64,
    /// Highest elevation the geometry describes directly.
    pub(super) survey_top: f64,
    /// Elevation above which properties rely on invented walls.
    pub(super) flag_elevation: f64,
}

/// Wet top width, area and perimeter of every class at one level.
#[derive(Debug, Clone, Copy, Default)]
pub(super) struct Level {
    pub(super) width: [f64; 4],
    pub(super) area: [f64; 4],
    pub(super) perimeter: [f64; 4],
}

impl Profile {
    pub(super) fn from_section(section: &CrossSection) -> Result<Self, GeometryError> {
        section.validate()?;
        Ok(match section.geometry.shape() {
            Shape::Surveyed(survey) => Self::surveyed(&survey),
            Shape::Trapezoid(trapezoid) => Self::trapezoid(&trapezoid),
        })
    }

    /// Builds a validated station–elevation profile.
    fn surveyed(survey: &Survey<'_>) -> Self {
        let (points, storage) = (survey.points, survey.storage);
        let (left_bank, right_bank) = (survey.left_bank, survey.right_bank);
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
            inv_n: survey.n.map(|n| 1.0 / n),
            bed,
            survey_top,
            flag_elevation: first.min(last),
        }
    }

    /// Builds a validated trapezoid; all of it is main channel.
    fn trapezoid(t: &Trapezoid) -> Self {
        let Trapezoid {
            bed,
            width,
            side_slope: slope,
            n,
            height,
        } = *t;
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
    pub(super) fn level(&self, z: f64) -> Level {
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
pub(super) fn sub_conveyance(inv_n: f64, area: f64, perimeter: f64) -> f64 {
    if area > 0.0 && perimeter > 0.0 {
        let r = area / perimeter;
        inv_n * area * (r * r).cbrt()
    } else {
        0.0
    }
}

#[cfg(test)]
mod tests {
    use crate::engine::props::Hydraulics;
    use crate::engine::section::fixtures::{close, profile, v_profile, xs};
    use crate::engine::section::{PropertyTable, SectionGeometry};

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
}

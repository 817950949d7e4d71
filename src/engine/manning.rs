//! Manning's equation: uniform-flow discharge, normal depth, critical depth.
//!
//! SI units only: Q = (1/n) A R^(2/3) S^(1/2) with the unit constant k = 1.
//! (In US customary units the constant is 1.486 ≈ 3.2808^(1/3), which is what
//! lets the same n serve both systems.)
//!
//! Depth solvers work on any [`Hydraulics`] implementation and return a
//! water-surface elevation. They bracket the root by doubling the depth above
//! the bed and then refine with Brent's method, which keeps the root inside
//! the bracket at every step and falls back to bisection when interpolation
//! misbehaves, so it converges for any continuous or piecewise-continuous
//! property function that changes sign over the bracket.

use crate::engine::GRAVITY;
use crate::engine::props::Hydraulics;

/// Why a Manning or depth computation was rejected.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum HydraulicsError {
    /// An input that must be finite and non-negative is not.
    #[error("`{field}` must be finite and non-negative, got {value}")]
    Negative {
        /// Argument name.
        field: &'static str,
        /// Offending value.
        value: f64,
    },
    /// An input that must be finite and positive is not.
    #[error("`{field}` must be finite and positive, got {value}")]
    NotPositive {
        /// Argument name.
        field: &'static str,
        /// Offending value.
        value: f64,
    },
    /// An input that must be finite is not.
    #[error("`{field}` must be finite, got {value}")]
    NonFinite {
        /// Argument name.
        field: &'static str,
        /// Offending value.
        value: f64,
    },
    /// The section never carries the discharge, however high the water.
    #[error(
        "no water-surface elevation up to {z_max} m reaches the target for discharge {q} m³/s; the section's properties stop growing"
    )]
    NoBracket {
        /// Discharge sought (m³/s).
        q: f64,
        /// Highest elevation tried (m).
        z_max: f64,
    },
    /// The section reported non-finite properties.
    #[error("the section returned non-finite properties at z = {z} m")]
    NonFiniteProps {
        /// Elevation queried (m).
        z: f64,
    },
}

/// Uniform-flow discharge Q = (1/n) A R^(2/3) S^(1/2) (m³/s, SI).
///
/// Errors for non-positive or non-finite `n`, and negative or non-finite
/// area, hydraulic radius or slope. A zero slope gives zero discharge.
pub fn manning_discharge(
    n: f64,
    area: f64,
    hydraulic_radius: f64,
    slope: f64,
) -> Result<f64, HydraulicsError> {
    positive("n", n)?;
    non_negative("area", area)?;
    non_negative("hydraulic_radius", hydraulic_radius)?;
    non_negative("slope", slope)?;
    Ok(area * (hydraulic_radius * hydraulic_radius).cbrt() * slope.sqrt() / n)
}

fn positive(field: &'static str, value: f64) -> Result<(), HydraulicsError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(HydraulicsError::NotPositive { field, value })
    }
}

fn non_negative(field: &'static str, value: f64) -> Result<(), HydraulicsError> {
    if value.is_finite() && value >= 0.0 {
        Ok(())
    } else {
        Err(HydraulicsError::Negative { field, value })
    }
}

/// Normal depth: the water-surface elevation (m) at which the section's
/// composite conveyance carries `q` in uniform flow on bed slope `slope`,
/// K(z) √S = Q.
///
/// `q = 0` returns the bed elevation. Errors for negative or non-finite `q`,
/// non-positive or non-finite `slope`, and for a section whose conveyance
/// never reaches Q/√S. Where conveyance is not monotone in z (possible in
/// compound sections) some root within the bracket is returned.
pub fn normal_depth(h: &impl Hydraulics, q: f64, slope: f64) -> Result<f64, HydraulicsError> {
    non_negative("q", q)?;
    positive("slope", slope)?;
    let target = q / slope.sqrt();
    solve_rising(h, q, |z| {
        let p = h.props(z);
        p.conveyance - target
    })
}

/// Critical depth: the water-surface elevation (m) where the Froude number of
/// discharge `q` is one, i.e. Q² T / (g A³) = 1 on the conveying area.
///
/// Solved as A √(g A / T) = Q, which rises from zero at the bed. `q = 0`
/// returns the bed elevation. A compound section may have more than one
/// critical depth; some root within the bracket is returned.
pub fn critical_depth(h: &impl Hydraulics, q: f64) -> Result<f64, HydraulicsError> {
    non_negative("q", q)?;
    solve_rising(h, q, |z| {
        let p = h.props(z);
        let section_factor = if p.flow_area > 0.0 && p.flow_top_width > 0.0 {
            p.flow_area * (GRAVITY * p.flow_area / p.flow_top_width).sqrt()
        } else {
            0.0
        };
        section_factor - q
    })
}

/// Froude number of discharge `q` at water-surface elevation `z`; zero when dry.
pub fn froude(h: &impl Hydraulics, z: f64, q: f64) -> Result<f64, HydraulicsError> {
    if !z.is_finite() {
        return Err(HydraulicsError::NonFinite {
            field: "z",
            value: z,
        });
    }
    if !q.is_finite() {
        return Err(HydraulicsError::NonFinite {
            field: "q",
            value: q,
        });
    }
    Ok(h.props(z).froude(q))
}

/// Number of depth doublings tried before giving up on a bracket: the last
/// trial is about 2^60 m above the bed.
const MAX_DOUBLINGS: usize = 60;
/// First trial depth above the bed (m).
const FIRST_DEPTH: f64 = 0.5;

/// Finds z with f(z) = 0 where f(bed) < 0 for q > 0 and f grows with z.
fn solve_rising(
    h: &impl Hydraulics,
    q: f64,
    f: impl Fn(f64) -> f64,
) -> Result<f64, HydraulicsError> {
    let bed = h.bed_elevation();
    if !bed.is_finite() {
        return Err(HydraulicsError::NonFiniteProps { z: bed });
    }
    if q == 0.0 {
        return Ok(bed);
    }
    let eval = |z: f64| {
        let v = f(z);
        if v.is_finite() {
            Ok(v)
        } else {
            Err(HydraulicsError::NonFiniteProps { z })
        }
    };
    let (mut lo, mut f_lo) = (bed, eval(bed)?);
    if f_lo >= 0.0 {
        // Only possible for a section that conveys at zero depth.
        return Ok(bed);
    }
    let mut depth = FIRST_DEPTH;
    for _ in 0..MAX_DOUBLINGS {
        let hi = bed + depth;
        let f_hi = eval(hi)?;
        if f_hi >= 0.0 {
            return brent(&eval, lo, hi, f_lo, f_hi);
        }
        lo = hi;
        f_lo = f_hi;
        depth *= 2.0;
    }
    Err(HydraulicsError::NoBracket { q, z_max: lo })
}

/// Brent's method on a bracket with f(a) < 0 ≤ f(b). Every iterate stays in
/// the bracket and each step shrinks it at least as fast as bisection every
/// other step, so the loop ends; the cap is only a backstop.
fn brent(
    f: &impl Fn(f64) -> Result<f64, HydraulicsError>,
    a0: f64,
    b0: f64,
    fa0: f64,
    fb0: f64,
) -> Result<f64, HydraulicsError> {
    let (mut a, mut b, mut fa, mut fb) = (a0, b0, fa0, fb0);
    if fb == 0.0 {
        return Ok(b);
    }
    let (mut c, mut fc) = (a, fa);
    let mut d = b - a;
    let mut e = d;
    for _ in 0..300 {
        if fb.signum() == fc.signum() {
            c = a;
            fc = fa;
            d = b - a;
            e = d;
        }
        if fc.abs() < fb.abs() {
            a = b;
            b = c;
            c = a;
            fa = fb;
            fb = fc;
            fc = fa;
        }
        let tol = 2.0 * f64::EPSILON * b.abs() + 1e-10;
        let m = 0.5 * (c - b);
        if m.abs() <= tol || fb == 0.0 {
            return Ok(b);
        }
        if e.abs() >= tol && fa.abs() > fb.abs() {
            // Try inverse quadratic interpolation or the secant step.
            let s = fb / fa;
            let (mut p, mut qq) = if a == c {
                (2.0 * m * s, 1.0 - s)
            } else {
                let qa = fa / fc;
                let r = fb / fc;
                (
                    s * (2.0 * m * qa * (qa - r) - (b - a) * (r - 1.0)),
                    (qa - 1.0) * (r - 1.0) * (s - 1.0),
                )
            };
            if p > 0.0 {
                qq = -qq;
            } else {
                p = -p;
            }
            if 2.0 * p < (3.0 * m * qq - (tol * qq).abs()).min((e * qq).abs()) {
                e = d;
                d = p / qq;
            } else {
                d = m;
                e = m;
            }
        } else {
            d = m;
            e = m;
        }
        a = b;
        fa = fb;
        b += if d.abs() > tol { d } else { tol.copysign(m) };
        fb = f(b)?;
    }
    Ok(b)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::props::Props;

    /// Closed-form rectangle of width `w` and roughness `n`, bed at 0.
    struct Rect {
        w: f64,
        n: f64,
    }

    impl Hydraulics for Rect {
        fn bed_elevation(&self) -> f64 {
            0.0
        }
        fn props(&self, z: f64) -> Props {
            let d = z.max(0.0);
            let a = self.w * d;
            let p = if d > 0.0 { self.w + 2.0 * d } else { 0.0 };
            let k = if d > 0.0 {
                a * (a / p).powf(2.0 / 3.0) / self.n
            } else {
                0.0
            };
            Props {
                z,
                flow_area: a,
                storage_area: a,
                flow_top_width: if d > 0.0 { self.w } else { 0.0 },
                storage_top_width: if d > 0.0 { self.w } else { 0.0 },
                wetted_perimeter: p,
                conveyance: k,
                dconveyance_dz: 0.0,
                extrapolated: false,
            }
        }
    }

    /// A section whose conveyance saturates and never carries much.
    struct Capped;

    impl Hydraulics for Capped {
        fn bed_elevation(&self) -> f64 {
            0.0
        }
        fn props(&self, z: f64) -> Props {
            Props {
                z,
                conveyance: z.clamp(0.0, 1.0),
                flow_area: z.clamp(0.0, 1.0),
                flow_top_width: 1.0,
                ..Props::default()
            }
        }
    }

    /// A section reporting NaN conveyance when wet.
    struct Broken;

    impl Hydraulics for Broken {
        fn bed_elevation(&self) -> f64 {
            0.0
        }
        fn props(&self, z: f64) -> Props {
            Props {
                z,
                conveyance: if z > 0.0 { f64::NAN } else { 0.0 },
                ..Props::default()
            }
        }
    }

    #[test]
    fn manning_discharge_formula() {
        // A = 10, R = 1, S = 0.0004, n = 0.02 → Q = 10 * 1 * 0.02 / 0.02 = 10.
        let q = manning_discharge(0.02, 10.0, 1.0, 0.0004).expect("valid");
        assert!((q - 10.0).abs() < 1e-12);
        // R^(2/3) with R = 8 is 4.
        let q = manning_discharge(0.04, 1.0, 8.0, 0.01).expect("valid");
        assert!((q - 10.0).abs() < 1e-12);
        assert_eq!(manning_discharge(0.03, 5.0, 1.0, 0.0), Ok(0.0));
    }

    #[test]
    fn manning_discharge_rejects_bad_input() {
        assert!(matches!(
            manning_discharge(0.0, 1.0, 1.0, 0.001),
            Err(HydraulicsError::NotPositive { field: "n", .. })
        ));
        assert!(matches!(
            manning_discharge(0.03, -1.0, 1.0, 0.001),
            Err(HydraulicsError::Negative { field: "area", .. })
        ));
        assert!(matches!(
            manning_discharge(0.03, 1.0, f64::NAN, 0.001),
            Err(HydraulicsError::Negative {
                field: "hydraulic_radius",
                ..
            })
        ));
        assert!(matches!(
            manning_discharge(0.03, 1.0, 1.0, -0.001),
            Err(HydraulicsError::Negative { field: "slope", .. })
        ));
    }

    #[test]
    fn normal_depth_satisfies_manning() {
        let r = Rect { w: 12.0, n: 0.035 };
        for q in [0.01, 1.0, 37.5, 900.0, 1e5] {
            let z = normal_depth(&r, q, 0.0008).expect("converges");
            let a = r.w * z;
            let radius = a / (r.w + 2.0 * z);
            let back = manning_discharge(r.n, a, radius, 0.0008).expect("valid");
            assert!((back - q).abs() <= 1e-8 * q, "q={q} back={back}");
        }
    }

    #[test]
    fn normal_depth_edge_cases() {
        let r = Rect { w: 5.0, n: 0.03 };
        assert_eq!(normal_depth(&r, 0.0, 0.001), Ok(0.0));
        assert!(matches!(
            normal_depth(&r, -1.0, 0.001),
            Err(HydraulicsError::Negative { field: "q", .. })
        ));
        assert!(matches!(
            normal_depth(&r, 1.0, 0.0),
            Err(HydraulicsError::NotPositive { field: "slope", .. })
        ));
        assert!(matches!(
            normal_depth(&r, f64::INFINITY, 0.001),
            Err(HydraulicsError::Negative { .. })
        ));
        assert!(matches!(
            normal_depth(&r, 1.0, f64::NAN),
            Err(HydraulicsError::NotPositive { .. })
        ));
        assert!(matches!(
            normal_depth(&Capped, 10.0, 0.01),
            Err(HydraulicsError::NoBracket { .. })
        ));
        assert!(matches!(
            normal_depth(&Broken, 1.0, 0.01),
            Err(HydraulicsError::NonFiniteProps { .. })
        ));
    }

    #[test]
    fn critical_depth_rectangle_and_froude_one() {
        let r = Rect { w: 4.0, n: 0.03 };
        let q = 10.0;
        let z = critical_depth(&r, q).expect("converges");
        let fr = froude(&r, z, q).expect("finite");
        assert!((fr - 1.0).abs() < 1e-8, "Fr = {fr}");
        // Deeper is subcritical, shallower supercritical.
        assert!(froude(&r, 1.1 * z, q).expect("finite") < 1.0);
        assert!(froude(&r, 0.9 * z, q).expect("finite") > 1.0);
        assert_eq!(critical_depth(&r, 0.0), Ok(0.0));
        assert!(critical_depth(&r, -2.0).is_err());
    }

    #[test]
    fn froude_rejects_non_finite_and_is_zero_when_dry() {
        let r = Rect { w: 4.0, n: 0.03 };
        assert!(froude(&r, f64::NAN, 1.0).is_err());
        assert!(froude(&r, 1.0, f64::INFINITY).is_err());
        assert_eq!(froude(&r, -1.0, 3.0), Ok(0.0));
    }

    #[test]
    fn brent_finds_root_of_awkward_function() {
        // A step-like function: bracketing methods must still land on the jump.
        let f = |x: f64| Ok(if x < 0.3 { -1.0 } else { 1.0 + x });
        let x = brent(&f, 0.0, 1.0, -1.0, 2.0).expect("ok");
        assert!((x - 0.3).abs() < 1e-9);
        let g = |x: f64| Ok(x * x * x - 2.0);
        let x = brent(&g, 0.0, 2.0, -2.0, 6.0).expect("ok");
        assert!((x - 2f64.cbrt()).abs() < 1e-9);
    }
}

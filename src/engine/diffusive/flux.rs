//! The discrete flow laws of the scheme: the discharge through a face
//! between two nodes and through the downstream boundary, each with its
//! derivatives for the Newton Jacobian (the module docs of
//! [`crate::engine::diffusive`] give the formulas and why they take this
//! form).

use super::problem::DownstreamBoundary;
use super::{DONOR_CAP, DRY_RAMP_DEPTH, MIN_DEPTH};
use crate::engine::props::Props;

/// Half-width of the blend into the cap, as a fraction of the cap.
const CAP_BLEND: f64 = 0.2;

/// Smooth ramp of the donor depth: 0 at `MIN_DEPTH`, 1 at `MIN_DEPTH +
/// DRY_RAMP_DEPTH`, C¹ (smoothstep). Returns `(φ, dφ/dh)`.
#[inline]
fn dry_ramp(depth: f64) -> (f64, f64) {
    // Multiplying by the reciprocal: a division costs as much as a dozen
    // multiplications, and this runs for every face of every iteration.
    const INV_RAMP: f64 = 1.0 / DRY_RAMP_DEPTH;
    let x = (depth - MIN_DEPTH) * INV_RAMP;
    if x <= 0.0 {
        (0.0, 0.0)
    } else if x >= 1.0 {
        (1.0, 0.0)
    } else {
        (x * x * (3.0 - 2.0 * x), 6.0 * x * (1.0 - x) * INV_RAMP)
    }
}

/// Face discharge from node `a` to node `b` (downstream) and its derivatives
/// with respect to `z_a` and `z_b`. See the module docs for the formula.
#[inline]
pub(super) fn face_flow(
    pa: &Props,
    pb: &Props,
    bed_a: f64,
    bed_b: f64,
    dx: f64,
    eps: f64,
) -> (f64, f64, f64) {
    face_flow_inv(pa, pb, bed_a, bed_b, 1.0 / dx, eps)
}

/// [`face_flow`] given the reciprocal of the node spacing, which the solver
/// keeps per face (the same `1.0 / dx`, so the steady start and the
/// unsteady steps see identical face laws).
///
/// Written for few divisions and square roots (they dominate the
/// arithmetic cost; see the flop count in the `engine` bench): one
/// reciprocal of (S² + ε²)^¼ gives both r = S (S² + ε²)^(−¼) and
/// 1 / ((S² + ε²) (S² + ε²)^¼) = ((S² + ε²)^(−¼))⁵.
#[inline(always)]
pub(crate) fn face_flow_inv(
    pa: &Props,
    pb: &Props,
    bed_a: f64,
    bed_b: f64,
    inv_dx: f64,
    eps: f64,
) -> (f64, f64, f64) {
    let s = (pa.z - pb.z) * inv_dx;
    let s2e = s * s + eps * eps;
    let quarter = s2e.sqrt().sqrt(); // (S² + ε²)^¼
    let iq = 1.0 / quarter;
    let iq2 = iq * iq;
    let r = s * iq;
    let dr = (0.5 * s * s + eps * eps) * (iq2 * iq2 * iq); // dr/dS
    let donor_is_a = s >= 0.0;
    let donor_bed = if donor_is_a { bed_a } else { bed_b };
    let donor_z = if donor_is_a { pa.z } else { pb.z };
    // Face conveyance: the mean of the two nodes, capped at DONOR_CAP times
    // the donor's (see the module docs). The donor conveyance is blended
    // smoothly across S = 0 (over |S| ~ 10 ε) and the cap is entered through
    // a C¹ quadratic blend over ±20 % of the cap, so Newton does not cycle
    // between branches in a pool; below 0.8 × cap the plain mean is used.
    let sc = 10.0 * eps;
    // σ: +1 when a is the donor, −1 when b is, a C¹ cubic in between.
    let (sigma, dsigma) = if s >= sc {
        (1.0, 0.0)
    } else if s <= -sc {
        (-1.0, 0.0)
    } else {
        let y = s / sc;
        (y * (1.5 - 0.5 * y * y), 1.5 * (1.0 - y * y) * inv_dx / sc)
    };
    let (ka, kb) = (pa.conveyance, pb.conveyance);
    let k_donor = 0.5 * (1.0 + sigma) * ka + 0.5 * (1.0 - sigma) * kb;
    let dkd_a = 0.5 * (1.0 + sigma) * pa.dconveyance_dz + 0.5 * (ka - kb) * dsigma;
    let dkd_b = 0.5 * (1.0 - sigma) * pb.dconveyance_dz - 0.5 * (ka - kb) * dsigma;
    let mean = 0.5 * (ka + kb);
    let cap = DONOR_CAP * k_donor;
    let u = mean - (1.0 - CAP_BLEND) * cap; // distance into the blend band
    let (kf, dk_dmean, dk_dcap) = if u <= 0.0 {
        (mean, 1.0, 0.0)
    } else if u >= 2.0 * CAP_BLEND * cap {
        (cap, 0.0, 1.0)
    } else {
        let w = 4.0 * CAP_BLEND * cap;
        (
            mean - u * u / w,
            1.0 - 2.0 * u / w,
            2.0 * u * (1.0 - CAP_BLEND) / w + u * u / (w * cap),
        )
    };
    let dkfa = 0.5 * dk_dmean * pa.dconveyance_dz + dk_dcap * DONOR_CAP * dkd_a;
    let dkfb = 0.5 * dk_dmean * pb.dconveyance_dz + dk_dcap * DONOR_CAP * dkd_b;
    let (phi, dphi) = dry_ramp(donor_z - donor_bed);
    let q = phi * kf * r;
    let kf_dr = kf * dr * inv_dx;
    let mut dqa = phi * (dkfa * r + kf_dr);
    let mut dqb = phi * (dkfb * r - kf_dr);
    if donor_is_a {
        dqa += dphi * kf * r;
    } else {
        dqb += dphi * kf * r;
    }
    (q, dqa, dqb)
}

/// Rating discharge and its derivative at stage `z` (table validated).
fn rating_flow(table: &[(f64, f64)], z: f64) -> (f64, f64) {
    let n = table.len();
    if z <= table[0].0 {
        return (table[0].1, 0.0);
    }
    // Segment index: last i with table[i].0 <= z, capped to the last segment.
    let hi = table.partition_point(|&(zi, _)| zi <= z).min(n - 1);
    let (z0, q0) = table[hi - 1];
    let (z1, q1) = table[hi];
    let slope = (q1 - q0) / (z1 - z0);
    (q0 + slope * (z - z0), slope)
}

/// Outflow through a discharge-type downstream boundary and its derivative.
/// Zero for stage boundaries (their outflow comes from continuity).
pub(crate) fn boundary_outflow(b: &DownstreamBoundary, p: &Props, bed: f64) -> (f64, f64) {
    let (phi, dphi) = dry_ramp(p.z - bed);
    match b {
        DownstreamBoundary::NormalDepth { friction_slope } => {
            let rs = friction_slope.sqrt();
            (
                phi * p.conveyance * rs,
                (phi * p.dconveyance_dz + dphi * p.conveyance) * rs,
            )
        }
        DownstreamBoundary::Rating { table } => {
            let (q, dq) = rating_flow(table, p.z);
            (phi * q, phi * dq + dphi * q)
        }
        _ => (0.0, 0.0),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::props::Hydraulics;
    use crate::engine::test_sections::Rect;

    #[test]
    fn face_flow_derivatives_match_finite_differences() {
        let s = Rect::new(0.0, 20.0, 0.03, 9.0);
        let s2 = Rect::new(-0.1, 35.0, 0.04, 9.0);
        // A much deeper neighbour: exercises the donor cap and its blend.
        let deep = Rect::new(-3.0, 35.0, 0.04, 9.0);
        let cases = [
            (&s2, 2.0, 1.9),
            (&s2, 1.5, 1.5 + 1e-9),
            (&s2, 1.0, 1.3),
            (&s2, 0.004, 0.5),
            (&s2, 2.0, 1.999_99),
            (&deep, 0.3, 0.25),
            (&deep, 0.8, 0.2),
            (&deep, 1.5, 0.2),
            (&deep, 2.2, 0.2),
            (&deep, 0.1, 0.5),
            (&deep, 0.3, 0.3),
            (&deep, 0.3, 0.3 - 1e-5),
            (&deep, 0.3, 0.3 + 1e-5),
        ];
        for (other, za, zb) in cases {
            let f = |za: f64, zb: f64| {
                face_flow(&s.props(za), &other.props(zb), 0.0, other.bed, 150.0, 1e-7).0
            };
            let (_, da, db) =
                face_flow(&s.props(za), &other.props(zb), 0.0, other.bed, 150.0, 1e-7);
            let h = 1e-7;
            let fa = (f(za + h, zb) - f(za - h, zb)) / (2.0 * h);
            let fb = (f(za, zb + h) - f(za, zb - h)) / (2.0 * h);
            assert!(
                (fa - da).abs() <= 1e-4 * (1.0 + da.abs()),
                "dq/dza {fa} vs {da} at {za},{zb}"
            );
            assert!(
                (fb - db).abs() <= 1e-4 * (1.0 + db.abs()),
                "dq/dzb {fb} vs {db} at {za},{zb}"
            );
        }
    }

    #[test]
    fn donor_cap_limits_flow_out_of_a_thin_node() {
        // A 5 cm deep node above a 3 m deep one: the face may carry at most
        // DONOR_CAP times the thin node's own conveyance.
        let thin = Rect::new(0.0, 20.0, 0.03, 9.0);
        let deep = Rect::new(-3.0, 20.0, 0.03, 9.0);
        let (pa, pb) = (thin.props(0.05), deep.props(0.0));
        let (q, _, _) = face_flow(&pa, &pb, 0.0, -3.0, 100.0, 1e-7);
        let limit = DONOR_CAP * pa.conveyance * (0.05_f64 / 100.0).sqrt();
        assert!(q <= limit * (1.0 + 1e-9), "{q} vs {limit}");
        assert!(q < 0.1 * 0.5 * (pa.conveyance + pb.conveyance) * (0.05_f64 / 100.0).sqrt());
    }

    #[test]
    fn regularised_face_flow_matches_manning_away_from_zero_slope() {
        // Common practice: Q = K √S for S ≫ ε.
        let s = Rect::new(0.0, 20.0, 0.03, 9.0);
        let (za, zb, dx) = (2.0, 1.9, 100.0);
        let (q, _, _) = face_flow(&s.props(za), &s.props(zb), 0.0, 0.0, dx, 1e-7);
        let kf = 0.5 * (s.props(za).conveyance + s.props(zb).conveyance);
        let manning = kf * (0.1_f64 / dx).sqrt();
        assert!((q / manning - 1.0).abs() < 1e-6);
        // Reversed slope gives reversed flow.
        let (qr, _, _) = face_flow(&s.props(zb), &s.props(za), 0.0, 0.0, dx, 1e-7);
        assert!((qr + q).abs() < 1e-9 * q);
    }

    #[test]
    fn rating_interpolates_and_extends() {
        let t = [(1.0, 0.0), (2.0, 10.0), (4.0, 50.0)];
        assert_eq!(rating_flow(&t, 0.0), (0.0, 0.0));
        assert_eq!(rating_flow(&t, 1.5), (5.0, 10.0));
        assert_eq!(rating_flow(&t, 3.0), (30.0, 20.0));
        assert_eq!(rating_flow(&t, 5.0), (70.0, 20.0));
    }
}

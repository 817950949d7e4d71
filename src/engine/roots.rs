//! Root finding for monotone functions, shared by the steady initial
//! profile of the diffusive wave and the normal depths of Muskingum–Cunge.

/// Find `z ≥ lo` with `f(z) = target` for a non-decreasing `f` with
/// `f(lo) ≤ target`, by bracket expansion and bisection to 1e-9 m.
/// `None` when no bracket is found or `f` is not finite.
pub(crate) fn solve_increasing(mut f: impl FnMut(f64) -> f64, lo: f64, target: f64) -> Option<f64> {
    let f_lo = f(lo);
    if !f_lo.is_finite() {
        return None;
    }
    if f_lo >= target {
        return Some(lo);
    }
    let mut a = lo;
    let mut step = 0.5;
    let mut b = lo + step;
    let mut found = false;
    for _ in 0..60 {
        let fb = f(b);
        if !fb.is_finite() {
            return None;
        }
        if fb >= target {
            found = true;
            break;
        }
        a = b;
        step *= 2.0;
        b = lo + step;
    }
    if !found {
        return None;
    }
    for _ in 0..200 {
        if b - a <= 1e-9 {
            break;
        }
        let m = 0.5 * (a + b);
        let fm = f(m);
        if !fm.is_finite() {
            return None;
        }
        if fm >= target {
            b = m;
        } else {
            a = m;
        }
    }
    Some(0.5 * (a + b))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_the_cube_root_and_keeps_the_lower_end() {
        // x³ = 10 has the root 10^(1/3) = 2.154 434 690 031 884 (arithmetic).
        let x = solve_increasing(|x| x * x * x, 0.0, 10.0).expect("bracketed");
        assert!((x - 2.154_434_690_031_884).abs() < 1e-8, "{x}");
        // Already at the target at the lower end.
        assert_eq!(solve_increasing(|x| x, 3.0, 1.0), Some(3.0));
        // Never reaches the target, or stops being finite.
        assert_eq!(solve_increasing(|_| 0.0, 0.0, 1.0), None);
        assert_eq!(solve_increasing(|x| 1.0 / (2.0 - x), 0.0, 5.0), None);
    }
}

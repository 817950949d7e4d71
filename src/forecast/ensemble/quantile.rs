//! Sample quantiles by Hyndman and Fan's (1996) definition 7: linear
//! interpolation between order statistics at h = (n − 1)p. It is the
//! default of R's `quantile` and of NumPy's `percentile` (from memory), so
//! a reader can reproduce every band from the members with either.

/// The `p`-quantile (0 ≤ p ≤ 1) of `sorted` (ascending, not empty, no
/// NaN). Always between the smallest and the largest value.
pub fn quantile_sorted(sorted: &[f64], p: f64) -> f64 {
    let n = sorted.len();
    let h = (n - 1) as f64 * p.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    let w = h - lo as f64;
    // Written so that equal neighbours give that value exactly.
    sorted[lo] + w * (sorted[hi] - sorted[lo])
}

/// Sorts `values` in place (NaN last) and returns the quantiles at each
/// of `probs`; `None` when no finite value is left.
pub fn quantiles(values: &mut [f64], probs: &[f64]) -> Option<Vec<f64>> {
    values.sort_unstable_by(f64::total_cmp);
    let finite = values.iter().take_while(|v| v.is_finite()).count();
    let v = &values[..finite];
    (!v.is_empty()).then(|| probs.iter().map(|&p| quantile_sorted(v, p)).collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Hyndman and Fan (1996), definition 7, worked by hand on 1, 2, 3, 4:
    /// h = 3p, so p = 0.1 → 1.3, p = 0.5 → 2.5, p = 0.9 → 3.7.
    #[test]
    fn definition_seven_by_hand() {
        let x = [1.0, 2.0, 3.0, 4.0];
        for (p, want) in [(0.0, 1.0), (0.1, 1.3), (0.5, 2.5), (0.9, 3.7), (1.0, 4.0)] {
            assert!((quantile_sorted(&x, p) - want).abs() < 1e-12, "p = {p}");
        }
        // With an odd count the median is the middle value.
        assert_eq!(quantile_sorted(&[1.0, 5.0, 9.0], 0.5), 5.0);
        assert_eq!(quantile_sorted(&[7.0], 0.9), 7.0);
    }

    #[test]
    fn quantiles_sort_and_drop_non_finite_values() {
        let mut v = [4.0, f64::NAN, 1.0, 3.0, 2.0];
        assert_eq!(quantiles(&mut v, &[0.5]), Some(vec![2.5]));
        assert_eq!(quantiles(&mut [f64::NAN], &[0.5]), None);
    }

    /// A quantile lies between the sample's extremes and never decreases
    /// with p (properties of any quantile definition).
    #[test]
    fn quantiles_are_bounded_and_monotone() {
        let mut rng = super::super::rng::SplitMix64::new(9);
        for n in 1..30 {
            let mut v: Vec<f64> = (0..n).map(|_| rng.next_unit() * 10.0 - 3.0).collect();
            let ps: Vec<f64> = (0..=20).map(|k| f64::from(k) / 20.0).collect();
            let q = quantiles(&mut v, &ps).unwrap();
            assert!(q.windows(2).all(|w| w[0] <= w[1]));
            assert!(q.iter().all(|&x| x >= v[0] && x <= v[n - 1]));
        }
    }
}

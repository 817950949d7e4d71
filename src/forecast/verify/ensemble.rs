//! Scores of an ensemble against one observation.

/// Continuous ranked probability score of the ensemble `members` (its
/// empirical distribution) for the observation `y`, in the units of the
/// values (m): `(1/m) Σ|xᵢ − y| − (1/2m²) ΣΣ|xᵢ − xⱼ|`, which equals
/// `∫ (F(x) − H(x − y))² dx` for the empirical CDF F (Hersbach 2000;
/// Gneiting and Raftery 2007). One member: the absolute error. `None`
/// without members.
pub fn crps(members: &[f64], y: f64) -> Option<f64> {
    let m = members.len();
    if m == 0 {
        return None;
    }
    let mut x = members.to_vec();
    x.sort_by(f64::total_cmp);
    let spread_to_obs: f64 = x.iter().map(|v| (v - y).abs()).sum::<f64>() / m as f64;
    // ΣΣ|xᵢ − xⱼ| over sorted values: Σᵢ (2i − m + 1) xᵢ, twice (both
    // orders), in O(m) after the sort.
    let pairwise: f64 = x
        .iter()
        .enumerate()
        .map(|(i, v)| (2.0 * i as f64 - m as f64 + 1.0) * v)
        .sum::<f64>()
        * 2.0;
    Some(spread_to_obs - pairwise / (2.0 * (m * m) as f64))
}

/// The rank of `y` among `members`: how many members lie below it (0 to
/// m), the bin of a rank histogram (Talagrand; Hamill 2001). Ties with a
/// member count half, rounded down, so that a value equal to every member
/// sits in the middle.
pub fn rank(members: &[f64], y: f64) -> usize {
    let below = members.iter().filter(|&&v| v < y).count();
    let equal = members.iter().filter(|&&v| v == y).count();
    below + equal / 2
}

/// CRPS estimated from quantiles: twice the mean quantile score of the
/// values `q` at the levels `tau` (fractions in (0, 1)), for the
/// observation `y`. The CRPS is twice the integral of the quantile score
/// over all levels (Laio and Tamea 2007; Gneiting and Raftery 2007; from
/// memory); a run stores only a few percentiles of its members, so the
/// integral is replaced by the mean over them. For levels symmetric about
/// one half and equal values (a point forecast) it is the absolute error,
/// as the CRPS is. `None` without levels.
pub fn crps_of_quantiles(tau: &[f64], q: &[f64], y: f64) -> Option<f64> {
    let k = tau.len().min(q.len());
    if k == 0 {
        return None;
    }
    let qs: f64 = tau
        .iter()
        .zip(q)
        .map(|(&t, &v)| {
            let below = if y < v { 1.0 } else { 0.0 };
            (below - t) * (v - y)
        })
        .sum();
    Some(2.0 * qs / k as f64)
}

/// The bin of `y` among quantile values `q` (increasing): how many lie
/// below it, 0 to k. For a reliable forecast the share of observations in
/// bin i is `tau[i] − tau[i − 1]` (with 0 and 1 at the ends): the
/// histogram of the probability integral transform on the stored levels
/// (common practice, the quantile form of a rank histogram).
pub fn quantile_bin(q: &[f64], y: f64) -> usize {
    q.iter().filter(|&&v| v < y).count()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A one-member ensemble's CRPS is its absolute error (Hersbach
    /// 2000); for members {1, 3} and observation 2 the integral is
    /// ∫₁² 0.5² + ∫₂³ 0.5² = 0.5, computed by hand.
    #[test]
    fn crps_of_one_member_and_of_two() {
        assert_eq!(crps(&[2.5], 1.0), Some(1.5));
        assert!((crps(&[1.0, 3.0], 2.0).unwrap() - 0.5).abs() < 1e-15);
        assert!((crps(&[3.0, 1.0], 2.0).unwrap() - 0.5).abs() < 1e-15);
        assert_eq!(crps(&[], 1.0), None);
    }

    /// The closed form agrees with the integral of (F − H)², summed
    /// numerically on a fine grid, for an uneven five-member ensemble.
    #[test]
    fn crps_matches_the_integral_of_the_squared_cdf_difference() {
        let members = [0.3, 1.7, 1.7, 2.2, 4.0];
        let y = 1.9;
        let cdf = |x: f64| members.iter().filter(|&&v| v <= x).count() as f64 / 5.0;
        let (lo, hi, n) = (-1.0, 5.0, 600_000);
        let h = (hi - lo) / f64::from(n);
        let integral: f64 = (0..n)
            .map(|k| {
                let x = lo + (f64::from(k) + 0.5) * h;
                let step = if x >= y { 1.0 } else { 0.0 };
                (cdf(x) - step).powi(2) * h
            })
            .sum();
        assert!((crps(&members, y).unwrap() - integral).abs() < 1e-4);
    }

    #[test]
    fn ranks_count_the_members_below() {
        let m = [1.0, 2.0, 3.0];
        assert_eq!(rank(&m, 0.5), 0);
        assert_eq!(rank(&m, 2.5), 2);
        assert_eq!(rank(&m, 9.0), 3);
        assert_eq!(rank(&[2.0, 2.0], 2.0), 1);
    }

    /// A point forecast (every quantile equal) on levels symmetric about
    /// one half scores its absolute error, as the CRPS of one member does
    /// (Hersbach 2000).
    #[test]
    fn quantile_crps_of_a_point_forecast_is_the_absolute_error() {
        let tau = [0.1, 0.5, 0.9];
        for (x, y) in [(2.5, 1.0), (1.0, 2.5), (3.0, 3.0)] {
            let got = crps_of_quantiles(&tau, &[x; 3], y).unwrap();
            assert!((got - crps(&[x], y).unwrap()).abs() < 1e-12, "{x} {y}");
        }
        assert_eq!(crps_of_quantiles(&[], &[], 1.0), None);
    }

    /// With the 99 percentiles of a large ensemble, the quantile estimate
    /// approaches the ensemble's own CRPS (closed form above, itself
    /// checked against the integral): within 3 % for 2,001 members spread
    /// evenly on [0, 4] and observations inside and outside the spread.
    #[test]
    fn quantile_crps_approaches_the_ensemble_crps_with_many_levels() {
        let members: Vec<f64> = (0..=2000).map(|i| f64::from(i) * 0.002).collect();
        let tau: Vec<f64> = (1..100).map(|p| f64::from(p) / 100.0).collect();
        let q: Vec<f64> = tau.iter().map(|t| 4.0 * t).collect();
        for y in [0.7, 2.0, 5.0] {
            let exact = crps(&members, y).unwrap();
            let est = crps_of_quantiles(&tau, &q, y).unwrap();
            assert!((est - exact).abs() < 0.03 * exact, "{y}: {est} vs {exact}");
        }
    }

    #[test]
    fn quantile_bins_count_the_values_below() {
        let q = [1.0, 2.0, 3.0];
        assert_eq!(quantile_bin(&q, 0.0), 0);
        assert_eq!(quantile_bin(&q, 2.5), 2);
        assert_eq!(quantile_bin(&q, 4.0), 3);
    }
}

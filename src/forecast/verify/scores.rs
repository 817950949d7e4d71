//! Continuous scores of forecast–observation pairs. Each takes the pairs
//! as `(forecast, observed)`; `None` when the score is undefined for them
//! (no pairs, or a denominator of zero).

/// Mean of `forecast − observed` (m): positive means forecasts too high.
pub fn bias(pairs: &[(f64, f64)]) -> Option<f64> {
    mean(pairs.iter().map(|(f, o)| f - o), pairs.len())
}

/// Mean absolute error (m).
pub fn mae(pairs: &[(f64, f64)]) -> Option<f64> {
    mean(pairs.iter().map(|(f, o)| (f - o).abs()), pairs.len())
}

/// Root mean square error (m).
pub fn rmse(pairs: &[(f64, f64)]) -> Option<f64> {
    mean(pairs.iter().map(|(f, o)| (f - o).powi(2)), pairs.len()).map(f64::sqrt)
}

/// Nash–Sutcliffe efficiency (Nash and Sutcliffe 1970):
/// `1 − Σ(f − o)² / Σ(o − ō)²`; 1 is perfect, 0 no better than the
/// observed mean.
pub fn nse(pairs: &[(f64, f64)]) -> Option<f64> {
    let o_mean = mean(pairs.iter().map(|p| p.1), pairs.len())?;
    let err: f64 = pairs.iter().map(|(f, o)| (f - o).powi(2)).sum();
    let var: f64 = pairs.iter().map(|(_, o)| (o - o_mean).powi(2)).sum();
    (var > 0.0).then(|| 1.0 - err / var)
}

/// Kling–Gupta efficiency (Gupta, Kling, Yilmaz and Martinez 2009):
/// `1 − √((r − 1)² + (α − 1)² + (β − 1)²)` with `r` the linear
/// correlation, `α = σ_f / σ_o` and `β = μ_f / μ_o`. Stage has an
/// arbitrary datum, so `β` depends on it; it is reported as defined.
pub fn kge(pairs: &[(f64, f64)]) -> Option<f64> {
    let n = pairs.len();
    let mf = mean(pairs.iter().map(|p| p.0), n)?;
    let mo = mean(pairs.iter().map(|p| p.1), n)?;
    let sf = (pairs.iter().map(|p| (p.0 - mf).powi(2)).sum::<f64>() / n as f64).sqrt();
    let so = (pairs.iter().map(|p| (p.1 - mo).powi(2)).sum::<f64>() / n as f64).sqrt();
    if sf == 0.0 || so == 0.0 || mo == 0.0 {
        return None;
    }
    let cov = pairs.iter().map(|p| (p.0 - mf) * (p.1 - mo)).sum::<f64>() / n as f64;
    let r = cov / (sf * so);
    let (alpha, beta) = (sf / so, mf / mo);
    Some(1.0 - ((r - 1.0).powi(2) + (alpha - 1.0).powi(2) + (beta - 1.0).powi(2)).sqrt())
}

/// Skill of an error score against a reference's (e.g. RMSE against
/// persistence's): `1 − score / reference`; 1 is perfect, 0 no better
/// than the reference, negative worse (common practice).
pub fn skill(score: f64, reference: f64) -> Option<f64> {
    (reference > 0.0).then(|| 1.0 - score / reference)
}

fn mean(values: impl Iterator<Item = f64>, n: usize) -> Option<f64> {
    (n > 0).then(|| values.sum::<f64>() / n as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Hand-computed on four pairs: errors +1, −1, +2, 0.
    /// bias = 2/4 = 0.5; MAE = 4/4 = 1; RMSE = √(6/4) = 1.2247…;
    /// observed 1, 3, 2, 4 (mean 2.5, Σ(o − ō)² = 5): NSE = 1 − 6/5 = −0.2.
    #[test]
    fn errors_on_a_small_series_match_the_hand_computed_values() {
        let p = [(2.0, 1.0), (2.0, 3.0), (4.0, 2.0), (4.0, 4.0)];
        assert_eq!(bias(&p), Some(0.5));
        assert_eq!(mae(&p), Some(1.0));
        assert!((rmse(&p).unwrap() - 1.5f64.sqrt()).abs() < 1e-15);
        assert!((nse(&p).unwrap() + 0.2).abs() < 1e-15);
        assert_eq!(bias(&[]), None);
        assert_eq!(
            nse(&[(1.0, 2.0), (3.0, 2.0)]),
            None,
            "constant observations"
        );
    }

    /// KGE: a perfect forecast scores 1; a forecast that is the observed
    /// series doubled has r = 1, α = 2, β = 2, so KGE = 1 − √2 (Gupta et
    /// al. 2009, the definition); a shifted one has r = 1, α = 1,
    /// β = (μ + 1)/μ.
    #[test]
    fn kge_of_perfect_scaled_and_shifted_forecasts() {
        let o = [1.0, 2.0, 3.0, 4.0];
        let same: Vec<_> = o.iter().map(|&v| (v, v)).collect();
        assert!((kge(&same).unwrap() - 1.0).abs() < 1e-15);
        let doubled: Vec<_> = o.iter().map(|&v| (2.0 * v, v)).collect();
        assert!((kge(&doubled).unwrap() - (1.0 - 2f64.sqrt())).abs() < 1e-12);
        let shifted: Vec<_> = o.iter().map(|&v| (v + 1.0, v)).collect();
        let beta = 3.5 / 2.5;
        assert!((kge(&shifted).unwrap() - (1.0 - (beta - 1.0f64).abs())).abs() < 1e-12);
    }

    #[test]
    fn skill_against_a_reference() {
        assert_eq!(skill(0.5, 1.0), Some(0.5));
        assert_eq!(skill(2.0, 1.0), Some(-1.0));
        assert_eq!(skill(0.0, 0.0), None);
    }
}

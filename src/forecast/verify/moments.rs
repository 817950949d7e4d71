//! The running statistics of forecast–observation pairs from which every
//! continuous score follows, kept so that they can be added to pair by
//! pair and merged: verification is stored as these, per point, issue day
//! and lead hour, and never recomputed from the history.
//!
//! Means and centred sums of squares and products are updated with the
//! pairwise formulas of Chan, Golub and LeVeque (1979, "Updating formulae
//! and a pairwise algorithm for computing sample variances"; from memory),
//! which stay accurate for stages of a hundred metres varying by
//! centimetres, where raw sums of squares would cancel.

use serde::{Deserialize, Serialize};

/// Running statistics of pairs `(forecast f, observed o)`.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct Moments {
    pub n: u64,
    pub mean_f: f64,
    pub mean_o: f64,
    /// Σ(f − f̄)².
    pub m2_f: f64,
    /// Σ(o − ō)².
    pub m2_o: f64,
    /// Σ(f − f̄)(o − ō).
    pub c_fo: f64,
    /// Σ|f − o|.
    pub sum_abs: f64,
}

impl Moments {
    /// Adds one pair.
    pub fn add(&mut self, f: f64, o: f64) {
        self.merge(&Moments {
            n: 1,
            mean_f: f,
            mean_o: o,
            sum_abs: (f - o).abs(),
            ..Moments::default()
        });
    }

    /// Adds every pair of `other` (Chan et al. 1979).
    pub fn merge(&mut self, other: &Moments) {
        if other.n == 0 {
            return;
        }
        if self.n == 0 {
            *self = *other;
            return;
        }
        let (na, nb) = (self.n as f64, other.n as f64);
        let n = na + nb;
        let (df, d_o) = (other.mean_f - self.mean_f, other.mean_o - self.mean_o);
        let w = na * nb / n;
        self.m2_f += other.m2_f + df * df * w;
        self.m2_o += other.m2_o + d_o * d_o * w;
        self.c_fo += other.c_fo + df * d_o * w;
        self.mean_f += df * nb / n;
        self.mean_o += d_o * nb / n;
        self.sum_abs += other.sum_abs;
        self.n += other.n;
    }

    /// Mean of `f − o` (m).
    pub fn bias(&self) -> Option<f64> {
        (self.n > 0).then_some(self.mean_f - self.mean_o)
    }

    /// Mean absolute error (m).
    pub fn mae(&self) -> Option<f64> {
        (self.n > 0).then(|| self.sum_abs / self.n as f64)
    }

    /// Σ(f − o)² = Σ((f − f̄) − (o − ō) + (f̄ − ō))².
    fn sse(&self) -> f64 {
        let b = self.mean_f - self.mean_o;
        (self.m2_f + self.m2_o - 2.0 * self.c_fo + self.n as f64 * b * b).max(0.0)
    }

    /// Root mean square error (m).
    pub fn rmse(&self) -> Option<f64> {
        (self.n > 0).then(|| (self.sse() / self.n as f64).sqrt())
    }

    /// Nash–Sutcliffe efficiency, as [`super::scores::nse`].
    pub fn nse(&self) -> Option<f64> {
        (self.n > 0 && self.m2_o > 0.0).then(|| 1.0 - self.sse() / self.m2_o)
    }

    /// Kling–Gupta efficiency, as [`super::scores::kge`].
    pub fn kge(&self) -> Option<f64> {
        if self.n == 0 || self.m2_f <= 0.0 || self.m2_o <= 0.0 || self.mean_o == 0.0 {
            return None;
        }
        let r = self.c_fo / (self.m2_f * self.m2_o).sqrt();
        let alpha = (self.m2_f / self.m2_o).sqrt();
        let beta = self.mean_f / self.mean_o;
        Some(1.0 - ((r - 1.0).powi(2) + (alpha - 1.0).powi(2) + (beta - 1.0).powi(2)).sqrt())
    }
}

#[cfg(test)]
mod tests {
    use super::super::scores;
    use super::*;

    fn of(pairs: &[(f64, f64)]) -> Moments {
        let mut m = Moments::default();
        pairs.iter().for_each(|&(f, o)| m.add(f, o));
        m
    }

    /// The same hand-computed four pairs as the direct scores (errors +1,
    /// −1, +2, 0: bias 0.5, MAE 1, RMSE √1.5, NSE −0.2).
    #[test]
    fn running_scores_match_the_hand_computed_values() {
        let m = of(&[(2.0, 1.0), (2.0, 3.0), (4.0, 2.0), (4.0, 4.0)]);
        assert!((m.bias().unwrap() - 0.5).abs() < 1e-15);
        assert!((m.mae().unwrap() - 1.0).abs() < 1e-15);
        assert!((m.rmse().unwrap() - 1.5f64.sqrt()).abs() < 1e-15);
        assert!((m.nse().unwrap() + 0.2).abs() < 1e-15);
        assert_eq!(Moments::default().rmse(), None);
    }

    /// Stages near 100 m varying by millimetres: merging in any grouping
    /// gives the direct two-pass scores (the reference is the textbook
    /// two-pass formula in `scores`), where one-pass raw sums of squares
    /// would lose most digits.
    #[test]
    fn merged_groups_equal_the_two_pass_scores_on_stages_near_a_hundred_metres() {
        let pairs: Vec<(f64, f64)> = (0..500)
            .map(|i| {
                let x = f64::from(i);
                let o = 100.0 + 0.003 * (x * 0.37).sin();
                (o + 0.001 * (x * 1.3).cos() + 0.0004, o)
            })
            .collect();
        let mut merged = Moments::default();
        for chunk in pairs.chunks(37) {
            merged.merge(&of(chunk));
        }
        let all = of(&pairs);
        for m in [merged, all] {
            assert_eq!(m.n, 500);
            let close = |a: Option<f64>, b: Option<f64>, tol: f64| {
                let (a, b) = (a.unwrap(), b.unwrap());
                assert!((a - b).abs() <= tol * b.abs().max(1e-3), "{a} vs {b}");
            };
            close(m.bias(), scores::bias(&pairs), 1e-9);
            close(m.mae(), scores::mae(&pairs), 1e-12);
            close(m.rmse(), scores::rmse(&pairs), 1e-9);
            close(m.nse(), scores::nse(&pairs), 1e-9);
            close(m.kge(), scores::kge(&pairs), 1e-9);
        }
    }

    #[test]
    fn merging_nothing_changes_nothing() {
        let mut m = of(&[(1.0, 2.0)]);
        let before = m;
        m.merge(&Moments::default());
        assert_eq!(m, before);
        let mut empty = Moments::default();
        empty.merge(&before);
        assert_eq!(empty, before);
    }
}

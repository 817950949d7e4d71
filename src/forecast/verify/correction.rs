//! Error correction at a gauged point: the model's error at the issue
//! time, seen by the gauge, is carried forward and decays with lead time,
//! `corrected(L) = model(L) + e₀ · φ^L` (L in hours), the first-order
//! autoregressive updating of a simulation's error that operational
//! services commonly apply where a gauge sees the river (e.g. Lettenmaier
//! and Wood 1993, "Hydrologic forecasting", Handbook of Hydrology, ch. 26;
//! from memory).
//!
//! φ is fitted from the verification history: per lead hour h the
//! history keeps Σe₀e_h, Σe₀² and Σe_h² over the pairs (e = observed −
//! model), so the squared error the correction would have left,
//! Σ_h [Σe_h² − 2φ^(h+½) Σe₀e_h + φ^(2h+1) Σe₀²], is known for every φ
//! without revisiting a pair; φ is the one in [0, 1] that makes it least.
//! The correction is used only while, on that history, it beats both the
//! raw model and persistence by a margin; otherwise it switches itself off
//! and says why.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::tally::HourTally;
use crate::forecast::calibrate::optimise::golden_section;

/// The sums one lead hour keeps for the fit.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct CorrectionSums {
    pub n: u64,
    /// Σ e₀ · e (m²), e = observed − model at the lead, e₀ at issue.
    pub s_e0e: f64,
    /// Σ e₀² (m²).
    pub s_e0e0: f64,
    /// Σ e² (m²).
    pub s_ee: f64,
    /// Σ (observed − persistence)² on the same pairs (m²).
    pub s_pp: f64,
}

impl CorrectionSums {
    /// Adds one pair.
    pub fn add(&mut self, e0: f64, e: f64, persistence_error: f64) {
        self.n += 1;
        self.s_e0e += e0 * e;
        self.s_e0e0 += e0 * e0;
        self.s_ee += e * e;
        self.s_pp += persistence_error * persistence_error;
    }

    pub fn merge(&mut self, o: &CorrectionSums) {
        self.n += o.n;
        self.s_e0e += o.s_e0e;
        self.s_e0e0 += o.s_e0e0;
        self.s_ee += o.s_ee;
        self.s_pp += o.s_pp;
    }
}

/// The decay fitted from a point's history and what it would have done.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Fit {
    /// φ: the share of the error left after one hour.
    pub decay_per_hour: f64,
    pub pairs: u64,
    pub runs: u64,
    /// RMSE over the history (m): raw model, corrected with φ, persistence.
    pub rmse_model: f64,
    pub rmse_corrected: f64,
    pub rmse_persistence: f64,
}

/// Whether the correction is used at a point, and why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Correction {
    pub on: bool,
    pub reason: String,
    /// The fit, when there was history to fit.
    pub fit: Option<Fit>,
    /// The error at the issue time (observed − model, m), when the gauge
    /// had a reading.
    pub initial_error_m: Option<f64>,
}

impl Correction {
    /// The decay the run's corrected series uses (scored even while off,
    /// so the history shows when it would help again).
    pub fn decay(&self) -> Option<f64> {
        self.fit.map(|f| f.decay_per_hour)
    }
}

/// How much history and gain the switch asks for.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rules {
    pub min_runs: u64,
    pub min_pairs: u64,
    /// The corrected RMSE must be below both others by this fraction.
    pub min_gain: f64,
}

/// Fits φ on the lead hours of one point's history.
pub fn fit(hours: &BTreeMap<u32, HourTally>) -> Option<Fit> {
    let sums: Vec<(f64, CorrectionSums)> = hours
        .iter()
        .filter(|(_, t)| t.correction.n > 0)
        .map(|(h, t)| (f64::from(*h) + 0.5, t.correction))
        .collect();
    let n: u64 = sums.iter().map(|(_, s)| s.n).sum();
    if n == 0 {
        return None;
    }
    let sse = |phi: f64| -> f64 {
        sums.iter()
            .map(|(l, s)| {
                let k = phi.powf(*l);
                s.s_ee - 2.0 * k * s.s_e0e + k * k * s.s_e0e0
            })
            .sum::<f64>()
            .max(0.0)
    };
    // The least on a grid of 0.001, then golden-section inside the best
    // cell: the curve need not be unimodal over [0, 1].
    let best = (0..=1000)
        .map(|i| f64::from(i) / 1000.0)
        .min_by(|a, b| sse(*a).total_cmp(&sse(*b)))
        .unwrap_or(0.0);
    let cell = ((best - 0.001).max(0.0), (best + 0.001).min(1.0));
    let phi = golden_section(sse, cell.0, cell.1, 1e-9).x;
    let total = |f: fn(&CorrectionSums) -> f64| sums.iter().map(|(_, s)| f(s)).sum::<f64>();
    let rms = |x: f64| (x / n as f64).sqrt();
    Some(Fit {
        decay_per_hour: phi,
        pairs: n,
        runs: hours.values().map(|t| t.runs).max().unwrap_or(0),
        rmse_model: rms(total(|s| s.s_ee)),
        rmse_corrected: rms(sse(phi)),
        rmse_persistence: rms(total(|s| s.s_pp)),
    })
}

/// The switch: on only with enough history and a corrected RMSE below
/// both the raw model's and persistence's by `min_gain`.
pub fn decide(fit: Option<Fit>, initial_error_m: Option<f64>, rules: Rules) -> Correction {
    let off = |reason: String| Correction {
        on: false,
        reason,
        fit,
        initial_error_m,
    };
    let Some(f) = fit else {
        return off("off: no verified history at this point yet".to_owned());
    };
    if f.runs < rules.min_runs || f.pairs < rules.min_pairs {
        return off(format!(
            "off: too little history ({} runs, {} readings; needs {} and {})",
            f.runs, f.pairs, rules.min_runs, rules.min_pairs
        ));
    }
    if initial_error_m.is_none() {
        return off("off: the gauge had no reading at the issue time".to_owned());
    }
    let bar = 1.0 - rules.min_gain;
    if f.rmse_corrected >= bar * f.rmse_model {
        return off(format!(
            "off: it would not have beaten the raw model (RMSE {:.3} m against {:.3} m)",
            f.rmse_corrected, f.rmse_model
        ));
    }
    if f.rmse_corrected >= bar * f.rmse_persistence {
        return off(format!(
            "off: it would not have beaten holding the last reading (RMSE {:.3} m against {:.3} m)",
            f.rmse_corrected, f.rmse_persistence
        ));
    }
    Correction {
        on: true,
        reason: format!(
            "on: over the history it cut the RMSE from {:.3} m (raw model) and {:.3} m (holding the last reading) to {:.3} m",
            f.rmse_model, f.rmse_persistence, f.rmse_corrected
        ),
        fit,
        initial_error_m,
    }
}

/// The corrected stage at a lead of `lead_h` hours (none before the issue
/// time: the correction starts there).
pub fn corrected(model: f64, lead_h: f64, e0: f64, decay_per_hour: f64) -> f64 {
    if lead_h < 0.0 {
        return model;
    }
    model + e0 * decay_per_hour.powf(lead_h)
}

/// The corrected stage at every output time of a run issued at `issued`.
pub fn series(
    times: &[chrono::DateTime<chrono::Utc>],
    stage: &[f64],
    issued: chrono::DateTime<chrono::Utc>,
    e0: f64,
    decay_per_hour: f64,
) -> Vec<f64> {
    times
        .iter()
        .zip(stage)
        .map(|(t, z)| {
            let lead_h = (*t - issued).num_milliseconds() as f64 / 3_600_000.0;
            corrected(*z, lead_h, e0, decay_per_hour)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::ensemble::rng::SplitMix64;

    /// Runs of a point with a model error at lead L of `bias + noise`, the
    /// error at issue `bias + noise` too, tallied as the verification pass
    /// does (e = observed − model), and persistence 0.3 m off.
    fn history(bias: f64, noise: f64, runs: u32) -> BTreeMap<u32, HourTally> {
        let mut rng = SplitMix64::new(7);
        let mut out: BTreeMap<u32, HourTally> = BTreeMap::new();
        for _ in 0..runs {
            let e0 = bias + noise * (rng.next_unit() - 0.5);
            for h in 0..12 {
                let e = bias + noise * (rng.next_unit() - 0.5);
                let slot = out.entry(h).or_default();
                slot.correction.add(e0, e, 0.3);
                slot.runs += u64::from(slot.correction.n == 1);
            }
        }
        out.values_mut().for_each(|t| t.runs = u64::from(runs));
        out
    }

    const RULES: Rules = Rules {
        min_runs: 5,
        min_pairs: 20,
        min_gain: 0.05,
    };

    /// A constant model bias is carried whole (φ → 1): the corrected error
    /// is the noise only, far below the raw model's; the switch is on. The
    /// short-lead MAE of the corrected forecast is below the raw one's on
    /// fresh runs (the check of the issue).
    #[test]
    fn a_constant_bias_is_corrected_and_the_switch_is_on() {
        let h = history(0.2, 0.02, 40);
        let f = fit(&h).unwrap();
        assert!(f.decay_per_hour > 0.95, "{f:?}");
        assert!(f.rmse_corrected < 0.3 * f.rmse_model, "{f:?}");
        let c = decide(Some(f), Some(0.2), RULES);
        assert!(c.on, "{c:?}");
        let mut rng = SplitMix64::new(99);
        let (mut raw, mut cor) = (0.0, 0.0);
        for _ in 0..200 {
            let truth = 10.0;
            let model = truth - 0.2 - 0.02 * (rng.next_unit() - 0.5);
            let e0 = truth - (truth - 0.2 - 0.02 * (rng.next_unit() - 0.5));
            raw += (model - truth).abs();
            cor += (corrected(model, 1.0, e0, f.decay_per_hour) - truth).abs();
        }
        assert!(
            cor < 0.2 * raw,
            "corrected MAE {cor} vs raw {raw} (sums of 200)"
        );
    }

    /// No bias, independent errors: φ stays near 0 and the correction
    /// would not beat the raw model by the margin, so it switches itself
    /// off and says so.
    #[test]
    fn no_bias_switches_it_off() {
        let h = history(0.0, 0.1, 40);
        let f = fit(&h).unwrap();
        assert!(f.decay_per_hour < 0.3, "{f:?}");
        let c = decide(Some(f), Some(0.01), RULES);
        assert!(!c.on);
        assert!(c.reason.contains("raw model"), "{}", c.reason);
    }

    /// The closed form of the corrected squared error equals the direct
    /// sum over the pairs for a given φ (hand check on two pairs).
    #[test]
    fn the_fit_minimises_the_corrected_error_of_the_pairs() {
        // One hour (L = 0.5): e0 = 0.4, e = 0.2; and e0 = −0.2, e = −0.1.
        // Best k = Σe0e / Σe0² = (0.08 + 0.02) / (0.16 + 0.04) = 0.5, so
        // φ^0.5 = 0.5: φ = 0.25, leaving no error.
        let mut t = HourTally::default();
        t.correction.add(0.4, 0.2, 0.0);
        t.correction.add(-0.2, -0.1, 0.0);
        t.runs = 2;
        let f = fit(&BTreeMap::from([(0, t)])).unwrap();
        assert!((f.decay_per_hour - 0.25).abs() < 1e-6, "{f:?}");
        assert!(f.rmse_corrected < 1e-6);
        assert!((corrected(10.0, 0.5, 0.4, 0.25) - 10.2).abs() < 1e-12);
        assert_eq!(corrected(10.0, -1.0, 0.4, 0.25), 10.0);
    }

    #[test]
    fn too_little_history_keeps_it_off() {
        let c = decide(fit(&history(0.2, 0.02, 2)), Some(0.2), RULES);
        assert!(!c.on);
        assert!(c.reason.contains("too little history"), "{}", c.reason);
        let c = decide(None, None, RULES);
        assert!(c.reason.contains("no verified history"));
    }
}

//! What a calibration compares: the modelled stage at the point, routed
//! with candidate multipliers, against the observed stage in a window.

use chrono::{DateTime, Utc};

use crate::forecast::{
    hydrograph::{Hydrograph, seconds},
    multipliers::RoughnessMultipliers,
    run::{self, RunError},
    spec::ReachSpec,
};

use super::window::Window;

/// The modelled stage hydrograph at one point.
#[derive(Debug, Clone, PartialEq)]
pub struct Modelled {
    pub times: Vec<DateTime<Utc>>,
    pub stage: Vec<f64>,
}

/// Routes `inflow` through `spec` with `multipliers` in place of its own
/// and returns the stage at point `point`; `Ok(None)` when the reach has
/// no such point.
pub fn modelled(
    spec: &ReachSpec,
    inflow: &Hydrograph,
    multipliers: RoughnessMultipliers,
    point: &str,
) -> Result<Option<Modelled>, RunError> {
    let candidate = ReachSpec {
        roughness: multipliers,
        ..spec.clone()
    };
    let out = run::run(&candidate, inflow, None)?;
    Ok(out
        .points
        .into_iter()
        .find(|p| p.id == point)
        .map(|p| Modelled {
            times: p.times,
            stage: p.stage,
        }))
}

impl Modelled {
    /// The stage at `t`, linear between output times; `None` outside them.
    pub fn at(&self, t: DateTime<Utc>) -> Option<f64> {
        let k = self.times.partition_point(|&x| x < t);
        let hit = self.times.get(k)?;
        if *hit == t {
            return self.stage.get(k).copied();
        }
        let k0 = k.checked_sub(1)?;
        let (t0, t1) = (self.times[k0], *hit);
        let w = seconds(t, t0) / seconds(t1, t0);
        Some(self.stage[k0] + w * (self.stage[k] - self.stage[k0]))
    }

    /// `(modelled, observed)` at every observation in `window` that the
    /// run covers.
    pub fn pairs(&self, observed: &[(DateTime<Utc>, f64)], window: Window) -> Vec<(f64, f64)> {
        observed
            .iter()
            .filter(|(t, _)| window.contains(*t))
            .filter_map(|&(t, z)| Some((self.at(t)?, z)))
            .collect()
    }
}

/// Sum of squared stage errors (m²): the quantity both minimisers reduce
/// (minimising it minimises the RMSE over the same pairs).
pub fn sse(pairs: &[(f64, f64)]) -> f64 {
    pairs.iter().map(|(f, o)| (f - o) * (f - o)).sum()
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::TimeZone;

    fn t(h: i64) -> DateTime<Utc> {
        Utc.timestamp_opt(1_700_000_000 + h * 3600, 0)
            .single()
            .expect("time")
    }

    /// Linear interpolation between two samples (elementary).
    #[test]
    fn interpolates_inside_and_refuses_outside() {
        let m = Modelled {
            times: vec![t(0), t(2)],
            stage: vec![10.0, 11.0],
        };
        assert_eq!(m.at(t(0)), Some(10.0));
        let mid = m.at(t(1)).expect("inside");
        assert!((mid - 10.5).abs() < 1e-12);
        assert_eq!(m.at(t(3)), None);
        let w = Window {
            from: t(1),
            to: t(5),
        };
        let pairs = m.pairs(&[(t(0), 9.0), (t(1), 10.0), (t(2), 11.5), (t(4), 1.0)], w);
        assert_eq!(pairs.len(), 2, "t0 outside the window, t4 outside the run");
        assert!((sse(&pairs) - (0.25 + 0.25)).abs() < 1e-12);
    }
}

//! Verification kept incrementally: each pass adds the observations that
//! arrived since the last one to running statistics per lead hour (leads
//! in (h, h + 1] hours), and scores by lead-time band are merged from
//! those hours. Bands are therefore any whole-hour edges, chosen when the
//! scores are read, and no history is rescanned.

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    correction::{self, CorrectionSums},
    ensemble::{crps_of_quantiles, quantile_bin},
    moments::Moments,
    pairs::{at, pairs_held},
};

/// What a run forecast at one point, as verification reads it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PointSeries {
    #[serde(with = "crate::wire_time")]
    pub issued: DateTime<Utc>,
    #[serde(with = "crate::wire_time::vec")]
    pub times: Vec<DateTime<Utc>>,
    pub stage: Vec<f64>,
    /// The ensemble's percentile traces on the same times, if any.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub percentiles: Vec<PercentileSeries>,
}

/// One percentile trace (percent, stages).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PercentileSeries {
    pub percentile: f64,
    pub stage: Vec<f64>,
}

impl PointSeries {
    /// The last instant it forecasts.
    pub fn end(&self) -> Option<DateTime<Utc>> {
        self.times.last().copied()
    }
}

/// One point's running statistics at one lead hour over the runs issued
/// on one day (UTC), as stored.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredHour {
    pub point_id: String,
    pub issue_day: chrono::NaiveDate,
    pub lead_hour: u32,
    pub tally: HourTally,
}

/// Running statistics of one point at one lead hour.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct HourTally {
    /// Runs with at least one pair in the hour.
    pub runs: u64,
    pub model: Moments,
    pub persistence: Moments,
    /// The model corrected with the error at the issue time.
    pub corrected: Moments,
    /// What the correction's decay is fitted from.
    pub correction: CorrectionSums,
    pub ensemble: Option<QuantileTally>,
}

/// Running statistics of the ensemble's percentiles at one lead hour.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct QuantileTally {
    /// The percentile levels (percent); tallies of other levels are not
    /// merged with these.
    pub levels: Vec<f64>,
    pub n: u64,
    /// Σ CRPS estimated from the quantiles (m).
    pub crps_sum: f64,
    /// Σ|persistence − observed| on the same pairs (m): persistence is a
    /// point forecast, whose CRPS is its absolute error.
    pub persistence_abs_sum: f64,
    /// Observations below the lowest level, between consecutive levels,
    /// above the highest: `levels.len() + 1` counts.
    pub bins: Vec<u64>,
}

impl QuantileTally {
    /// Adds `other` if it has the same levels; `false` if not.
    pub fn merge(&mut self, other: &QuantileTally) -> bool {
        if self.levels != other.levels || self.bins.len() != other.bins.len() {
            return false;
        }
        self.n += other.n;
        self.crps_sum += other.crps_sum;
        self.persistence_abs_sum += other.persistence_abs_sum;
        self.bins
            .iter_mut()
            .zip(&other.bins)
            .for_each(|(a, b)| *a += b);
        true
    }
}

impl HourTally {
    /// Adds `other`; an ensemble tally of other levels is kept aside
    /// (the newer levels win: the caller merges oldest first).
    pub fn merge(&mut self, other: &HourTally) {
        self.runs += other.runs;
        self.model.merge(&other.model);
        self.persistence.merge(&other.persistence);
        self.corrected.merge(&other.corrected);
        self.correction.merge(&other.correction);
        let Some(b) = &other.ensemble else { return };
        let merged = self.ensemble.as_mut().is_some_and(|a| a.merge(b));
        if !merged {
            self.ensemble = Some(b.clone());
        }
    }
}

/// The lead hour of a lead (s): leads in (h, h + 1] hours are hour h.
pub fn lead_hour(lead_s: f64) -> u32 {
    ((lead_s / 3600.0).ceil() as u32).saturating_sub(1)
}

/// The error at the issue time a run's corrected series starts from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Start {
    /// Observed − model at the last reading at or before the issue (m).
    pub error: f64,
    /// The decay fitted then (per hour), if there was history to fit.
    pub decay_per_hour: Option<f64>,
}

/// Tallies the observations of one run at one point that are newer than
/// `since` (the newest observation already counted, or the issue time),
/// by lead hour. A run counts in an hour when this pass adds its first
/// pair there: observations are taken in time order, so a run whose
/// counted observations already reached into an hour has been counted.
pub fn tally(
    series: &PointSeries,
    persistence: f64,
    start: Option<Start>,
    since: DateTime<Utc>,
    observed: &[(DateTime<Utc>, f64)],
) -> BTreeMap<u32, HourTally> {
    let newer: Vec<(DateTime<Utc>, f64)> = observed
        .iter()
        .copied()
        .filter(|(t, _)| *t > since)
        .collect();
    let pairs = pairs_held(
        series.issued,
        &series.times,
        &series.stage,
        persistence,
        &newer,
    );
    let since_lead = (since - series.issued).num_milliseconds() as f64 / 1000.0;
    let mut out: BTreeMap<u32, HourTally> = BTreeMap::new();
    for p in &pairs {
        let h = lead_hour(p.lead_s);
        let slot = out.entry(h).or_default();
        if slot.model.n == 0 && since_lead <= f64::from(h) * 3600.0 {
            slot.runs = 1;
        }
        slot.model.add(p.forecast, p.observed);
        slot.persistence.add(p.persistence, p.observed);
        if let Some(st) = start {
            let e = p.observed - p.forecast;
            slot.correction.add(st.error, e, p.observed - p.persistence);
            if let Some(phi) = st.decay_per_hour {
                let c = correction::corrected(p.forecast, p.lead_s / 3600.0, st.error, phi);
                slot.corrected.add(c, p.observed);
            }
        }
        let t = series.issued + chrono::Duration::milliseconds((p.lead_s * 1000.0) as i64);
        if let Some(q) = quantiles_at(series, t) {
            add_quantiles(slot, &series.percentiles, &q, p);
        }
    }
    out
}

fn quantiles_at(series: &PointSeries, t: DateTime<Utc>) -> Option<Vec<f64>> {
    if series.percentiles.is_empty() {
        return None;
    }
    series
        .percentiles
        .iter()
        .map(|p| at(&series.times, &p.stage, t))
        .collect()
}

fn add_quantiles(slot: &mut HourTally, traces: &[PercentileSeries], q: &[f64], p: &super::Pair) {
    let levels: Vec<f64> = traces.iter().map(|t| t.percentile).collect();
    let tau: Vec<f64> = levels.iter().map(|l| l / 100.0).collect();
    let e = slot.ensemble.get_or_insert_with(|| QuantileTally {
        bins: vec![0; levels.len() + 1],
        levels: levels.clone(),
        ..QuantileTally::default()
    });
    if e.levels != levels {
        return;
    }
    let Some(crps) = crps_of_quantiles(&tau, q, p.observed) else {
        return;
    };
    e.n += 1;
    e.crps_sum += crps;
    e.persistence_abs_sum += (p.persistence - p.observed).abs();
    if let Some(b) = e.bins.get_mut(quantile_bin(q, p.observed)) {
        *b += 1;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(h: f64) -> DateTime<Utc> {
        DateTime::from_timestamp(1_790_000_000, 0).unwrap()
            + chrono::Duration::milliseconds((h * 3_600_000.0) as i64)
    }

    fn series() -> PointSeries {
        let times: Vec<_> = (0..=6).map(|h| t(f64::from(h))).collect();
        let stage: Vec<_> = (0..=6).map(|h| 10.0 + 0.1 * f64::from(h)).collect();
        PointSeries {
            issued: t(0.0),
            percentiles: vec![
                PercentileSeries {
                    percentile: 10.0,
                    stage: stage.iter().map(|s| s - 0.2).collect(),
                },
                PercentileSeries {
                    percentile: 90.0,
                    stage: stage.iter().map(|s| s + 0.2).collect(),
                },
            ],
            times,
            stage,
        }
    }

    #[test]
    fn leads_fall_in_the_hour_that_ends_at_or_after_them() {
        assert_eq!(lead_hour(1.0), 0);
        assert_eq!(lead_hour(3600.0), 0);
        assert_eq!(lead_hour(3601.0), 1);
        assert_eq!(lead_hour(0.0), 0);
    }

    /// Observations every 15 min, taken in two passes split at 1.5 h:
    /// the merged tallies equal one pass over all of them, and each hour
    /// counts the run once.
    #[test]
    fn two_passes_equal_one() {
        let s = series();
        let obs: Vec<_> = (1..=24)
            .map(|k| {
                let h = f64::from(k) / 4.0;
                (t(h), 10.05 + 0.1 * h)
            })
            .collect();
        let once = tally(&s, 10.0, None, s.issued, &obs);
        let split = t(1.5);
        let first: Vec<_> = obs.iter().copied().filter(|(x, _)| *x <= split).collect();
        let mut twice = tally(&s, 10.0, None, s.issued, &first);
        for (h, v) in tally(&s, 10.0, None, split, &obs) {
            twice.entry(h).or_default().merge(&v);
        }
        assert_eq!(once.len(), 6);
        for (h, a) in &once {
            let b = &twice[h];
            assert_eq!(a.runs, 1, "hour {h}");
            assert_eq!(b.runs, 1, "hour {h}");
            assert_eq!(a.model.n, b.model.n);
            assert!((a.model.rmse().unwrap() - b.model.rmse().unwrap()).abs() < 1e-12);
            // Every forecast is 0.05 m low (by construction).
            assert!((a.model.bias().unwrap() + 0.05).abs() < 1e-9);
            let e = a.ensemble.as_ref().unwrap();
            assert_eq!(e.bins, vec![0, 4, 0], "inside the 10–90 band");
        }
    }

    #[test]
    fn observations_before_since_are_not_counted_again() {
        let s = series();
        let obs = [(t(0.5), 10.0), (t(1.0), 10.1)];
        assert!(tally(&s, 10.0, None, t(1.0), &obs).is_empty());
    }
}

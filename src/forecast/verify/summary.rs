//! Scores as they are served: by lead-time band, merged from the stored
//! lead-hour tallies, with persistence's on the same pairs and the skill
//! against it; per level, the contingency table over the runs' events;
//! crest errors. A band with too little behind it says "not yet
//! verified" rather than showing a figure that means nothing.

use std::collections::BTreeMap;

use serde::Serialize;

use super::{
    contingency::Contingency, events::Event, moments::Moments, scores::skill, tally::HourTally,
};

/// How much history a band needs before its scores are shown as
/// verification.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Enough {
    pub runs: u64,
    pub pairs: u64,
}

/// Whether a band's scores rest on enough history.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Status {
    Verified,
    NotYetVerified,
}

/// Continuous scores of one forecast on a band's pairs.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Scores {
    pub bias_m: Option<f64>,
    pub mae_m: Option<f64>,
    pub rmse_m: Option<f64>,
    pub nse: Option<f64>,
    pub kge: Option<f64>,
}

impl Scores {
    fn of(m: &Moments) -> Self {
        Self {
            bias_m: m.bias(),
            mae_m: m.mae(),
            rmse_m: m.rmse(),
            nse: m.nse(),
            kge: m.kge(),
        }
    }
}

/// The scores of one lead-time band.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Band {
    /// Leads in (from, to] hours.
    pub from_h: u32,
    pub to_h: u32,
    /// Runs with a pair in the band (the most in any of its hours).
    pub runs: u64,
    pub pairs: u64,
    pub status: Status,
    pub model: Scores,
    pub persistence: Scores,
    /// The model corrected with the error at the issue time (on the
    /// pairs of runs that had one; `None` without such pairs), scored
    /// whether or not the correction was switched on.
    pub corrected: Option<Scores>,
    /// 1 − RMSE / persistence's RMSE: above 0 the model beat holding the
    /// last observed stage.
    pub skill_rmse: Option<f64>,
    /// 1 − MAE / persistence's MAE.
    pub skill_mae: Option<f64>,
    pub ensemble: Option<EnsembleBand>,
}

/// The ensemble's scores on a band.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EnsembleBand {
    pub pairs: u64,
    /// Mean CRPS estimated from the stored percentiles (m).
    pub crps_m: Option<f64>,
    /// Persistence's on the same pairs (its absolute error, m).
    pub persistence_crps_m: Option<f64>,
    /// 1 − CRPS / persistence's.
    pub skill: Option<f64>,
    pub bins: Vec<Bin>,
}

/// One bin of the quantile histogram.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Bin {
    /// Between these percentiles (0 and 100 at the ends).
    pub from_percentile: f64,
    pub to_percentile: f64,
    pub count: u64,
    /// Share of the observations in it, and what a reliable forecast
    /// would give: the width of the bin.
    pub share: Option<f64>,
    pub expected_share: f64,
}

/// The bands between consecutive `edges_h` (whole hours, increasing).
pub fn bands(hours: &BTreeMap<u32, HourTally>, edges_h: &[u32], enough: Enough) -> Vec<Band> {
    edges_h
        .windows(2)
        .map(|w| {
            let mut sum = HourTally::default();
            let mut runs = 0;
            for (_, h) in hours.range(w[0]..w[1]) {
                runs = runs.max(h.runs);
                sum.merge(h);
            }
            band(w[0], w[1], runs, &sum, enough)
        })
        .collect()
}

fn band(from_h: u32, to_h: u32, runs: u64, t: &HourTally, enough: Enough) -> Band {
    let (model, held) = (&t.model, &t.persistence);
    let ratio = |a: Option<f64>, b: Option<f64>| a.zip(b).and_then(|(a, b)| skill(a, b));
    let status = if runs >= enough.runs && model.n >= enough.pairs {
        Status::Verified
    } else {
        Status::NotYetVerified
    };
    Band {
        from_h,
        to_h,
        runs,
        pairs: model.n,
        status,
        model: Scores::of(model),
        persistence: Scores::of(held),
        corrected: (t.corrected.n > 0).then(|| Scores::of(&t.corrected)),
        skill_rmse: ratio(model.rmse(), held.rmse()),
        skill_mae: ratio(model.mae(), held.mae()),
        ensemble: t.ensemble.as_ref().filter(|e| e.n > 0).map(|e| {
            let mean = |s: f64| Some(s / e.n as f64);
            let (crps, held) = (mean(e.crps_sum), mean(e.persistence_abs_sum));
            EnsembleBand {
                pairs: e.n,
                crps_m: crps,
                persistence_crps_m: held,
                skill: ratio(crps, held),
                bins: bins(&e.levels, &e.bins),
            }
        }),
    }
}

fn bins(levels: &[f64], counts: &[u64]) -> Vec<Bin> {
    let total: u64 = counts.iter().sum();
    let edges: Vec<f64> = std::iter::once(0.0)
        .chain(levels.iter().copied())
        .chain(std::iter::once(100.0))
        .collect();
    edges
        .windows(2)
        .zip(counts)
        .map(|(w, &count)| Bin {
            from_percentile: w[0],
            to_percentile: w[1],
            count,
            share: (total > 0).then(|| count as f64 / total as f64),
            expected_share: (w[1] - w[0]) / 100.0,
        })
        .collect()
}

/// Crest errors and level outcomes over a point's events.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EventScores {
    /// Runs whose window has been observed.
    pub events: u64,
    /// Of those, runs with a crest inside the window.
    pub crests: u64,
    pub crest_stage_bias_m: Option<f64>,
    pub crest_stage_mae_m: Option<f64>,
    /// Positive: forecast crests came late.
    pub crest_timing_bias_h: Option<f64>,
    pub crest_timing_mae_h: Option<f64>,
    pub levels: Vec<LevelScores>,
}

/// The contingency table of one level over the events.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LevelScores {
    pub id: String,
    pub elevation_m: f64,
    pub hits: u64,
    pub false_alarms: u64,
    pub misses: u64,
    pub correct_negatives: u64,
    pub pod: Option<f64>,
    pub far: Option<f64>,
    pub csi: Option<f64>,
    pub frequency_bias: Option<f64>,
}

/// The scores over `events` (oldest first: a level's elevation is the
/// newest event's).
pub fn events(events: &[Event]) -> EventScores {
    let crests: Vec<_> = events.iter().filter_map(|e| e.crest).collect();
    let mean = |v: &mut dyn Iterator<Item = f64>| {
        let (s, n) = v.fold((0.0, 0u64), |(s, n), x| (s + x, n + 1));
        (n > 0).then(|| s / n as f64)
    };
    let mut tables: BTreeMap<&str, (f64, Contingency)> = BTreeMap::new();
    for e in events {
        for l in &e.levels {
            let slot = tables
                .entry(&l.id)
                .or_insert((l.elevation, Contingency::default()));
            slot.0 = l.elevation;
            slot.1.add(l.forecast, l.observed);
        }
    }
    let mut levels: Vec<LevelScores> = tables
        .into_iter()
        .map(|(id, (elevation_m, c))| LevelScores {
            id: id.to_owned(),
            elevation_m,
            hits: c.hits,
            false_alarms: c.false_alarms,
            misses: c.misses,
            correct_negatives: c.correct_negatives,
            pod: c.pod(),
            far: c.far(),
            csi: c.csi(),
            frequency_bias: c.frequency_bias(),
        })
        .collect();
    levels.sort_by(|a, b| a.elevation_m.total_cmp(&b.elevation_m));
    EventScores {
        events: events.len() as u64,
        crests: crests.len() as u64,
        crest_stage_bias_m: mean(&mut crests.iter().map(|c| c.stage_m)),
        crest_stage_mae_m: mean(&mut crests.iter().map(|c| c.stage_m.abs())),
        crest_timing_bias_h: mean(&mut crests.iter().map(|c| c.timing_s / 3600.0)),
        crest_timing_mae_h: mean(&mut crests.iter().map(|c| c.timing_s.abs() / 3600.0)),
        levels,
    }
}

#[cfg(test)]
mod tests {
    use super::super::{
        events::{CrestError, LevelEvent},
        tally::QuantileTally,
    };
    use super::*;

    fn hour(runs: u64, errors: &[f64], held: &[f64]) -> HourTally {
        let mut h = HourTally {
            runs,
            ..HourTally::default()
        };
        errors.iter().for_each(|e| h.model.add(10.0 + e, 10.0));
        held.iter().for_each(|e| h.persistence.add(10.0 + e, 10.0));
        h
    }

    /// Two hours merged into the 0–3 h band: errors ±0.1 (RMSE 0.1) and
    /// persistence ±0.2 (RMSE 0.2), skill 1 − 0.1/0.2 = 0.5 by hand; the
    /// band's runs are the most in one hour; too few runs: not verified.
    #[test]
    fn bands_merge_their_hours_and_say_when_they_are_not_yet_verified() {
        let mut hours = BTreeMap::new();
        hours.insert(0, hour(4, &[0.1, -0.1], &[0.2, -0.2]));
        hours.insert(2, hour(3, &[0.1, -0.1], &[0.2, -0.2]));
        hours.insert(3, hour(9, &[5.0], &[0.0]));
        let b = &bands(&hours, &[0, 3], Enough { runs: 4, pairs: 4 })[0];
        assert_eq!((b.runs, b.pairs), (4, 4));
        assert_eq!(b.status, Status::Verified);
        assert!((b.model.rmse_m.unwrap() - 0.1).abs() < 1e-12);
        assert!((b.skill_rmse.unwrap() - 0.5).abs() < 1e-12);
        let b = &bands(&hours, &[0, 3], Enough { runs: 5, pairs: 4 })[0];
        assert_eq!(b.status, Status::NotYetVerified);
        let empty = &bands(&BTreeMap::new(), &[0, 3], Enough { runs: 1, pairs: 1 })[0];
        assert_eq!(empty.pairs, 0);
        assert_eq!(empty.model.rmse_m, None);
    }

    /// A reliable 10/90 % forecast puts 10 %, 80 %, 10 % of observations
    /// in its three bins; the expected shares are the bin widths.
    #[test]
    fn quantile_bins_report_observed_and_expected_shares() {
        let mut h = hour(1, &[0.0], &[0.0]);
        h.ensemble = Some(QuantileTally {
            levels: vec![10.0, 90.0],
            n: 10,
            crps_sum: 1.0,
            persistence_abs_sum: 2.0,
            bins: vec![1, 8, 1],
        });
        let hours = BTreeMap::from([(0, h)]);
        let e = bands(&hours, &[0, 1], Enough { runs: 1, pairs: 1 })[0]
            .ensemble
            .clone()
            .unwrap();
        assert!((e.skill.unwrap() - 0.5).abs() < 1e-12);
        let expected: Vec<f64> = e.bins.iter().map(|b| b.expected_share).collect();
        assert_eq!(expected, vec![0.1, 0.8, 0.1]);
        assert_eq!(e.bins[1].share, Some(0.8));
    }

    #[test]
    fn event_scores_average_crest_errors_and_count_each_level() {
        let ev = |stage_m: f64, timing_s: f64, f: bool, o: bool| Event {
            pairs: 10,
            forecast_max: 0.0,
            observed_max: 0.0,
            crest: Some(CrestError {
                stage_m,
                timing_s,
                observed_lead_s: 0.0,
            }),
            levels: vec![LevelEvent {
                id: "minor".into(),
                elevation: 11.0,
                forecast: f,
                observed: o,
            }],
        };
        let s = events(&[ev(0.2, 3600.0, true, true), ev(-0.4, -7200.0, true, false)]);
        assert_eq!((s.events, s.crests), (2, 2));
        assert!((s.crest_stage_bias_m.unwrap() + 0.1).abs() < 1e-12);
        assert!((s.crest_stage_mae_m.unwrap() - 0.3).abs() < 1e-12);
        assert!((s.crest_timing_bias_h.unwrap() + 0.5).abs() < 1e-12);
        assert_eq!((s.levels[0].hits, s.levels[0].false_alarms), (1, 1));
        assert_eq!(s.levels[0].far, Some(0.5));
    }
}

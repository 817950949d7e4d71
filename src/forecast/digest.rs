//! What is kept of a run once retention has dropped its full results (the
//! hydrographs, the profile and the ensemble traces): per point its crest,
//! peak discharge and, per level, whether and when it was forecast to be
//! reached and with what probability. With the run's provenance (kept
//! whole) this says what the run forecast and from what.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{ensemble::summary::EnsembleSummary, record::StoredResults};

/// A pruned run's results in brief.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ResultsDigest {
    pub nodes: usize,
    /// Members summarised, when the run had an ensemble.
    pub ensemble_members: Option<usize>,
    pub points: Vec<PointDigest>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PointDigest {
    pub id: String,
    pub name: String,
    pub chainage: f64,
    /// Highest stage of the run's output (look-back included), m.
    pub crest_stage: f64,
    #[serde(with = "crate::wire_time")]
    pub crest_time: DateTime<Utc>,
    pub peak_discharge: f64,
    pub levels: Vec<LevelDigest>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelDigest {
    pub id: String,
    pub elevation: f64,
    pub exceeded: bool,
    #[serde(with = "crate::wire_time::option")]
    pub first_above: Option<DateTime<Utc>>,
    /// Share of ensemble members reaching it, when there was one.
    pub probability: Option<f64>,
}

impl ResultsDigest {
    /// The digest of a run's results and its ensemble, if any.
    pub fn of(results: &StoredResults, ensemble: Option<&EnsembleSummary>) -> Self {
        let points = results
            .points
            .iter()
            .map(|p| {
                let range = ensemble.and_then(|e| e.point(&p.id));
                let chance = |id: &str| {
                    range
                        .and_then(|r| r.levels.iter().find(|c| c.id == id))
                        .map(|c| c.probability)
                };
                PointDigest {
                    id: p.id.clone(),
                    name: p.name.clone(),
                    chainage: p.chainage,
                    crest_stage: p.crest_stage,
                    crest_time: p.crest_time,
                    peak_discharge: p.peak_discharge,
                    levels: p
                        .levels
                        .iter()
                        .map(|l| LevelDigest {
                            id: l.id.clone(),
                            elevation: l.elevation,
                            exceeded: l.exceeded,
                            first_above: l.first_above,
                            probability: chance(&l.id),
                        })
                        .collect(),
                }
            })
            .collect();
        Self {
            nodes: results.nodes,
            ensemble_members: ensemble.map(|e| e.members),
            points,
        }
    }
}

//! What an ensemble says at each point: percentile stage traces, the crest
//! range, and per level the share of members that reach it with the
//! earliest and median first crossing. Seen from the issue time, like the
//! exceedance board: a member that was above a level only in the look-back
//! does not count as reaching it.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::quantile::{quantile_sorted, quantiles};
use crate::forecast::{level::Trace, run::PointForecast};

/// Where the members came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MemberSource {
    /// The deterministic inputs perturbed (`ensemble` section of the reach).
    Perturbed,
    /// The upload's inflow traces, with Manning's n and the ratings
    /// perturbed.
    Traces,
}

/// The ensemble attached to a run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EnsembleSummary {
    /// Members summarised (those that routed).
    pub members: usize,
    /// Members whose routing failed; left out of every figure.
    pub failed_members: usize,
    pub source: MemberSource,
    /// Seed of the perturbations (the run id): the same seed gives the
    /// same members.
    pub seed: u64,
    /// The instant probabilities and crests are seen from.
    #[serde(with = "crate::wire_time")]
    pub issued: DateTime<Utc>,
    /// Percentiles reported, in percent.
    pub percentiles: Vec<f64>,
    /// In the run's point order.
    pub points: Vec<PointRange>,
    /// Per percentile, the members' highest stage from the issue time on
    /// at every computational node (the profile's band); empty in
    /// ensembles stored before it.
    #[serde(default)]
    pub node_crest: Vec<PercentileTrace>,
}

/// The range at one point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PointRange {
    /// The point's id.
    pub id: String,
    /// One stage trace per percentile, on the point's own times.
    pub stage: Vec<PercentileTrace>,
    /// Each member's highest stage from the issue time on.
    pub crest: CrestRange,
    /// One per level of the point, in the point's order.
    pub levels: Vec<LevelChance>,
}

/// A percentile of the members' stage at every output time (m).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PercentileTrace {
    pub percentile: f64,
    pub stage: Vec<f64>,
}

/// The spread of the members' crests (m).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CrestRange {
    pub min: f64,
    pub max: f64,
    /// At the ensemble's percentiles.
    pub percentiles: Vec<PercentileValue>,
}

/// One percentile of a crest (m).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PercentileValue {
    pub percentile: f64,
    pub stage: f64,
}

/// How many members reach a level, and when.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelChance {
    /// The level's id at its point.
    pub id: String,
    pub members_reaching: usize,
    /// `members_reaching / members` (0–1).
    pub probability: f64,
    /// The earliest first crossing among the members that reach it.
    #[serde(with = "crate::wire_time::option")]
    pub earliest_first_above: Option<DateTime<Utc>>,
    /// The median (definition 7) of those members' first crossings, to
    /// the second.
    #[serde(with = "crate::wire_time::option")]
    pub median_first_above: Option<DateTime<Utc>>,
}

/// A level's chance as served beside the level: the share of members that
/// reach it and when, with the member count it is a share of.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Chance {
    /// `members_reaching / members` (0–1), seen from the run's issue time.
    pub probability: f64,
    pub members: usize,
    pub members_reaching: usize,
    #[serde(with = "crate::wire_time::option")]
    pub earliest_first_above: Option<DateTime<Utc>>,
    #[serde(with = "crate::wire_time::option")]
    pub median_first_above: Option<DateTime<Utc>>,
}

impl EnsembleSummary {
    /// The range at the point with id `point`.
    pub fn point(&self, point: &str) -> Option<&PointRange> {
        self.points.iter().find(|p| p.id == point)
    }

    /// The chance of level `level` at point `point`.
    pub fn chance(&self, point: &str, level: &str) -> Option<Chance> {
        let c = self.point(point)?.levels.iter().find(|l| l.id == level)?;
        Some(Chance {
            probability: c.probability,
            members: self.members,
            members_reaching: c.members_reaching,
            earliest_first_above: c.earliest_first_above,
            median_first_above: c.median_first_above,
        })
    }
}

/// What is kept of one member: its stage trace at each point (in the
/// run's point order) and its highest stage at each node.
#[derive(Debug, Clone, PartialEq)]
pub struct MemberTraces {
    pub points: Vec<Vec<f64>>,
    pub node_crest: Vec<f64>,
}

/// Per percentile, the members' node crests at every node.
pub fn node_crest_band(members: &[MemberTraces], percentiles: &[f64]) -> Vec<PercentileTrace> {
    let probs: Vec<f64> = percentiles.iter().map(|p| p / 100.0).collect();
    let nodes = members.first().map_or(0, |m| m.node_crest.len());
    let traces: Vec<&[f64]> = members.iter().map(|m| m.node_crest.as_slice()).collect();
    percentile_traces(&traces, nodes, percentiles, &probs)
}

/// The summary of `members` (at least one) around the deterministic
/// points `det`, seen from `issued`.
pub fn summarise(
    det: &[PointForecast],
    members: &[MemberTraces],
    issued: DateTime<Utc>,
    percentiles: &[f64],
) -> Vec<PointRange> {
    let probs: Vec<f64> = percentiles.iter().map(|p| p / 100.0).collect();
    det.iter()
        .enumerate()
        .map(|(i, p)| {
            let traces: Vec<&[f64]> = members.iter().map(|m| m.points[i].as_slice()).collect();
            point_range(p, &traces, issued, percentiles, &probs)
        })
        .collect()
}

fn point_range(
    p: &PointForecast,
    traces: &[&[f64]],
    issued: DateTime<Utc>,
    percentiles: &[f64],
    probs: &[f64],
) -> PointRange {
    let views: Vec<_> = traces
        .iter()
        .map(|s| Trace::new(&p.times, s).ahead(issued))
        .collect();
    let mut crests: Vec<f64> = views
        .iter()
        .map(|v| v.crest().map_or(f64::NAN, |c| c.stage))
        .collect();
    let crest_q = quantiles(&mut crests, probs).unwrap_or_else(|| vec![f64::NAN; probs.len()]);
    let levels = p
        .levels
        .iter()
        .map(|l| {
            let def = l.def();
            let firsts: Vec<DateTime<Utc>> = views
                .iter()
                .map(|v| v.level(&def))
                .filter(|o| o.exceeded)
                .filter_map(|o| o.first_above)
                .collect();
            chance(&l.id, firsts, traces.len())
        })
        .collect();
    PointRange {
        id: p.id.clone(),
        stage: percentile_traces(traces, p.times.len(), percentiles, probs),
        crest: CrestRange {
            min: crests.first().copied().unwrap_or(f64::NAN),
            max: crests
                .iter()
                .copied()
                .filter(|c| c.is_finite())
                .fold(f64::NAN, f64::max),
            percentiles: percentiles
                .iter()
                .zip(crest_q)
                .map(|(&percentile, stage)| PercentileValue { percentile, stage })
                .collect(),
        },
        levels,
    }
}

/// The percentiles of the members' stage at each of `len` times.
fn percentile_traces(
    traces: &[&[f64]],
    len: usize,
    percentiles: &[f64],
    probs: &[f64],
) -> Vec<PercentileTrace> {
    let mut out: Vec<PercentileTrace> = percentiles
        .iter()
        .map(|&percentile| PercentileTrace {
            percentile,
            stage: Vec::with_capacity(len),
        })
        .collect();
    let mut column = Vec::with_capacity(traces.len());
    for k in 0..len {
        column.clear();
        column.extend(traces.iter().map(|t| t.get(k).copied().unwrap_or(f64::NAN)));
        let q = quantiles(&mut column, probs).unwrap_or_else(|| vec![f64::NAN; probs.len()]);
        for (trace, v) in out.iter_mut().zip(q) {
            trace.stage.push(v);
        }
    }
    out
}

/// The chance of a level from the first crossings of the members that
/// reach it, out of `members`.
fn chance(id: &str, mut firsts: Vec<DateTime<Utc>>, members: usize) -> LevelChance {
    firsts.sort_unstable();
    let secs: Vec<f64> = firsts.iter().map(|t| t.timestamp() as f64).collect();
    let median = (!secs.is_empty())
        .then(|| quantile_sorted(&secs, 0.5).round() as i64)
        .and_then(|s| DateTime::from_timestamp(s, 0));
    LevelChance {
        id: id.to_owned(),
        members_reaching: firsts.len(),
        probability: if members == 0 {
            0.0
        } else {
            firsts.len() as f64 / members as f64
        },
        earliest_first_above: firsts.first().copied(),
        median_first_above: median,
    }
}

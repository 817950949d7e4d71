//! What an upload would do before it is stored: the join between the
//! observed inflow and the candidate upload, computed by the same assembly
//! the next run performs (`forecast::assemble`, with the same readings,
//! rules and clock), so the preview and the run cannot disagree.

use chrono::{DateTime, Utc};
use serde::Serialize;

use super::{CycleError, Forecaster};
use crate::forecast::{
    assemble::{self, JUMP_WARN_FRACTION, Source},
    hydrograph::Hydrograph,
};

/// The join of a candidate upload with the observed inflow, as the next
/// run would make it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct JoinPreview {
    /// The instant the assembly was made for (the server's clock).
    #[serde(with = "crate::wire_time")]
    pub now: DateTime<Utc>,
    /// Whether the next run would use the upload beyond the observations.
    pub used: bool,
    /// The last observation the forecast continues from, if any.
    pub last_observed: Option<Point>,
    /// The upload's value where it meets that observation (its value at
    /// that time when it covers it, else its first sample).
    pub upload_at_join: Option<f64>,
    /// `upload_at_join - last observed discharge` (m³/s).
    pub jump: Option<f64>,
    /// The jump as a fraction of the larger of the two values (the scale
    /// the run's mismatch warning uses).
    pub jump_relative: Option<f64>,
    /// The fraction above which the run warns of a mismatch.
    pub warn_fraction: f64,
    /// The observed part of the assembled inflow, oldest first.
    pub observed: Vec<Point>,
    /// What the run would say about this inflow.
    pub warnings: Vec<String>,
}

/// One (time, discharge) sample on the wire.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Point {
    #[serde(with = "crate::wire_time")]
    pub time: DateTime<Utc>,
    pub discharge: f64,
}

impl Forecaster {
    /// Assembles the inflow of reach `reach_id` with `candidate` as its
    /// upload, without storing anything, and reports the join.
    pub async fn preview_join(
        &self,
        reach_id: &str,
        candidate: &Hydrograph,
    ) -> Result<JoinPreview, CycleError> {
        let reach = self
            .inner
            .store
            .latest_reach(reach_id)
            .await?
            .ok_or_else(|| CycleError::NoReach(reach_id.to_owned()))?;
        let now = Utc::now();
        let rules = self.rules();
        let upload = assemble::Upload {
            version: 0,
            issued_at: now,
            issued_by: "preview".to_owned(),
            series: candidate.clone(),
        };
        let assembled = self
            .observed(&reach.spec, super::cycle::Basis::live(now), &rules)
            .await?
            .and_then(|(readings, basis)| {
                assemble::assemble(now, &readings, &basis, Some(&upload), &rules)
                    .map_err(|e| format!("inflow: {e}"))
            });
        Ok(match assembled {
            Ok(a) => join_of(now, &a, candidate),
            Err(why) => JoinPreview {
                warnings: vec![why],
                ..empty(now)
            },
        })
    }
}

fn empty(now: DateTime<Utc>) -> JoinPreview {
    JoinPreview {
        now,
        used: false,
        last_observed: None,
        upload_at_join: None,
        jump: None,
        jump_relative: None,
        warn_fraction: JUMP_WARN_FRACTION,
        observed: Vec::new(),
        warnings: Vec::new(),
    }
}

/// The join figures from an assembly made with `candidate` as the upload.
fn join_of(now: DateTime<Utc>, a: &assemble::Assembled, candidate: &Hydrograph) -> JoinPreview {
    let p = &a.provenance;
    let observed: Vec<Point> = match p.observed_to {
        Some(to) => a
            .series
            .iter()
            .take_while(|s| s.0 <= to)
            .map(|&(time, discharge)| Point { time, discharge })
            .collect(),
        None => Vec::new(),
    };
    let used = p.source_beyond_now == Source::Upload;
    let last = observed.last().copied();
    // The engine's series holds its first value before its start and
    // interpolates inside: exactly the assembly's value "where it meets".
    let at_join = last
        .filter(|_| used)
        .map(|l| candidate.to_series(l.time).at(0.0));
    let jump = last.zip(at_join).map(|(l, u)| u - l.discharge);
    let jump_relative = last
        .zip(at_join)
        .map(|(l, u)| assemble::relative_difference(l.discharge, u));
    JoinPreview {
        used,
        last_observed: last,
        upload_at_join: at_join,
        jump,
        jump_relative,
        observed,
        warnings: p.warnings.clone(),
        ..empty(now)
    }
}

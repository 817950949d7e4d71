//! The verification report of a reach, as the API serves it (JSON and
//! CSV) and the forecast documents quote it: per point of interest, the
//! scores by lead-time band beside persistence's, the crest errors and the
//! contingency table of each level, or why there are none.

use std::collections::BTreeMap;

use serde::Serialize;

use super::{
    events::Event,
    summary::{self, Band, Enough, EventScores, Status},
    tally::{HourTally, StoredHour},
};
use crate::forecast::spec::ReachSpec;

/// Where a point stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum PointStatus {
    /// At least one band rests on enough history.
    Verified,
    /// A gauge, but too little history yet.
    NotYetVerified,
    /// No gauge at the point: nothing to compare with.
    NoGauge,
}

impl PointStatus {
    /// The words the dashboard and the CSV use.
    pub fn words(self) -> &'static str {
        match self {
            PointStatus::Verified => "verified",
            PointStatus::NotYetVerified => "not yet verified",
            PointStatus::NoGauge => "not verified: no gauge at this point",
        }
    }
}

/// One point's verification.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PointVerification {
    pub id: String,
    pub name: String,
    pub gauge: Option<String>,
    pub status: PointStatus,
    /// Plain words for `status`.
    pub status_text: &'static str,
    pub bands: Vec<Band>,
    pub events: EventScores,
}

/// What a forecast says of how forecasts at its point have verified, by
/// lead-time band: the answer to "how far can I trust this?" next to the
/// figures it qualifies.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VerificationBrief {
    pub status: PointStatus,
    pub status_text: &'static str,
    /// Runs issued in this many days up to now.
    pub days: u64,
    pub bands: Vec<BandBrief>,
}

/// One band of a [`VerificationBrief`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BandBrief {
    pub from_h: u32,
    pub to_h: u32,
    pub status: Status,
    pub runs: u64,
    pub pairs: u64,
    /// Mean absolute error (m), and persistence's on the same pairs.
    pub mae_m: Option<f64>,
    pub persistence_mae_m: Option<f64>,
    pub skill_mae: Option<f64>,
}

impl PointVerification {
    /// The brief a forecast carries.
    pub fn brief(&self, days: u64) -> VerificationBrief {
        VerificationBrief {
            status: self.status,
            status_text: self.status_text,
            days,
            bands: self
                .bands
                .iter()
                .map(|b| BandBrief {
                    from_h: b.from_h,
                    to_h: b.to_h,
                    status: b.status,
                    runs: b.runs,
                    pairs: b.pairs,
                    mae_m: b.model.mae_m,
                    persistence_mae_m: b.persistence.mae_m,
                    skill_mae: b.skill_mae,
                })
                .collect(),
        }
    }
}

/// What the report is made of.
pub struct Sources<'a> {
    pub spec: &'a ReachSpec,
    pub hours: &'a [StoredHour],
    /// `(point id, event)`, oldest first per point.
    pub events: &'a [(String, Event)],
    pub edges_h: &'a [u32],
    pub enough: Enough,
}

/// The report of every point of the reach, in the reach's order.
pub fn points(src: &Sources) -> Vec<PointVerification> {
    let mut hours: BTreeMap<&str, BTreeMap<u32, HourTally>> = BTreeMap::new();
    for h in src.hours {
        hours
            .entry(h.point_id.as_str())
            .or_default()
            .entry(h.lead_hour)
            .or_default()
            .merge(&h.tally);
    }
    src.spec
        .points
        .iter()
        .map(|p| {
            let id = p.point_id();
            let empty = BTreeMap::new();
            let mine = hours.get(id.as_str()).unwrap_or(&empty);
            let bands = summary::bands(mine, src.edges_h, src.enough);
            let events: Vec<Event> = src
                .events
                .iter()
                .filter(|(pid, _)| *pid == id)
                .map(|(_, e)| e.clone())
                .collect();
            let status = match &p.gauge {
                None => PointStatus::NoGauge,
                Some(_) if bands.iter().any(|b| b.status == Status::Verified) => {
                    PointStatus::Verified
                }
                Some(_) => PointStatus::NotYetVerified,
            };
            PointVerification {
                id,
                name: p.name.clone(),
                gauge: p.gauge.clone(),
                status,
                status_text: status.words(),
                bands,
                events: summary::events(&events),
            }
        })
        .collect()
}

/// The CSV header of [`csv`].
pub const CSV_HEADER: [&str; 20] = [
    "reach",
    "point",
    "gauge",
    "from_h",
    "to_h",
    "status",
    "runs",
    "pairs",
    "bias_m",
    "mae_m",
    "rmse_m",
    "nse",
    "kge",
    "persistence_mae_m",
    "persistence_rmse_m",
    "skill_rmse",
    "skill_mae",
    "crps_m",
    "crps_skill",
    "caution",
];

/// One row per point and band (RFC 4180, CRLF), the caution on each row
/// as in the forecast tables.
pub fn csv(reach: &str, points: &[PointVerification]) -> Result<Vec<u8>, csv::Error> {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .from_writer(Vec::new());
    w.write_record(CSV_HEADER)?;
    let num = |v: Option<f64>| v.map(|x| x.to_string()).unwrap_or_default();
    for p in points {
        for b in &p.bands {
            let status = match (p.status, b.status) {
                (PointStatus::NoGauge, _) => p.status.words(),
                (_, Status::Verified) => "verified",
                (_, Status::NotYetVerified) => "not yet verified",
            };
            let e = b.ensemble.as_ref();
            w.write_record([
                reach.to_owned(),
                p.id.clone(),
                p.gauge.clone().unwrap_or_default(),
                b.from_h.to_string(),
                b.to_h.to_string(),
                status.to_owned(),
                b.runs.to_string(),
                b.pairs.to_string(),
                num(b.model.bias_m),
                num(b.model.mae_m),
                num(b.model.rmse_m),
                num(b.model.nse),
                num(b.model.kge),
                num(b.persistence.mae_m),
                num(b.persistence.rmse_m),
                num(b.skill_rmse),
                num(b.skill_mae),
                num(e.and_then(|e| e.crps_m)),
                num(e.and_then(|e| e.skill)),
                crate::CAUTION.to_owned(),
            ])?;
        }
    }
    w.into_inner().map_err(|e| e.into_error().into())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec() -> ReachSpec {
        let mut doc: serde_json::Value =
            serde_json::from_str(include_str!("../../demo/brindlemoor-reach.json")).unwrap();
        doc["points"][0]["gauge"] = serde_json::Value::Null;
        doc["points"][1]["gauge"] = "g".into();
        serde_json::from_value(doc).unwrap()
    }

    /// A point without a gauge says so; a gauged one with nothing stored
    /// says "not yet verified"; one stored hour with enough pairs makes
    /// its band (and the point) verified.
    #[test]
    fn each_point_says_where_it_stands() {
        let s = spec();
        let gauged = s.points[1].point_id();
        let edges = [0, 3, 6];
        let enough = Enough { runs: 1, pairs: 2 };
        let src = Sources {
            spec: &s,
            hours: &[],
            events: &[],
            edges_h: &edges,
            enough,
        };
        let r = points(&src);
        assert_eq!(r[0].status, PointStatus::NoGauge);
        assert_eq!(r[1].status, PointStatus::NotYetVerified);
        assert_eq!(r[1].bands.len(), 2);
        let mut tally = HourTally {
            runs: 1,
            ..HourTally::default()
        };
        tally.model.add(1.1, 1.0);
        tally.model.add(0.9, 1.0);
        let hours = [StoredHour {
            point_id: gauged.clone(),
            issue_day: chrono::NaiveDate::from_ymd_opt(2026, 12, 1).unwrap(),
            lead_hour: 4,
            tally,
        }];
        let src = Sources {
            hours: &hours,
            ..src
        };
        let r = points(&src);
        assert_eq!(r[1].status, PointStatus::Verified);
        assert_eq!(r[1].bands[0].status, Status::NotYetVerified);
        assert_eq!(r[1].bands[1].status, Status::Verified);
        let text = String::from_utf8(csv("brindlemoor", &r).unwrap()).unwrap();
        let lines: Vec<&str> = text.split("\r\n").filter(|l| !l.is_empty()).collect();
        assert_eq!(lines.len(), 1 + 2 * r.len());
        assert!(lines[0].starts_with("reach,point,gauge,from_h"));
        assert!(lines.iter().skip(1).all(|l| l.contains(crate::CAUTION)));
    }
}

//! The flow split at each junction of a network run, as the forecast
//! document reports it: per channel end its discharge over time, which
//! way it flows, and its share of the flow passing through the junction.
//!
//! At a confluence the shares of the arriving channels say what each
//! contributes; where a channel splits (a floodplain path leaving the main
//! channel) the shares of the leaving channels say what each path carries.

use chrono::{DateTime, Utc};
use serde::Serialize;

use super::network::JunctionFlow;
use super::view::FT3_PER_M3;

/// Through-flows below this (m³/s) give no share: a junction of dry
/// channels has no split to speak of.
const NO_FLOW_M3S: f64 = 1e-6;

/// Which way a channel end meets its junction.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Side {
    /// The channel ends at the junction: its flow arrives.
    Arrives,
    /// The channel starts at the junction: its flow leaves.
    Leaves,
}

/// One channel end at a junction.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EndView {
    pub channel: String,
    pub side: Side,
    /// Discharge along the channel at the junction, at the junction's
    /// `times`; negative when the channel flows backwards (away from the
    /// junction where it should arrive, or into it where it should leave).
    pub discharge: Vec<f64>,
    /// Its flow (in its `side`'s direction) over the junction's
    /// through-flow, 0 to 1; null while nothing flows through.
    pub share: Vec<Option<f64>>,
    pub peak_discharge: f64,
    #[serde(with = "crate::wire_time")]
    pub peak_time: DateTime<Utc>,
}

/// The flow split at one junction.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct JunctionView {
    pub name: String,
    #[serde(with = "crate::wire_time::vec")]
    pub times: Vec<DateTime<Utc>>,
    pub ends: Vec<EndView>,
}

/// The through-flow at output `k`: everything entering the junction
/// (arrivals flowing in, and leavers flowing backwards into it).
fn through_flow(j: &JunctionFlow, k: usize) -> f64 {
    j.ends
        .iter()
        .map(|e| {
            let q = e.discharge.get(k).copied().unwrap_or(0.0);
            if e.leaves { (-q).max(0.0) } else { q.max(0.0) }
        })
        .sum()
}

/// The document's view of one junction's stored flows, discharges in
/// ft³/s when `us`.
pub fn view(j: &JunctionFlow, us: bool) -> JunctionView {
    let through: Vec<f64> = (0..j.times.len()).map(|k| through_flow(j, k)).collect();
    let scale = if us { FT3_PER_M3 } else { 1.0 };
    let ends = j
        .ends
        .iter()
        .map(|e| {
            let share = e
                .discharge
                .iter()
                .zip(&through)
                .map(|(&q, &t)| (t > NO_FLOW_M3S).then(|| (q / t).clamp(-1.0, 1.0)))
                .collect();
            let (k, peak) = e.discharge.iter().copied().enumerate().fold(
                (0, f64::NEG_INFINITY),
                |best, (k, q)| {
                    if q > best.1 { (k, q) } else { best }
                },
            );
            EndView {
                channel: e.channel.clone(),
                side: if e.leaves {
                    Side::Leaves
                } else {
                    Side::Arrives
                },
                discharge: e.discharge.iter().map(|q| q * scale).collect(),
                share,
                peak_discharge: if peak.is_finite() { peak * scale } else { 0.0 },
                peak_time: j.times.get(k).copied().unwrap_or_default(),
            }
        })
        .collect();
    JunctionView {
        name: j.junction.clone(),
        times: j.times.clone(),
        ends,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::network::EndFlow;

    fn end(channel: &str, leaves: bool, q: &[f64]) -> EndFlow {
        EndFlow {
            channel: channel.into(),
            leaves,
            discharge: q.to_vec(),
        }
    }

    fn junction(ends: Vec<EndFlow>, n: usize) -> JunctionFlow {
        let t0 = DateTime::from_timestamp(1_773_446_400, 0).expect("time");
        JunctionFlow {
            junction: "split".into(),
            times: (0..n)
                .map(|k| t0 + chrono::Duration::minutes(15 * k as i64))
                .collect(),
            ends,
        }
    }

    /// Continuity at a junction (common practice): where a channel splits
    /// in two, the leaving shares add up to one and each is its flow over
    /// the arriving flow.
    #[test]
    fn shares_of_a_split_add_up_to_one() {
        let j = junction(
            vec![
                end("main above", false, &[10.0, 40.0, 0.0]),
                end("main below", true, &[7.5, 30.0, 0.0]),
                end("floodplain path", true, &[2.5, 10.0, 0.0]),
            ],
            3,
        );
        let v = view(&j, false);
        assert_eq!(v.ends[1].share, vec![Some(0.75), Some(0.75), None]);
        assert_eq!(v.ends[2].share, vec![Some(0.25), Some(0.25), None]);
        assert_eq!(v.ends[0].share[1], Some(1.0));
        assert_eq!(v.ends[1].side, Side::Leaves);
        assert_eq!(v.ends[0].peak_discharge, 40.0);
        assert_eq!(v.ends[0].peak_time, j.times[1]);
    }

    /// A leaving path flowing backwards feeds the junction: it counts in
    /// the through-flow and its own share is negative.
    #[test]
    fn backward_flow_counts_as_inflow() {
        let j = junction(
            vec![
                end("a", false, &[6.0]),
                end("b", true, &[-2.0]),
                end("c", true, &[8.0]),
            ],
            1,
        );
        let v = view(&j, false);
        assert_eq!(v.ends[2].share, vec![Some(1.0)]);
        assert_eq!(v.ends[1].share, vec![Some(-0.25)]);
    }

    #[test]
    fn us_units_scale_discharge_not_shares() {
        let j = junction(vec![end("a", false, &[1.0]), end("b", true, &[1.0])], 1);
        let v = view(&j, true);
        assert!((v.ends[0].discharge[0] - 35.314_666_721_488_59).abs() < 1e-9);
        assert_eq!(v.ends[0].share, vec![Some(1.0)]);
    }
}

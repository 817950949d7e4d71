//! The longitudinal profile of a run: along the reach, the bed, the bank
//! tops, the water surface now and the highest water surface forecast at
//! every node (the envelope), with the points of interest and their levels.
//! Pure: the handler passes `now` and what it loaded.
//!
//! A run stores a compact form ([`StoredProfile`]): per node, the stage at
//! the output instants from the last one at or before the issue time
//! through [`WINDOW`] after it, and the highest stage after that window.
//! Seen at a later `now` within the window this gives the stage now by
//! linear interpolation (as every trace is read) and the highest stage
//! from now on, without storing every node's whole hydrograph.

use chrono::{DateTime, Duration, Utc};

use crate::engine::section::CrossSection;
use serde::{Deserialize, Serialize};

use super::{
    ensemble::summary::{EnsembleSummary, PercentileTrace},
    levels::LevelKind,
    record::StoredResults,
    spec::{PointKind, ReachSpec, Units},
    view::{self, FT_PER_M, PointView},
};

/// How long after its issue time a run's profile can say the stage "now":
/// runs are made every few minutes to half an hour, so three hours covers
/// a forecast that has become stale several times over.
pub const WINDOW: Duration = Duration::hours(3);

/// What a run stores for its profile.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StoredProfile {
    /// The instant the run's forecast was issued for.
    #[serde(with = "crate::wire_time")]
    pub issued: DateTime<Utc>,
    /// Node chainages (m), upstream first.
    pub chainage: Vec<f64>,
    /// Bed elevation per node (m).
    pub bed: Vec<f64>,
    /// The output instants kept.
    #[serde(with = "crate::wire_time::vec")]
    pub times: Vec<DateTime<Utc>>,
    /// Stage per kept instant, one value per node (m).
    pub stage: Vec<Vec<f64>>,
    /// Per node, the highest stage after the kept instants (the last kept
    /// sample when the run ends within the window).
    pub tail: Vec<TailCrest>,
    /// In a network, where each channel's nodes are; empty for one channel.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub channels: Vec<ChannelSpan>,
}

/// The highest stage at a node after the window, and when.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TailCrest {
    pub stage: f64,
    #[serde(with = "crate::wire_time")]
    pub time: DateTime<Utc>,
}

/// A run's node results, as the router gave them.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct NodeRows {
    pub chainage: Vec<f64>,
    pub bed: Vec<f64>,
    pub times: Vec<DateTime<Utc>>,
    /// Stage per output instant, one value per node (m).
    pub stage: Vec<Vec<f64>>,
    /// In a network, where each channel's nodes are (empty for one
    /// channel).
    pub spans: Vec<ChannelSpan>,
}

/// A channel's nodes among a network's: `len` nodes from `start`.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ChannelSpan {
    pub name: String,
    pub start: usize,
    pub len: usize,
}

impl StoredProfile {
    /// The compact profile of `rows` for a run issued at `issued`; `None`
    /// for a run without output.
    pub fn keep(rows: &NodeRows, issued: DateTime<Utc>) -> Option<Self> {
        let n = rows.times.len().min(rows.stage.len());
        if n == 0 {
            return None;
        }
        let last_at = |t: DateTime<Utc>| rows.times[..n].partition_point(|x| *x <= t);
        let i0 = last_at(issued).saturating_sub(1);
        let i1 = last_at(issued + WINDOW).saturating_sub(1).max(i0);
        let tail = (0..rows.chainage.len())
            .map(|j| {
                let first = (i1 + 1).min(n - 1);
                let mut best = TailCrest {
                    stage: rows.stage[first][j],
                    time: rows.times[first],
                };
                for i in first + 1..n {
                    if rows.stage[i][j] > best.stage {
                        best = TailCrest {
                            stage: rows.stage[i][j],
                            time: rows.times[i],
                        };
                    }
                }
                best
            })
            .collect();
        Some(Self {
            issued,
            chainage: rows.chainage.clone(),
            bed: rows.bed.clone(),
            times: rows.times[i0..=i1].to_vec(),
            stage: rows.stage[i0..=i1].to_vec(),
            tail,
            channels: rows.spans.clone(),
        })
    }

    /// Node `j` seen at `now`: the stage now (`None` outside the kept
    /// instants) and the highest stage from now on with its time.
    fn node_at(&self, j: usize, now: DateTime<Utc>) -> ProfileNode {
        let times = &self.times;
        let stage_now = stage_at(times, |i| self.stage[i][j], now);
        let mut highest = self.tail[j];
        let mut consider = |stage: f64, time: DateTime<Utc>| {
            if stage >= highest.stage {
                highest = TailCrest { stage, time };
            }
        };
        // Latest first, so that on a tie the earliest instant wins.
        for i in (0..times.len()).rev().filter(|&i| times[i] > now) {
            consider(self.stage[i][j], times[i]);
        }
        if let Some(z) = stage_now {
            consider(z, now);
        }
        ProfileNode {
            chainage: self.chainage[j],
            bed: self.bed[j],
            stage_now,
            highest: highest.stage,
            highest_time: highest.time,
        }
    }
}

/// The stage at `now` interpolated linearly between the kept instants;
/// `None` before the first or after the last.
fn stage_at(
    times: &[DateTime<Utc>],
    stage: impl Fn(usize) -> f64,
    now: DateTime<Utc>,
) -> Option<f64> {
    let k = times.partition_point(|t| *t <= now);
    if k == 0 {
        return None;
    }
    if k == times.len() {
        return (times[k - 1] == now).then(|| stage(k - 1));
    }
    let span = (times[k] - times[k - 1]).num_milliseconds() as f64;
    let w = (now - times[k - 1]).num_milliseconds() as f64 / span;
    Some(stage(k - 1) + (stage(k) - stage(k - 1)) * w)
}

/// One node of the profile.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProfileNode {
    pub chainage: f64,
    pub bed: f64,
    pub stage_now: Option<f64>,
    /// Highest forecast water surface from now on (the envelope).
    pub highest: f64,
    #[serde(with = "crate::wire_time")]
    pub highest_time: DateTime<Utc>,
}

/// The bank tops of one surveyed section.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Banks {
    pub chainage: f64,
    pub section: String,
    pub left_top: Option<f64>,
    pub right_top: Option<f64>,
}

/// A level drawn at a point.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProfileLevel {
    pub id: String,
    pub kind: LevelKind,
    pub name: String,
    pub elevation: f64,
}

/// A point of interest on the profile: its stage now and its forecast
/// crest from now on (the same as the forecast's).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProfilePoint {
    pub id: String,
    pub name: String,
    pub kind: PointKind,
    pub chainage: f64,
    pub bed: f64,
    pub stage_now: Option<f64>,
    pub highest: f64,
    #[serde(with = "crate::wire_time")]
    pub highest_time: DateTime<Utc>,
    pub low_chord: Option<f64>,
    pub deck: Option<f64>,
    pub levels: Vec<ProfileLevel>,
}

/// The profile of a run seen at `now`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Profile {
    /// The channel drawn, when one was asked for; absent: the whole reach
    /// (of one channel) or a network's main stem.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub channel: Option<String>,
    /// A network's channels, each with whether it is on the main stem
    /// (empty for a reach of one channel).
    pub channels: Vec<ProfileChannel>,
    pub nodes: Vec<ProfileNode>,
    pub banks: Vec<Banks>,
    pub points: Vec<ProfilePoint>,
    /// Per ensemble percentile, the members' highest water surface at
    /// every node from the run's issue time on (empty without an
    /// ensemble): the band around the envelope.
    pub highest_percentiles: Vec<PercentileTrace>,
}

/// A channel of a network as the profile lists it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProfileChannel {
    pub name: String,
    pub main_stem: bool,
}

/// The channel asked for is not one of the reach's.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("`{asked}` is not a channel of this reach (its channels: {known})")]
pub struct UnknownChannel {
    pub asked: String,
    pub known: String,
}

/// The channel named `asked` (its index in `spec.channels`), or `None`
/// when none is asked for; a name that is not one of the reach's channels
/// (a reach of one channel has none) is refused.
pub fn resolve_channel(
    spec: &ReachSpec,
    asked: Option<&str>,
) -> Result<Option<usize>, UnknownChannel> {
    let Some(name) = asked else { return Ok(None) };
    match spec.channels.iter().position(|c| c.name == name) {
        Some(i) => Ok(Some(i)),
        None => Err(UnknownChannel {
            asked: name.to_owned(),
            known: spec
                .channels
                .iter()
                .map(|c| format!("`{}`", c.name))
                .collect::<Vec<_>>()
                .join(", "),
        }),
    }
}

/// The channels drawn (indices into `spec.channels`), `None` for a reach
/// of one channel: `channel`, or the main stem.
fn chosen(spec: &ReachSpec, channel: Option<usize>) -> Option<Vec<usize>> {
    match channel {
        Some(i) => Some(vec![i]),
        None if spec.channels.is_empty() => None,
        None => Some(super::channels::main_stem(&spec.channels)),
    }
}

/// The profile at `now` of a stored run with `results` in `units`: its
/// nodes, the bank tops of `spec`'s sections, and its points as the
/// forecast view sees them (observations are not drawn, so none are read);
/// in a network, of `channel` (from [`resolve_channel`]) or else of the
/// main stem.
pub fn profile(
    stored: &StoredProfile,
    spec: &ReachSpec,
    results: &StoredResults,
    ensemble: Option<&EnsembleSummary>,
    (units, now): (Units, DateTime<Utc>),
    channel: Option<usize>,
) -> Profile {
    let chosen = chosen(spec, channel);
    let names: Option<Vec<&str>> = chosen
        .as_ref()
        .map(|ix| ix.iter().map(|&i| spec.channels[i].name.as_str()).collect());
    let drawn = |c: &Option<String>| match (&names, c) {
        (None, _) => true,
        (Some(n), Some(c)) => n.contains(&c.as_str()),
        (Some(_), None) => false,
    };
    let mut views = view::points(spec, results, ensemble, &|_| Vec::new(), now);
    views.retain(|v| drawn(&v.forecast.channel));
    if units == Units::Us {
        views.iter_mut().for_each(PointView::to_us);
    }
    let indices = node_indices(stored, names.as_deref());
    let nodes = indices.iter().map(|&j| stored.node_at(j, now)).collect();
    let sections: Vec<&CrossSection> = match &chosen {
        None => spec.sections.iter().collect(),
        Some(ix) => ix
            .iter()
            .flat_map(|&i| spec.channels[i].sections.iter())
            .collect(),
    };
    let banks = sections
        .into_iter()
        .map(|s| {
            let [left_top, right_top] = s.geometry.bank_tops();
            Banks {
                chainage: s.chainage,
                section: s.name.clone(),
                left_top,
                right_top,
            }
        })
        .collect();
    // A band from another node layout (it cannot be, but a stored row
    // could be edited) is not drawn.
    let highest_percentiles = ensemble
        .map(|e| e.node_crest.clone())
        .filter(|b| b.iter().all(|t| t.stage.len() == stored.chainage.len()))
        .unwrap_or_default()
        .into_iter()
        .map(|t| PercentileTrace {
            stage: indices.iter().map(|&j| t.stage[j]).collect(),
            ..t
        })
        .collect();
    let stem = super::channels::main_stem(&spec.channels);
    let mut p = Profile {
        channel: channel.map(|i| spec.channels[i].name.clone()),
        channels: spec
            .channels
            .iter()
            .enumerate()
            .map(|(i, c)| ProfileChannel {
                name: c.name.clone(),
                main_stem: stem.contains(&i),
            })
            .collect(),
        nodes,
        banks,
        points: views.iter().map(point).collect(),
        highest_percentiles,
    };
    if units == Units::Us {
        p.nodes_to_us();
    }
    p
}

/// The stored nodes of the channels `names` in that order (all of them for
/// one channel, or for a run stored before networks).
fn node_indices(stored: &StoredProfile, names: Option<&[&str]>) -> Vec<usize> {
    match names {
        Some(names) if !stored.channels.is_empty() => names
            .iter()
            .filter_map(|n| stored.channels.iter().find(|s| s.name == *n))
            .filter(|s| s.start + s.len <= stored.chainage.len())
            .flat_map(|s| s.start..s.start + s.len)
            .collect(),
        _ => (0..stored.chainage.len()).collect(),
    }
}

fn point(v: &PointView) -> ProfilePoint {
    let f = &v.forecast;
    ProfilePoint {
        id: f.id.clone(),
        name: f.name.clone(),
        kind: f.kind,
        chainage: f.chainage,
        bed: f.bed_elevation,
        stage_now: v.current_stage.is_finite().then_some(v.current_stage),
        highest: f.crest_stage,
        highest_time: f.crest_time,
        low_chord: f.low_chord,
        deck: f.deck,
        levels: f
            .levels
            .iter()
            .map(|l| ProfileLevel {
                id: l.id.clone(),
                kind: l.kind,
                name: l.name.clone(),
                elevation: l.elevation,
            })
            .collect(),
    }
}

impl Profile {
    /// Converts the nodes' and banks' lengths (chainage included) to feet;
    /// the points come from views already in the unit asked for.
    fn nodes_to_us(&mut self) {
        let l = |v: &mut f64| *v *= FT_PER_M;
        for n in &mut self.nodes {
            l(&mut n.chainage);
            l(&mut n.bed);
            l(&mut n.highest);
            n.stage_now.iter_mut().for_each(l);
        }
        for t in &mut self.highest_percentiles {
            t.stage.iter_mut().for_each(l);
        }
        for b in &mut self.banks {
            l(&mut b.chainage);
            b.left_top.iter_mut().for_each(l);
            b.right_top.iter_mut().for_each(l);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(min: i64) -> DateTime<Utc> {
        DateTime::from_timestamp(1_800_000_000, 0).expect("time") + Duration::minutes(min)
    }

    /// Two nodes, output every hour for 10 h; node 0 peaks at 5 h, node 1
    /// at 7 h; issued at 2 h 30 min.
    fn rows() -> NodeRows {
        let times: Vec<_> = (0..=10).map(|h| t(60 * h)).collect();
        let stage = (0..=10)
            .map(|h| {
                let h = h as f64;
                vec![10.0 - (h - 5.0).abs() * 0.5, 8.0 - (h - 7.0).abs() * 0.25]
            })
            .collect();
        NodeRows {
            chainage: vec![0.0, 1000.0],
            bed: vec![7.0, 6.0],
            times,
            stage,
            spans: vec![],
        }
    }

    #[test]
    fn keeps_the_window_and_the_crest_after_it() {
        let p = StoredProfile::keep(&rows(), t(150)).expect("profile");
        // From 02:00 (last at or before issue) through 05:30 → 05:00.
        assert_eq!(p.times, vec![t(120), t(180), t(240), t(300)]);
        // After the window node 0 falls (highest 9.5 m at 06:00), node 1
        // still peaks at 07:00 (8.0 m).
        assert_eq!(
            p.tail[0],
            TailCrest {
                stage: 9.5,
                time: t(360)
            }
        );
        assert_eq!(
            p.tail[1],
            TailCrest {
                stage: 8.0,
                time: t(420)
            }
        );
    }

    /// Stage now by similar triangles; the envelope is the highest of the
    /// stage now, the later kept samples and the tail crest.
    #[test]
    fn seen_later_the_stage_now_interpolates_and_the_envelope_looks_ahead() {
        let p = StoredProfile::keep(&rows(), t(150)).expect("profile");
        let n0 = p.node_at(0, t(210));
        // 03:30 between 03:00 (9.0) and 04:00 (9.5): 9.25 m.
        assert!((n0.stage_now.expect("now") - 9.25).abs() < 1e-12);
        assert_eq!((n0.highest, n0.highest_time), (10.0, t(300)));
        let n1 = p.node_at(1, t(210));
        assert_eq!((n1.highest, n1.highest_time), (8.0, t(420)));
        // After the window: no stage now; the tail still gives the crest.
        let late = p.node_at(1, t(400));
        assert_eq!(late.stage_now, None);
        assert_eq!(late.highest, 8.0);
        // The envelope is never below the water now.
        for m in (120..300).step_by(7) {
            for j in 0..2 {
                let n = p.node_at(j, t(m));
                assert!(n.highest >= n.stage_now.expect("inside"), "{m} {j}");
            }
        }
    }
}

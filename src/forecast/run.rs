//! One routing run of a reach: from a reach description and an inflow
//! hydrograph to stage and discharge hydrographs, crests and the
//! crossings of every level at every point of interest.
//!
//! Pure: no I/O, no clock (the caller measures wall time), so the offline
//! `route` command, the scheduler and the tests share it.

use chrono::{DateTime, Duration, Utc};
use serde::{Deserialize, Serialize};

use crate::engine::{
    diffusive::{self, Diagnostics, DownstreamBoundary, InitialState, Lateral, Options, Reach},
    kinematic,
    network::NetworkResult,
    props::Hydraulics,
    rating::RatingCurve,
    roughness::Roughened,
    routing::RoutingResult,
    section::{Node, build_nodes},
    series::Series,
};

use super::{
    hydrograph::{Hydrograph, seconds},
    level::{LevelOutlook, Trace},
    levels::levels_of,
    network::{self, JunctionFlow, PreparedNetwork},
    profile::{ChannelSpan, NodeRows},
    spec::{DownstreamSpec, FlowPoint, Method, PointKind, PointSpec, ReachSpec, SpecError},
};

/// Why a run could not be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RunError {
    // Not `#[from]`: that would make the field error the source too, and
    // an error chain (`{:#}`) would print it twice.
    #[error("reach description: {0}")]
    Spec(SpecError),
    #[error("routing failed: {0}")]
    Routing(String),
}

impl From<SpecError> for RunError {
    fn from(e: SpecError) -> Self {
        Self::Spec(e)
    }
}

/// Forecast at one point of interest.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PointForecast {
    /// The point's id ([`PointSpec::point_id`]); empty in runs stored
    /// before points had ids, until `StoredResults` fills it in.
    #[serde(default)]
    pub id: String,
    pub name: String,
    /// The channel it lies on, in a reach of several channels.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub channel: Option<String>,
    pub chainage: f64,
    pub kind: PointKind,
    /// Bed elevation interpolated from the neighbouring nodes (m).
    pub bed_elevation: f64,
    pub low_chord: Option<f64>,
    pub deck: Option<f64>,
    #[serde(with = "crate::wire_time::vec")]
    pub times: Vec<DateTime<Utc>>,
    /// Water-surface elevation (m).
    pub stage: Vec<f64>,
    /// Discharge (m³/s).
    pub discharge: Vec<f64>,
    pub crest_stage: f64,
    #[serde(with = "crate::wire_time")]
    pub crest_time: DateTime<Utc>,
    pub peak_discharge: f64,
    /// Low chord minus crest stage (m): negative means the water reaches the
    /// bridge structure.
    pub low_chord_margin: Option<f64>,
    /// Deck minus crest stage (m): negative means overtopping.
    pub deck_margin: Option<f64>,
    /// Every level of the point ([`levels_of`]): thresholds, low chord
    /// and deck, lowest first; seen from the run's start.
    #[serde(alias = "thresholds")]
    pub levels: Vec<LevelOutlook>,
}

/// Result of one run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunOutput {
    pub reach: String,
    pub method: Method,
    #[serde(with = "crate::wire_time")]
    pub start: DateTime<Utc>,
    #[serde(with = "crate::wire_time")]
    pub end: DateTime<Utc>,
    pub nodes: usize,
    /// Ordered downstream (channel by channel in a network).
    pub points: Vec<PointForecast>,
    pub diagnostics: Diagnostics,
    /// Water-surface elevation at every node at the end (hot start),
    /// channel after channel in a network.
    pub final_state: Vec<f64>,
    /// In a network, the flow split at every junction.
    pub junctions: Vec<JunctionFlow>,
    /// Every node's stage hydrograph, for the longitudinal profile.
    #[serde(skip)]
    pub node_rows: NodeRows,
}

/// What every run of one reach version shares: the computational nodes
/// (property tables) and the downstream rating sampled for the solver.
/// Built once per reach version and reused by every ensemble member and
/// every cycle, since building them costs about as much as a routing.
#[derive(Debug)]
pub struct Prepared {
    shape: Shape,
    /// `(stage, discharge)` pairs of a `rating` downstream boundary.
    rating: Option<Vec<(f64, f64)>>,
}

/// One channel's nodes, or a network's.
#[derive(Debug)]
enum Shape {
    One {
        nodes: Vec<Node>,
        chainage: Vec<f64>,
    },
    Network(PreparedNetwork),
}

impl Prepared {
    /// Validates `spec` and builds what its runs share.
    pub fn new(spec: &ReachSpec) -> Result<Self, RunError> {
        spec.validate()?;
        let shape = if spec.channels.is_empty() {
            let nodes = build_nodes(&spec.roughness.apply(&spec.sections), spec.max_node_spacing)
                .map_err(|e| RunError::Spec(SpecError::new("sections", e.to_string())))?;
            let chainage = nodes.iter().map(|n| n.chainage).collect();
            Shape::One { nodes, chainage }
        } else {
            Shape::Network(PreparedNetwork::new(spec)?)
        };
        let rating = match &spec.downstream {
            DownstreamSpec::Rating { rating } => Some(rating_table(spec, rating)?),
            _ => None,
        };
        Ok(Self { shape, rating })
    }

    /// Number of computational nodes (of every channel).
    pub fn node_count(&self) -> usize {
        match &self.shape {
            Shape::One { nodes, .. } => nodes.len(),
            Shape::Network(net) => net.node_count(),
        }
    }
}

/// What an ensemble member changes in the reach itself (its inflow is
/// changed before the run).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Adjust {
    /// Factor on every Manning's n.
    pub manning: f64,
    /// Factor on the downstream rating's discharge.
    pub rating: f64,
}

impl Adjust {
    /// Changes nothing.
    pub const NONE: Adjust = Adjust {
        manning: 1.0,
        rating: 1.0,
    };
}

/// Routes `inflow` through the reach with the method of `method` (or the
/// reach's own).
pub fn run(
    spec: &ReachSpec,
    inflow: &Hydrograph,
    method: Option<Method>,
) -> Result<RunOutput, RunError> {
    let prepared = Prepared::new(spec)?;
    run_prepared(spec, &prepared, inflow, method, Adjust::NONE)
}

/// [`run`] on what [`Prepared::new`] built from the same `spec`, with a
/// member's adjustments (`Adjust::NONE` for the deterministic run).
pub fn run_prepared(
    spec: &ReachSpec,
    prepared: &Prepared,
    inflow: &Hydrograph,
    method: Option<Method>,
    adjust: Adjust,
) -> Result<RunOutput, RunError> {
    let factor = adjust.manning;
    match &prepared.shape {
        Shape::One { nodes, chainage } if adjust.manning == 1.0 => {
            route_on(spec, prepared, (nodes, chainage), inflow, method, adjust)
        }
        Shape::One { nodes, chainage } => {
            let rough = roughened(nodes, factor);
            route_on(spec, prepared, (&rough, chainage), inflow, method, adjust)
        }
        Shape::Network(net) if adjust.manning == 1.0 => {
            let views: Vec<&[Node]> = net.channels.iter().map(|c| c.nodes.as_slice()).collect();
            route_network_on(spec, prepared, net, &views, inflow, adjust)
        }
        Shape::Network(net) => {
            let rough: Vec<Vec<Roughened<'_, Node>>> = net
                .channels
                .iter()
                .map(|c| roughened(&c.nodes, factor))
                .collect();
            let views: Vec<&[Roughened<'_, Node>]> = rough.iter().map(Vec::as_slice).collect();
            route_network_on(spec, prepared, net, &views, inflow, adjust)
        }
    }
}

/// A view of `nodes` with every Manning's n times `factor`.
fn roughened(nodes: &[Node], factor: f64) -> Vec<Roughened<'_, Node>> {
    nodes.iter().map(|n| Roughened::new(n, factor)).collect()
}

/// The diffusive solver's options from the reach's settings.
fn options_of(spec: &ReachSpec) -> Options {
    let defaults = Options::default();
    Options {
        theta: spec.routing.theta,
        dt_max: spec.routing.dt_max_s,
        // A largest step below the usual first step starts there.
        dt_initial: defaults.dt_initial.min(spec.routing.dt_max_s),
        ..defaults
    }
}

/// A run of a network reach on `views` of its channels' nodes.
fn route_network_on<H: Hydraulics>(
    spec: &ReachSpec,
    prepared: &Prepared,
    net: &PreparedNetwork,
    views: &[&[H]],
    inflow: &Hydrograph,
    adjust: Adjust,
) -> Result<RunOutput, RunError> {
    let (t0, t_end) = (inflow.start(), inflow.end());
    let upstream = inflow.to_series(t0);
    let series = |path: &str, points: &[FlowPoint]| flow_series(path, points, t0);
    let inputs = network::Inputs {
        start: t0,
        upstream: &upstream,
        downstream: downstream_boundary(spec, prepared, t0, adjust.rating)?,
        options: options_of(spec),
        output_times: output_times(seconds(t_end, t0), spec.routing.output_interval_s),
        series: &series,
    };
    let network::Routed {
        result,
        times,
        junctions,
    } = network::route(spec, net, views, inputs)?;
    let mut points = Vec::with_capacity(spec.points.len());
    for (ci, c) in net.channels.iter().enumerate() {
        let out = &result.channels[ci];
        let mut on: Vec<&PointSpec> = spec
            .points
            .iter()
            .filter(|p| p.channel.as_deref() == Some(c.name.as_str()))
            .collect();
        on.sort_by(|a, b| a.chainage.total_cmp(&b.chainage));
        for p in on {
            let rows = (out.stage.as_slice(), out.discharge.as_slice());
            points.push(point_forecast(p, views[ci], &c.chainage, &times, rows)?);
        }
    }
    let rows = network_rows(net, views, &result, times);
    Ok(RunOutput {
        reach: spec.name.clone(),
        method: Method::Diffusive,
        start: t0,
        end: t_end,
        nodes: rows.chainage.len(),
        points,
        diagnostics: result.diagnostics,
        final_state: result.final_state.concat(),
        junctions,
        node_rows: rows,
    })
}

/// Every node's rows of a network run for the profile: channel after
/// channel, with where each channel's nodes are.
fn network_rows<H: Hydraulics>(
    net: &PreparedNetwork,
    views: &[&[H]],
    result: &NetworkResult,
    times: Vec<DateTime<Utc>>,
) -> NodeRows {
    let mut rows = NodeRows {
        times,
        ..NodeRows::default()
    };
    for (ci, c) in net.channels.iter().enumerate() {
        rows.spans.push(ChannelSpan {
            name: c.name.clone(),
            start: rows.chainage.len(),
            len: c.chainage.len(),
        });
        rows.chainage.extend_from_slice(&c.chainage);
        rows.bed.extend(views[ci].iter().map(|n| n.bed_elevation()));
    }
    rows.stage = (0..rows.times.len())
        .map(|k| {
            result
                .channels
                .iter()
                .flat_map(|c| c.stage[k].iter().copied())
                .collect()
        })
        .collect();
    rows
}

/// The run on `nodes` (the prepared nodes, or a view of them).
fn route_on<H: Hydraulics>(
    spec: &ReachSpec,
    prepared: &Prepared,
    (nodes, chainage): (&[H], &[f64]),
    inflow: &Hydrograph,
    method: Option<Method>,
    adjust: Adjust,
) -> Result<RunOutput, RunError> {
    let method = method.unwrap_or(spec.routing.method);
    let (t0, t_end) = (inflow.start(), inflow.end());
    let upstream = inflow.to_series(t0);

    let output_times = output_times(seconds(t_end, t0), spec.routing.output_interval_s);
    let laterals = laterals_of(spec, t0)?;

    let reach = Reach::new(chainage, nodes).map_err(|e| RunError::Routing(e.to_string()))?;

    let result = match method {
        Method::Diffusive => {
            let downstream = downstream_boundary(spec, prepared, t0, adjust.rating)?;
            let options = options_of(spec);
            let problem = diffusive::Problem {
                reach,
                upstream,
                downstream,
                laterals,
                initial: InitialState::Steady,
                start_time: 0.0,
                output_times,
                options,
            };
            diffusive::route(&problem).map_err(|e| RunError::Routing(e.to_string()))?
        }
        Method::Kinematic => {
            let problem = kinematic::Problem {
                reach,
                upstream,
                laterals,
                start_time: 0.0,
                output_times,
                dt: spec.routing.kinematic_dt_s,
            };
            kinematic::route(&problem).map_err(|e| RunError::Routing(e.to_string()))?
        }
    };

    output_of(spec, nodes, chainage, method, (t0, t_end), result)
}

/// The run's output from the router's result: time stamps, each point's
/// forecast (ordered downstream) and the node rows for the profile.
fn output_of<H: Hydraulics>(
    spec: &ReachSpec,
    nodes: &[H],
    chainage: &[f64],
    method: Method,
    (t0, t_end): (DateTime<Utc>, DateTime<Utc>),
    result: RoutingResult,
) -> Result<RunOutput, RunError> {
    let times = instants(t0, &result.output_times);
    let mut order: Vec<&PointSpec> = spec.points.iter().collect();
    order.sort_by(|a, b| a.chainage.total_cmp(&b.chainage));
    let points = order
        .into_iter()
        .map(|p| {
            let rows = (result.stage.as_slice(), result.discharge.as_slice());
            point_forecast(p, nodes, chainage, &times, rows)
        })
        .collect::<Result<Vec<_>, _>>()?;

    let node_rows = NodeRows {
        bed: nodes.iter().map(|n| n.bed_elevation()).collect(),
        chainage: chainage.to_vec(),
        times,
        stage: result.stage,
        spans: Vec::new(),
    };
    Ok(RunOutput {
        reach: spec.name.clone(),
        method,
        start: t0,
        end: t_end,
        nodes: nodes.len(),
        points,
        diagnostics: result.diagnostics,
        final_state: result.final_state,
        junctions: Vec::new(),
        node_rows,
    })
}

/// The run's output instants as times.
pub(super) fn instants(t0: DateTime<Utc>, seconds: &[f64]) -> Vec<DateTime<Utc>> {
    seconds
        .iter()
        .map(|s| t0 + Duration::milliseconds((s * 1000.0).round() as i64))
        .collect()
}

/// Output instants (s from the start): every `step` from 0, plus the end
/// itself.
fn output_times(horizon: f64, step: f64) -> Vec<f64> {
    let mut out: Vec<f64> = Vec::new();
    let mut k = 0u32;
    loop {
        let t = f64::from(k) * step;
        if t >= horizon - 1e-6 {
            break;
        }
        out.push(t);
        k += 1;
    }
    out.push(horizon);
    out
}

/// The tributary inflows of `spec` in seconds from `t0`.
fn laterals_of(spec: &ReachSpec, t0: DateTime<Utc>) -> Result<Vec<Lateral>, RunError> {
    spec.laterals
        .iter()
        .enumerate()
        .map(|(i, l)| {
            Ok(Lateral {
                chainage: l.chainage,
                inflow: flow_series(&format!("laterals[{i}]"), &l.inflow, t0)?,
            })
        })
        .collect()
}

/// The hydrograph of the tributary at `path` in seconds from `t0`.
fn flow_series(path: &str, points: &[FlowPoint], t0: DateTime<Utc>) -> Result<Series, RunError> {
    Series::new(
        points
            .iter()
            .map(|p| seconds(p.time.with_timezone(&Utc), t0))
            .collect(),
        points.iter().map(|p| p.discharge).collect(),
    )
    .map_err(|e| RunError::Spec(SpecError::new(format!("{path}.inflow"), e.to_string())))
}

/// The forecast at one point: node results interpolated to its chainage,
/// the crest, and each threshold ranked by elevation and seen from the
/// run's start.
fn point_forecast<H: Hydraulics>(
    p: &PointSpec,
    nodes: &[H],
    chainage: &[f64],
    times: &[DateTime<Utc>],
    (stage_rows, discharge_rows): (&[Vec<f64>], &[Vec<f64>]),
) -> Result<PointForecast, RunError> {
    let (i, w) = bracket(chainage, p.chainage);
    let lerp = |row: &Vec<f64>| row[i] * (1.0 - w) + row[i + 1] * w;
    let stage: Vec<f64> = stage_rows.iter().map(lerp).collect();
    let discharge: Vec<f64> = discharge_rows.iter().map(lerp).collect();
    let bed = nodes[i].bed_elevation() * (1.0 - w) + nodes[i + 1].bed_elevation() * w;
    // Seen from the run's own start.
    let ahead = Trace::new(times, &stage).ahead(times[0]);
    let crest = ahead
        .crest()
        .ok_or_else(|| RunError::Routing(format!("non-finite stage at point `{}`", p.name)))?;
    let peak_discharge = discharge.iter().copied().fold(0.0, f64::max);
    let levels = levels_of(p).iter().map(|l| ahead.level(l)).collect();
    Ok(PointForecast {
        id: p.point_id(),
        name: p.name.clone(),
        channel: p.channel.clone(),
        chainage: p.chainage,
        kind: p.kind,
        bed_elevation: bed,
        low_chord: p.low_chord,
        deck: p.deck,
        times: times.to_vec(),
        stage,
        discharge,
        crest_stage: crest.stage,
        crest_time: crest.time,
        peak_discharge,
        low_chord_margin: p.low_chord.map(|lc| lc - crest.stage),
        deck_margin: p.deck.map(|d| d - crest.stage),
        levels,
    })
}

/// Bed elevation at a chainage, interpolated between nodes; `None` outside
/// the reach or with fewer than two nodes.
pub fn bed_at(nodes: &[Node], chainage: f64) -> Option<f64> {
    let c: Vec<f64> = nodes.iter().map(|n| n.chainage).collect();
    if c.len() < 2 || !(chainage >= c[0] && chainage <= c[c.len() - 1]) {
        return None;
    }
    let (i, w) = bracket(&c, chainage);
    Some(nodes[i].bed_elevation() * (1.0 - w) + nodes[i + 1].bed_elevation() * w)
}

/// Index `i` and weight `w` such that `x = (1−w)·c[i] + w·c[i+1]`.
/// `c` has at least two strictly increasing values and `x` lies within.
fn bracket(c: &[f64], x: f64) -> (usize, f64) {
    let n = c.len();
    let i = c.partition_point(|&ci| ci <= x).clamp(1, n - 1) - 1;
    let w = ((x - c[i]) / (c[i + 1] - c[i])).clamp(0.0, 1.0);
    (i, w)
}

/// The solver's downstream boundary; a rating's discharges times
/// `rating_factor`.
fn downstream_boundary(
    spec: &ReachSpec,
    prepared: &Prepared,
    t0: DateTime<Utc>,
    rating_factor: f64,
) -> Result<DownstreamBoundary, RunError> {
    Ok(match &spec.downstream {
        DownstreamSpec::NormalDepth { friction_slope } => DownstreamBoundary::NormalDepth {
            friction_slope: *friction_slope,
        },
        DownstreamSpec::FixedStage { stage } => DownstreamBoundary::FixedStage { stage: *stage },
        DownstreamSpec::StageSeries { series } => DownstreamBoundary::StageSeries(
            Series::new(
                series
                    .iter()
                    .map(|p| seconds(p.time.with_timezone(&Utc), t0))
                    .collect(),
                series.iter().map(|p| p.stage).collect(),
            )
            .map_err(|e| RunError::Spec(SpecError::new("downstream.series", e.to_string())))?,
        ),
        DownstreamSpec::Rating { .. } => {
            let table = prepared
                .rating
                .as_ref()
                .ok_or_else(|| RunError::Spec(SpecError::new("downstream", "not prepared")))?;
            DownstreamBoundary::Rating {
                table: table.iter().map(|&(z, q)| (z, q * rating_factor)).collect(),
            }
        }
    })
}

/// The solver takes a rating as a table: the rating sampled finely over the
/// range of stages the last section can hold.
fn rating_table(spec: &ReachSpec, rating: &RatingCurve) -> Result<Vec<(f64, f64)>, RunError> {
    let last = spec
        .outlet_section()
        .ok_or_else(|| RunError::Spec(SpecError::new("sections", "empty")))?;
    let table = crate::engine::section::PropertyTable::from_section(last)
        .map_err(|e| RunError::Spec(SpecError::new("sections", e.to_string())))?;
    let lo = table.bed();
    let hi = table.extrapolation_elevation() + 5.0;
    let n = 400;
    (0..=n)
        .map(|k| {
            let z = lo + (hi - lo) * f64::from(k) / f64::from(n);
            let q = rating
                .discharge(z)
                .map_err(|e| RunError::Spec(SpecError::new("downstream.rating", e.to_string())))?;
            Ok((z, q))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bracket_finds_segment_and_weight() {
        let c = [0.0, 100.0, 300.0];
        assert_eq!(bracket(&c, 0.0), (0, 0.0));
        assert_eq!(bracket(&c, 50.0), (0, 0.5));
        assert_eq!(bracket(&c, 200.0), (1, 0.5));
        assert_eq!(bracket(&c, 300.0), (1, 1.0));
    }
}

//! The reach description: the JSON document (`REACH.json`) that the offline
//! `route` command reads and the service stores per reach version.
//!
//! It is user input, so it is parsed strictly (unknown fields are errors)
//! and validated in full by [`ReachSpec::validate`], with every error naming
//! the field as a JSON path (`points[2].thresholds[0].elevation`) so a
//! hydrologist can fix the file without reading code. Times inside the
//! document are RFC 3339 with an explicit offset; quantities are SI.

use chrono::{DateTime, FixedOffset};
use serde::{Deserialize, Serialize};

use super::channels::{self, ChannelEnd, ChannelSpec, ChannelStart, check_on_channel};
use crate::engine::{rating::RatingCurve, section::CrossSection};
use crate::forecast::ensemble::EnsembleSpec;
use crate::forecast::multipliers::RoughnessMultipliers;
use crate::gauge::{slug_of, valid_slug};

/// A reach: surveyed sections, the downstream boundary, tributaries and the
/// points of interest whose stages the forecast reports.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReachSpec {
    /// Display name of the reach.
    pub name: String,
    /// Free text shown with the reach.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub description: Option<String>,
    /// Cross-sections, chainage (m) increasing downstream; empty (absent)
    /// in a reach of several `channels`.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub sections: Vec<CrossSection>,
    /// Channels joined at junctions, each with its own sections
    /// ([`super::channels`]); absent for a reach of one channel.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub channels: Vec<ChannelSpec>,
    /// Largest distance between computational nodes (m); sections are
    /// interpolated to meet it.
    #[serde(default = "default_max_node_spacing")]
    pub max_node_spacing: f64,
    /// What happens at the downstream end.
    pub downstream: DownstreamSpec,
    /// Tributaries and other point inflows.
    #[serde(default)]
    pub laterals: Vec<LateralSpec>,
    /// Places where stage matters.
    pub points: Vec<PointSpec>,
    /// Numerical settings.
    #[serde(default)]
    pub routing: RoutingSpec,
    /// Ensemble members and their spreads.
    #[serde(default)]
    pub ensemble: EnsembleSpec,
    /// How the service uses the reach (ignored by the offline command).
    #[serde(default)]
    pub service: ServiceSpec,
    /// Calibrated factors on Manning's n (`reachcast calibrate` proposes
    /// them); omitted when both are 1.
    #[serde(default, skip_serializing_if = "RoughnessMultipliers::is_identity")]
    pub roughness: RoughnessMultipliers,
}

/// Units a reach is displayed in. Storage and computation are always SI.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Units {
    /// Metres and m³/s.
    #[default]
    Si,
    /// Feet and ft³/s (US customary).
    Us,
}

/// Service settings of a reach.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ServiceSpec {
    /// Gauge whose readings give the observed inflow at the upstream end
    /// (its stage is converted with the gauge's rating curve unless it
    /// reports discharge). Without one, forecasts use uploaded inflows only.
    pub upstream_gauge: Option<String>,
    /// Time zone for display: a name in the IANA time-zone database (`UTC`)
    /// or a fixed offset (`+01:00`), checked by [`is_time_zone`]. Stored
    /// times are always UTC.
    pub time_zone: String,
    /// Display units.
    pub units: Units,
}

impl Default for ServiceSpec {
    fn default() -> Self {
        Self {
            upstream_gauge: None,
            time_zone: "UTC".to_owned(),
            units: Units::Si,
        }
    }
}

fn default_max_node_spacing() -> f64 {
    200.0
}

/// The downstream boundary condition.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum DownstreamSpec {
    /// Normal flow for the given friction slope (place the last section far
    /// enough below the points of interest that its influence has faded).
    NormalDepth { friction_slope: f64 },
    /// A constant water level (m), e.g. a regulated lake.
    FixedStage { stage: f64 },
    /// A water level that varies in time (a tide, a lake level).
    StageSeries { series: Vec<StagePoint> },
    /// A stage–discharge rating at the downstream control.
    Rating { rating: RatingCurve },
}

/// One sample of a stage series.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StagePoint {
    pub time: DateTime<FixedOffset>,
    /// Water-surface elevation (m).
    pub stage: f64,
}

/// One sample of a discharge series.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FlowPoint {
    pub time: DateTime<FixedOffset>,
    /// Discharge (m³/s).
    pub discharge: f64,
}

/// A tributary inflow at a chainage.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LateralSpec {
    pub name: String,
    /// The channel it joins, in a reach of several `channels` (required
    /// there, absent otherwise).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub channel: Option<String>,
    /// Chainage where it joins (m).
    pub chainage: f64,
    /// Its hydrograph; held constant before the first and after the last
    /// sample. With a `gauge`, the one used while the gauge cannot be
    /// (it may then be empty).
    #[serde(default)]
    pub inflow: Vec<FlowPoint>,
    /// A gauge on the tributary: its readings (through its rating when it
    /// reports stage) are the inflow, assembled by the upstream inflow's
    /// rules (observed, gaps interpolated, suspect left out, then the
    /// extrapolation rule).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gauge: Option<String>,
}

/// What kind of place a point of interest is; it changes what is reported
/// (a bridge has a low chord and a deck).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum PointKind {
    Bridge,
    RoadCrossing,
    Town,
    Gauge,
    Other,
}

impl std::fmt::Display for PointKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            PointKind::Bridge => "bridge",
            PointKind::RoadCrossing => "road crossing",
            PointKind::Town => "town",
            PointKind::Gauge => "gauge",
            PointKind::Other => "other",
        })
    }
}

/// A place along the reach where the stage matters.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PointSpec {
    /// Stable identifier (a slug, unique in the reach); alerting clients
    /// and CAP chains key on it, so renaming `name` keeps them. Defaults to
    /// the slug of `name` ([`crate::gauge::slug_of`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub id: Option<String>,
    pub name: String,
    /// The channel it lies on, in a reach of several `channels` (required
    /// there, absent otherwise).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub channel: Option<String>,
    /// Chainage (m); must lie within the first and last section (of its
    /// channel).
    pub chainage: f64,
    pub kind: PointKind,
    /// Elevation of the underside of a bridge deck (m).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub low_chord: Option<f64>,
    /// Elevation of the top of a bridge deck or road (m).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub deck: Option<f64>,
    /// CAP severity when the low chord is forecast to be reached; default
    /// [`LOW_CHORD_SEVERITY`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub low_chord_severity: Option<Severity>,
    /// CAP severity when the deck is forecast under water; default
    /// [`DECK_SEVERITY`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub deck_severity: Option<Severity>,
    /// The user's own named levels, any number.
    #[serde(default)]
    pub thresholds: Vec<ThresholdSpec>,
    /// A gauge at this point whose stage readings are shown beside the
    /// forecast as observations (optional).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gauge: Option<String>,
}

/// A named water level chosen by the user (m).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ThresholdSpec {
    /// Stable identifier (a slug, unique at the point; `low_chord` and
    /// `deck` are reserved). Defaults to the slug of `name`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub id: Option<String>,
    pub name: String,
    pub elevation: f64,
    /// Severity to state in CAP alerts when this level is forecast to be
    /// exceeded (the CAP 1.2 `severity` vocabulary). When absent it is
    /// derived from the threshold's rank at its point; see
    /// [`ThresholdSpec::severity_at_rank`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub severity: Option<Severity>,
}

/// Default CAP severity of a bridge's low chord: water against the
/// structure threatens it and closes the crossing to traffic under it
/// (a project convention, documented in the README).
pub const LOW_CHORD_SEVERITY: Severity = Severity::Severe;
/// Default CAP severity of a deck or road under water: a crossing that
/// people may try to use while it is submerged (a project convention).
pub const DECK_SEVERITY: Severity = Severity::Extreme;

/// CAP 1.2 `severity` values that a threshold may carry (OASIS CAP 1.2,
/// §3.2.2; `Unknown` is not offered: a configured level is never unknown).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Severity {
    Minor,
    Moderate,
    Severe,
    Extreme,
}

impl Severity {
    /// The CAP spelling (`Minor`, `Moderate`, `Severe`, `Extreme`).
    pub fn cap_value(self) -> &'static str {
        match self {
            Severity::Minor => "Minor",
            Severity::Moderate => "Moderate",
            Severity::Severe => "Severe",
            Severity::Extreme => "Extreme",
        }
    }
}

impl ThresholdSpec {
    /// The configured severity, or one derived from the rank (0 = lowest
    /// elevation) among `count` thresholds at the point: the lowest is
    /// `Minor`, the highest `Severe`, those between `Moderate`; a lone
    /// threshold is `Moderate`. A project convention, documented in the
    /// README; set `severity` to override it.
    pub fn severity_at_rank(&self, rank: usize, count: usize) -> Severity {
        if let Some(s) = self.severity {
            return s;
        }
        match (rank, count) {
            (_, 0 | 1) => Severity::Moderate,
            (0, _) => Severity::Minor,
            (r, n) if r + 1 >= n => Severity::Severe,
            _ => Severity::Moderate,
        }
    }
}

/// Routing method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Method {
    /// Implicit diffusive-wave solver (the default).
    #[default]
    Diffusive,
    /// Variable-parameter Muskingum–Cunge (kinematic; cross-check).
    Kinematic,
}

impl std::fmt::Display for Method {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Method::Diffusive => "diffusive",
            Method::Kinematic => "kinematic",
        })
    }
}

impl std::str::FromStr for Method {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "diffusive" => Ok(Method::Diffusive),
            "kinematic" => Ok(Method::Kinematic),
            other => Err(format!(
                "unknown method `{other}`: use diffusive or kinematic"
            )),
        }
    }
}

/// Numerical settings of a reach.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct RoutingSpec {
    pub method: Method,
    /// Spacing of reported results (s).
    pub output_interval_s: f64,
    /// Largest time step of the diffusive solver (s).
    pub dt_max_s: f64,
    /// Time weighting of the diffusive solver, 0.55..=1.
    pub theta: f64,
    /// Time step of the kinematic method (s).
    pub kinematic_dt_s: f64,
}

impl Default for RoutingSpec {
    fn default() -> Self {
        Self {
            method: Method::Diffusive,
            output_interval_s: 900.0,
            dt_max_s: 600.0,
            theta: 0.6,
            kinematic_dt_s: 300.0,
        }
    }
}

/// A field of the reach description that is wrong, and why.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{field}: {message}")]
pub struct SpecError {
    /// JSON path of the field, e.g. `points[1].chainage`.
    pub field: String,
    pub message: String,
}

impl SpecError {
    pub fn new(field: impl Into<String>, message: impl Into<String>) -> Self {
        Self {
            field: field.into(),
            message: message.into(),
        }
    }
}

pub(super) fn finite(field: &str, v: f64) -> Result<(), SpecError> {
    if v.is_finite() {
        Ok(())
    } else {
        Err(SpecError::new(
            field,
            format!("must be a finite number, got {v}"),
        ))
    }
}

impl ReachSpec {
    /// Parses a JSON document, reporting the path of a bad field.
    pub fn from_json(text: &str) -> Result<Self, SpecError> {
        let de = &mut serde_json::Deserializer::from_str(text);
        let spec: ReachSpec = serde_path_to_error::deserialize(de).map_err(|e| {
            let path = e.path().to_string();
            let field = if path == "." {
                "(document)".to_owned()
            } else {
                path
            };
            SpecError::new(field, e.into_inner().to_string())
        })?;
        spec.validate()?;
        Ok(spec)
    }

    /// Chainage of the first and last section (m).
    pub fn extent(&self) -> Option<(f64, f64)> {
        Some((
            self.sections.first()?.chainage,
            self.sections.last()?.chainage,
        ))
    }

    /// Checks everything the engine does not: names, points, thresholds,
    /// boundary values, the time zone and numerical settings. Section
    /// geometry is checked by the engine, whose errors name the section and
    /// field.
    pub fn validate(&self) -> Result<(), SpecError> {
        if self.name.trim().is_empty() {
            return Err(SpecError::new("name", "must not be empty"));
        }
        if !(self.max_node_spacing.is_finite() && self.max_node_spacing > 0.0) {
            return Err(SpecError::new(
                "max_node_spacing",
                format!("must be positive, got {}", self.max_node_spacing),
            ));
        }
        if self.channels.is_empty() {
            self.validate_one_channel()?;
        } else {
            self.validate_network()?;
        }
        self.downstream.validate()?;
        self.validate_tributary_names()?;
        if self.points.is_empty() {
            return Err(SpecError::new(
                "points",
                "at least one point of interest is needed",
            ));
        }
        for (i, p) in self.points.iter().enumerate() {
            p.validate(&format!("points[{i}]"), &self.points[..i])?;
        }
        let tz = &self.service.time_zone;
        if !is_time_zone(tz) {
            return Err(SpecError::new(
                "service.time_zone",
                format!(
                    "`{tz}` is neither a name in the IANA time-zone database \
                     (`UTC`, `Area/Location`; exact spelling) nor a ±hh:mm offset"
                ),
            ));
        }
        self.ensemble.validate()?;
        self.roughness.validate("roughness")?;
        self.routing.validate()
    }

    /// The sections, the chainages of laterals and points, and that no
    /// `channel` is named.
    fn validate_one_channel(&self) -> Result<(), SpecError> {
        if self.sections.len() < 2 {
            return Err(SpecError::new(
                "sections",
                format!(
                    "a reach needs at least 2 sections, got {}",
                    self.sections.len()
                ),
            ));
        }
        crate::engine::section::validate_reach(&self.sections)
            .map_err(|e| SpecError::new("sections", e.to_string()))?;
        let extent = self
            .extent()
            .ok_or_else(|| SpecError::new("sections", "must not be empty"))?;
        let places = self
            .laterals
            .iter()
            .enumerate()
            .map(|(i, l)| (format!("laterals[{i}]"), &l.channel, l.chainage))
            .chain(
                self.points
                    .iter()
                    .enumerate()
                    .map(|(i, p)| (format!("points[{i}]"), &p.channel, p.chainage)),
            );
        for (at, channel, chainage) in places {
            if channel.is_some() {
                return Err(SpecError::new(
                    format!("{at}.channel"),
                    "only a reach of several `channels` has channels to name",
                ));
            }
            within(&format!("{at}.chainage"), chainage, extent)?;
        }
        for (i, l) in self.laterals.iter().enumerate() {
            l.validate(&format!("laterals[{i}]"))?;
        }
        Ok(())
    }

    /// The channels, and every lateral and point on one of them.
    fn validate_network(&self) -> Result<(), SpecError> {
        if !self.sections.is_empty() {
            return Err(SpecError::new(
                "sections",
                "a reach of several `channels` gives its sections per channel; leave `sections` out",
            ));
        }
        channels::validate(&self.channels, self.max_node_spacing)?;
        if self.routing.method == Method::Kinematic {
            return Err(SpecError::new(
                "routing.method",
                "a reach of several channels is routed with the diffusive method only",
            ));
        }
        for (i, l) in self.laterals.iter().enumerate() {
            let at = format!("laterals[{i}]");
            check_on_channel(&at, l.channel.as_deref(), l.chainage, &self.channels)?;
            l.validate(&at)?;
        }
        for (i, p) in self.points.iter().enumerate() {
            let at = format!("points[{i}]");
            check_on_channel(&at, p.channel.as_deref(), p.chainage, &self.channels)?;
        }
        Ok(())
    }

    /// Tributaries (laterals and tributary channels) are told apart by
    /// name: uploads and provenance name them.
    fn validate_tributary_names(&self) -> Result<(), SpecError> {
        let names = self.tributaries();
        for (i, t) in names.iter().enumerate() {
            if names[..i].iter().any(|u| u.name == t.name) {
                return Err(SpecError::new(
                    format!("{}.name", t.path),
                    format!("`{}` names an earlier tributary too", t.name),
                ));
            }
        }
        Ok(())
    }

    /// Every tributary inflow boundary: the laterals, then the channels
    /// that start at a tributary.
    pub fn tributaries(&self) -> Vec<Tributary<'_>> {
        let laterals = self.laterals.iter().enumerate().map(|(i, l)| Tributary {
            path: format!("laterals[{i}]"),
            name: &l.name,
            gauge: l.gauge.as_deref(),
            inflow: &l.inflow,
        });
        let heads = self
            .channels
            .iter()
            .enumerate()
            .filter_map(|(i, c)| match &c.upstream {
                ChannelStart::Tributary {
                    name,
                    inflow,
                    gauge,
                } => Some(Tributary {
                    path: format!("channels[{i}].upstream"),
                    name,
                    gauge: gauge.as_deref(),
                    inflow,
                }),
                _ => None,
            });
        laterals.chain(heads).collect()
    }

    /// The hydrograph of tributary `k` in [`Self::tributaries`]' order, to
    /// be filled in from its gauge or upload.
    pub fn tributary_inflow_mut(&mut self, k: usize) -> Option<&mut Vec<FlowPoint>> {
        let laterals = self.laterals.iter_mut().map(|l| &mut l.inflow);
        let heads = self
            .channels
            .iter_mut()
            .filter_map(|c| match &mut c.upstream {
                ChannelStart::Tributary { inflow, .. } => Some(inflow),
                _ => None,
            });
        laterals.chain(heads).nth(k)
    }

    /// The sections of every channel (of the one channel, or of each of
    /// `channels` in order).
    pub fn all_sections(&self) -> impl Iterator<Item = &CrossSection> {
        self.sections
            .iter()
            .chain(self.channels.iter().flat_map(|c| c.sections.iter()))
    }

    /// The section at the outlet: the last of the reach, or of the channel
    /// ending at the outlet.
    pub fn outlet_section(&self) -> Option<&CrossSection> {
        match self
            .channels
            .iter()
            .find(|c| c.downstream == ChannelEnd::Outlet)
        {
            Some(c) => c.sections.last(),
            None => self.sections.last(),
        }
    }

    /// The first section of the channel the reach's inflow enters.
    pub fn inflow_section(&self) -> Option<&CrossSection> {
        match self
            .channels
            .iter()
            .find(|c| c.upstream == ChannelStart::Inflow)
        {
            Some(c) => c.sections.first(),
            None => self.sections.first(),
        }
    }
}

/// A tributary inflow boundary of a reach, as [`ReachSpec::tributaries`]
/// lists them.
#[derive(Debug, Clone, PartialEq)]
pub struct Tributary<'a> {
    /// Its JSON path (`laterals[2]`, `channels[1].upstream`).
    pub path: String,
    pub name: &'a str,
    pub gauge: Option<&'a str>,
    /// The reach description's own hydrograph.
    pub inflow: &'a [FlowPoint],
}

/// `x` is a finite chainage inside the reach's `(first, last)` extent.
fn within(field: &str, x: f64, (first, last): (f64, f64)) -> Result<(), SpecError> {
    finite(field, x)?;
    if x < first || x > last {
        return Err(SpecError::new(
            field,
            format!("{x} m lies outside the reach ({first} m to {last} m)"),
        ));
    }
    Ok(())
}

/// A time zone the service and the dashboard can show times in: a name in
/// the IANA time-zone database as chrono-tz embeds it (the same list on
/// every host, whatever its own zoneinfo files), `Z`, or a fixed offset
/// `±hh:mm` (RFC 3339 §5.6 `time-numoffset`: hour 00–23, minute 00–59) or
/// `±hhmm`, which the dashboard also reads.
pub fn is_time_zone(zone: &str) -> bool {
    zone == "Z" || is_fixed_offset(zone) || zone.parse::<chrono_tz::Tz>().is_ok()
}

fn is_fixed_offset(zone: &str) -> bool {
    let Some(rest) = zone.strip_prefix(['+', '-']) else {
        return false;
    };
    let parts = match rest.split_once(':') {
        Some(hm) => Some(hm),
        None => rest.get(..2).zip(rest.get(2..)),
    };
    let two_digits = |s: &str, most: u8| {
        s.len() == 2
            && s.bytes().all(|b| b.is_ascii_digit())
            && s.parse().is_ok_and(|v: u8| v <= most)
    };
    parts.is_some_and(|(h, m)| two_digits(h, 23) && two_digits(m, 59))
}

impl DownstreamSpec {
    fn validate(&self) -> Result<(), SpecError> {
        match self {
            DownstreamSpec::NormalDepth { friction_slope } => {
                let f = "downstream.friction_slope";
                finite(f, *friction_slope)?;
                if *friction_slope <= 0.0 {
                    return Err(SpecError::new(f, "must be positive"));
                }
            }
            DownstreamSpec::FixedStage { stage } => finite("downstream.stage", *stage)?,
            DownstreamSpec::StageSeries { series } => {
                if series.is_empty() {
                    return Err(SpecError::new("downstream.series", "must not be empty"));
                }
                for (i, p) in series.iter().enumerate() {
                    finite(&format!("downstream.series[{i}].stage"), p.stage)?;
                    if i > 0 && p.time <= series[i - 1].time {
                        return Err(SpecError::new(
                            format!("downstream.series[{i}].time"),
                            "times must increase strictly",
                        ));
                    }
                }
            }
            DownstreamSpec::Rating { rating } => rating
                .validate()
                .map_err(|e| SpecError::new("downstream.rating", e.to_string()))?,
        }
        Ok(())
    }
}

impl LateralSpec {
    /// `at` is the lateral's path, `laterals[i]` (its chainage is checked
    /// by the reach).
    fn validate(&self, at: &str) -> Result<(), SpecError> {
        if self.name.trim().is_empty() {
            return Err(SpecError::new(format!("{at}.name"), "must not be empty"));
        }
        check_flows(at, &self.inflow, self.gauge.as_deref())
    }
}

/// A tributary's own hydrograph and gauge at `at`: a hydrograph unless a
/// gauge is named, a valid gauge id, discharges finite and not negative at
/// strictly increasing times.
pub(super) fn check_flows(
    at: &str,
    inflow: &[FlowPoint],
    gauge: Option<&str>,
) -> Result<(), SpecError> {
    if inflow.is_empty() && gauge.is_none() {
        return Err(SpecError::new(
            format!("{at}.inflow"),
            "must not be empty (or name a `gauge`)",
        ));
    }
    if let Some(g) = gauge
        && !crate::gauge::valid_slug(g)
    {
        return Err(SpecError::new(
            format!("{at}.gauge"),
            "a gauge id is 1 to 64 of a-z, 0-9 and -",
        ));
    }
    for (j, p) in inflow.iter().enumerate() {
        let f = format!("{at}.inflow[{j}].discharge");
        finite(&f, p.discharge)?;
        if p.discharge < 0.0 {
            return Err(SpecError::new(f, "must not be negative"));
        }
        if j > 0 && p.time <= inflow[j - 1].time {
            return Err(SpecError::new(
                format!("{at}.inflow[{j}].time"),
                "times must increase strictly",
            ));
        }
    }
    Ok(())
}

impl PointSpec {
    /// `at` is the point's path, `points[i]`; `earlier` the points before it.
    /// (Its chainage is checked by the reach.)
    fn validate(&self, at: &str, earlier: &[PointSpec]) -> Result<(), SpecError> {
        if self.name.trim().is_empty() {
            return Err(SpecError::new(format!("{at}.name"), "must not be empty"));
        }
        if earlier.iter().any(|q| q.name == self.name) {
            return Err(SpecError::new(
                format!("{at}.name"),
                format!("`{}` is used by an earlier point", self.name),
            ));
        }
        let id = checked_id(at, self.id.as_deref(), &self.name)?;
        if earlier.iter().any(|q| q.point_id() == id) {
            return Err(SpecError::new(
                format!("{at}.id"),
                format!("`{id}` is the id of an earlier point; set a different `id`"),
            ));
        }
        if let Some(v) = self.low_chord {
            finite(&format!("{at}.low_chord"), v)?;
        }
        if let Some(v) = self.deck {
            finite(&format!("{at}.deck"), v)?;
        }
        if let (Some(lc), Some(d)) = (self.low_chord, self.deck)
            && d < lc
        {
            return Err(SpecError::new(
                format!("{at}.deck"),
                format!("deck {d} m is below the low chord {lc} m"),
            ));
        }
        for (j, t) in self.thresholds.iter().enumerate() {
            if t.name.trim().is_empty() {
                return Err(SpecError::new(
                    format!("{at}.thresholds[{j}].name"),
                    "must not be empty",
                ));
            }
            if self.thresholds[..j].iter().any(|u| u.name == t.name) {
                return Err(SpecError::new(
                    format!("{at}.thresholds[{j}].name"),
                    format!("`{}` is used twice at this point", t.name),
                ));
            }
            finite(&format!("{at}.thresholds[{j}].elevation"), t.elevation)?;
            let tat = format!("{at}.thresholds[{j}]");
            let id = checked_id(&tat, t.id.as_deref(), &t.name)?;
            if id == LOW_CHORD_ID || id == DECK_ID {
                return Err(SpecError::new(
                    format!("{tat}.id"),
                    format!("`{id}` is reserved for the point's own `{id}` level"),
                ));
            }
            if self.thresholds[..j].iter().any(|u| u.level_id() == id) {
                return Err(SpecError::new(
                    format!("{tat}.id"),
                    format!("`{id}` is the id of an earlier threshold here; set a different `id`"),
                ));
            }
        }
        Ok(())
    }

    /// The point's id: `id`, or the slug of its name.
    pub fn point_id(&self) -> String {
        self.id.clone().unwrap_or_else(|| slug_of(&self.name))
    }
}

impl ThresholdSpec {
    /// The threshold's id: `id`, or the slug of its name.
    pub fn level_id(&self) -> String {
        self.id.clone().unwrap_or_else(|| slug_of(&self.name))
    }
}

/// Id of a bridge's low-chord level.
pub const LOW_CHORD_ID: &str = "low_chord";
/// Id of a bridge's deck level.
pub const DECK_ID: &str = "deck";

/// The id of the thing at `at`: a given `id` must be a slug; a default one
/// (the slug of `name`) must not be empty.
fn checked_id(at: &str, id: Option<&str>, name: &str) -> Result<String, SpecError> {
    match id {
        Some(id) if valid_slug(id) => Ok(id.to_owned()),
        Some(_) => Err(SpecError::new(
            format!("{at}.id"),
            "an id is 1 to 64 of a-z, 0-9 and -, not starting with -",
        )),
        None => {
            let id = slug_of(name);
            if id.is_empty() {
                Err(SpecError::new(
                    format!("{at}.name"),
                    "has no letter a-z or digit to make an id from; set `id`",
                ))
            } else {
                Ok(id)
            }
        }
    }
}

impl RoutingSpec {
    fn validate(&self) -> Result<(), SpecError> {
        let positive = |f: &str, v: f64| -> Result<(), SpecError> {
            finite(f, v)?;
            if v <= 0.0 {
                return Err(SpecError::new(f, format!("must be positive, got {v}")));
            }
            Ok(())
        };
        positive("routing.output_interval_s", self.output_interval_s)?;
        positive("routing.dt_max_s", self.dt_max_s)?;
        // The solver halves a failing step down to its smallest; a largest
        // step below that could never run.
        let dt_min = crate::engine::diffusive::Options::default().dt_min;
        if self.dt_max_s < dt_min {
            return Err(SpecError::new(
                "routing.dt_max_s",
                format!(
                    "must be at least the solver's smallest step, {dt_min} s, got {}",
                    self.dt_max_s
                ),
            ));
        }
        positive("routing.kinematic_dt_s", self.kinematic_dt_s)?;
        if !(0.55..=1.0).contains(&self.theta) {
            return Err(SpecError::new(
                "routing.theta",
                format!("must be between 0.55 and 1, got {}", self.theta),
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = r#"{
        "name": "Test reach",
        "sections": [
            {"name": "A", "chainage": 0, "geometry": {"shape": "trapezoid", "bed_elevation": 10, "bottom_width": 20, "side_slope": 2, "n": 0.03}},
            {"name": "B", "chainage": 5000, "geometry": {"shape": "trapezoid", "bed_elevation": 8, "bottom_width": 20, "side_slope": 2, "n": 0.03}}
        ],
        "downstream": {"kind": "normal_depth", "friction_slope": 0.0004},
        "points": [{"name": "Footbridge", "chainage": 2500, "kind": "bridge", "low_chord": 13.5, "deck": 14.2,
                    "thresholds": [{"name": "path closed", "elevation": 12.0}]}]
    }"#;

    #[test]
    fn minimal_document_parses_with_defaults() {
        let spec = ReachSpec::from_json(MINIMAL).expect("valid");
        assert_eq!(spec.max_node_spacing, 200.0);
        assert_eq!(spec.routing.method, Method::Diffusive);
        assert_eq!(spec.extent(), Some((0.0, 5000.0)));
    }

    fn with(mutate: impl FnOnce(&mut serde_json::Value)) -> Result<ReachSpec, SpecError> {
        let mut v: serde_json::Value = serde_json::from_str(MINIMAL).expect("json");
        mutate(&mut v);
        ReachSpec::from_json(&v.to_string())
    }

    #[test]
    fn errors_name_the_field() {
        let e = with(|v| v["points"][0]["chainage"] = 9000.into()).unwrap_err();
        assert_eq!(e.field, "points[0].chainage");
        let e = with(|v| v["points"][0]["deck"] = 13.0.into()).unwrap_err();
        assert_eq!(e.field, "points[0].deck");
        let e = with(|v| v["routing"] = serde_json::json!({"theta": 0.5})).unwrap_err();
        assert_eq!(e.field, "routing.theta");
        let e = with(|v| v["downstream"]["friction_slope"] = (-1.0).into()).unwrap_err();
        assert_eq!(e.field, "downstream.friction_slope");
        let e = with(|v| v["points"][0]["thresholds"][0]["elevation"] = "high".into()).unwrap_err();
        assert_eq!(e.field, "points[0].thresholds[0].elevation");
        let e = with(|v| v["points"][0]["colour"] = "red".into()).unwrap_err();
        assert!(e.message.contains("colour"), "{e}");
        let e = with(|v| v["sections"][1]["chainage"] = 0.into()).unwrap_err();
        assert_eq!(e.field, "sections");
        assert!(e.message.contains('B'), "names the section: {e}");
    }

    #[test]
    fn severity_by_rank_unless_configured() {
        let t = |s: Option<Severity>| ThresholdSpec {
            id: None,
            name: "x".into(),
            elevation: 1.0,
            severity: s,
        };
        assert_eq!(t(None).severity_at_rank(0, 1), Severity::Moderate);
        assert_eq!(t(None).severity_at_rank(0, 3), Severity::Minor);
        assert_eq!(t(None).severity_at_rank(1, 3), Severity::Moderate);
        assert_eq!(t(None).severity_at_rank(2, 3), Severity::Severe);
        assert_eq!(
            t(Some(Severity::Extreme)).severity_at_rank(0, 3),
            Severity::Extreme
        );
    }

    /// The time zone is checked against the IANA time-zone database as
    /// chrono-tz embeds it: `UTC` and the `Etc/GMT-1` zone are in it (tzdata
    /// file `etcetera`, from memory); no planet's name is. Offsets follow
    /// RFC 3339 §5.6 `time-numoffset`: hour 00–23, minute 00–59.
    #[test]
    fn time_zone_must_be_in_the_database_or_an_offset() {
        for ok in [
            "UTC",
            "Etc/GMT-1",
            "Z",
            "+01:00",
            "-05:30",
            "+0100",
            "+23:59",
        ] {
            assert!(is_time_zone(ok), "{ok}");
            with(|v| v["service"] = serde_json::json!({"time_zone": ok})).expect(ok);
        }
        for bad in [
            "Mars/Olympus_Mons",
            "",
            "+24:00",
            "+01:60",
            "+1:00",
            "01:00",
            "+01:0é",
        ] {
            assert!(!is_time_zone(bad), "{bad}");
        }
        let e = with(|v| v["service"] = serde_json::json!({"time_zone": "Mars/Olympus_Mons"}))
            .unwrap_err();
        assert_eq!(e.field, "service.time_zone");
        assert!(e.message.contains("Mars/Olympus_Mons"), "{e}");
    }

    #[test]
    fn duplicate_names_are_rejected() {
        let e = with(|v| {
            let p = v["points"][0].clone();
            v["points"].as_array_mut().expect("array").push(p);
        })
        .unwrap_err();
        assert_eq!(e.field, "points[1].name");
    }
}

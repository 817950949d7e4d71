//! A reach made of several channels joined at junctions (REACH.json's
//! `channels`): confluences, and loops such as a floodplain flow path that
//! leaves the main channel and rejoins it. Each channel has its own
//! surveyed sections and chainage and says what its two ends meet; points
//! of interest and laterals name the channel they lie on.
//!
//! Exactly one channel starts at the reach's inflow — the boundary that
//! `service.upstream_gauge` and uploads without a `boundary` feed, and
//! whose hydrograph sets the run's window. Other channels start at a
//! junction or at a tributary boundary, which behaves like a lateral with
//! a name: its own gauge, its own uploads, its own hydrograph to fall
//! back on. A reach without `channels` is one channel, as it always was.

use serde::{Deserialize, Serialize};

use super::spec::{FlowPoint, SpecError, check_flows, finite};
use crate::engine::network::{Ends, NetworkError, check_ends};
use crate::engine::section::{CrossSection, validate_reach};

/// One channel of a network reach.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChannelSpec {
    /// Unique name; points and laterals refer to it.
    pub name: String,
    /// Surveyed sections in the channel's own chainage (m), increasing
    /// downstream; at least two.
    pub sections: Vec<CrossSection>,
    /// Largest node spacing (m); the reach's `max_node_spacing` when absent.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_node_spacing: Option<f64>,
    /// What the first section meets.
    pub upstream: ChannelStart,
    /// What the last section meets.
    pub downstream: ChannelEnd,
}

/// What a channel's upstream end meets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum ChannelStart {
    /// The reach's inflow (exactly one channel).
    Inflow,
    /// A tributary boundary, fed like a lateral.
    Tributary {
        /// Name, unique among tributaries and laterals; uploads for it
        /// give it as `boundary`.
        name: String,
        /// Its hydrograph (used while a gauge cannot be; may then be
        /// empty).
        #[serde(default)]
        inflow: Vec<FlowPoint>,
        /// A gauge on it whose readings are its inflow.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        gauge: Option<String>,
    },
    /// A junction, by name.
    Junction { junction: String },
}

/// What a channel's downstream end meets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum ChannelEnd {
    /// A junction, by name.
    Junction { junction: String },
    /// The reach's outlet, where `downstream` applies (exactly one channel).
    Outlet,
}

impl ChannelSpec {
    /// Chainage of the first and last section (m).
    pub fn extent(&self) -> Option<(f64, f64)> {
        Some((
            self.sections.first()?.chainage,
            self.sections.last()?.chainage,
        ))
    }

    /// The junction names at the upstream and downstream end.
    pub fn junctions(&self) -> (Option<&str>, Option<&str>) {
        let up = match &self.upstream {
            ChannelStart::Junction { junction } => Some(junction.as_str()),
            _ => None,
        };
        let down = match &self.downstream {
            ChannelEnd::Junction { junction } => Some(junction.as_str()),
            ChannelEnd::Outlet => None,
        };
        (up, down)
    }
}

/// Junction names in the order they first appear (junction `j` of a run
/// is `names[j]`), and each channel's ends as junction ids.
pub fn junction_ids(channels: &[ChannelSpec]) -> (Vec<String>, Vec<Ends>) {
    let mut names: Vec<String> = Vec::new();
    let mut id = |name: &str| match names.iter().position(|j| j == name) {
        Some(i) => i,
        None => {
            names.push(name.to_owned());
            names.len() - 1
        }
    };
    let ends = channels
        .iter()
        .map(|c| {
            let (up, down) = c.junctions();
            (up.map(&mut id), down.map(&mut id))
        })
        .collect();
    (names, ends)
}

/// Checks the channels of a network reach: each channel's name, sections,
/// spacing and tributary, one inflow channel, and the topology (one
/// outlet, every junction met by two ends or more, all connected).
pub fn validate(channels: &[ChannelSpec], default_spacing: f64) -> Result<(), SpecError> {
    for (i, c) in channels.iter().enumerate() {
        let at = format!("channels[{i}]");
        if c.name.trim().is_empty() {
            return Err(SpecError::new(format!("{at}.name"), "must not be empty"));
        }
        if channels[..i].iter().any(|o| o.name == c.name) {
            return Err(SpecError::new(
                format!("{at}.name"),
                format!("`{}` is used by an earlier channel", c.name),
            ));
        }
        if c.sections.len() < 2 {
            return Err(SpecError::new(
                format!("{at}.sections"),
                format!(
                    "a channel needs at least 2 sections, got {}",
                    c.sections.len()
                ),
            ));
        }
        validate_reach(&c.sections)
            .map_err(|e| SpecError::new(format!("{at}.sections"), e.to_string()))?;
        let spacing = c.max_node_spacing.unwrap_or(default_spacing);
        if !(spacing.is_finite() && spacing > 0.0) {
            return Err(SpecError::new(
                format!("{at}.max_node_spacing"),
                format!("must be positive, got {spacing}"),
            ));
        }
        for (end, j) in [
            ("upstream", c.junctions().0),
            ("downstream", c.junctions().1),
        ] {
            if j.is_some_and(|j| j.trim().is_empty()) {
                return Err(SpecError::new(
                    format!("{at}.{end}.junction"),
                    "must not be empty",
                ));
            }
        }
        if let ChannelStart::Tributary {
            name,
            inflow,
            gauge,
        } = &c.upstream
        {
            let at = format!("{at}.upstream");
            if name.trim().is_empty() {
                return Err(SpecError::new(format!("{at}.name"), "must not be empty"));
            }
            check_flows(&at, inflow, gauge.as_deref())?;
        }
    }
    let inflows: Vec<usize> = (0..channels.len())
        .filter(|&i| channels[i].upstream == ChannelStart::Inflow)
        .collect();
    match inflows.as_slice() {
        [_] => {}
        [] => {
            return Err(SpecError::new(
                "channels",
                "one channel must start at the reach's inflow (`\"upstream\": {\"kind\": \"inflow\"}`)",
            ));
        }
        [_, second, ..] => {
            return Err(SpecError::new(
                format!("channels[{second}].upstream"),
                format!(
                    "`{}` is the second channel starting at the reach's inflow; only one may (make the others tributaries)",
                    channels[*second].name
                ),
            ));
        }
    }
    let (names, ends) = junction_ids(channels);
    check_ends(&ends).map_err(|e| topology_error(&e, channels, &names))?;
    Ok(())
}

/// The engine's topology error in the document's terms: channel and
/// junction names, the field at fault.
fn topology_error(e: &NetworkError, channels: &[ChannelSpec], junctions: &[String]) -> SpecError {
    let name = |i: usize| channels.get(i).map_or("?", |c| c.name.as_str());
    let junction = |j: usize| junctions.get(j).map_or("?", String::as_str);
    match *e {
        NetworkError::NoOutlet => SpecError::new(
            "channels",
            "no channel ends at the outlet (`\"downstream\": {\"kind\": \"outlet\"}`)",
        ),
        NetworkError::SeveralOutlets { first, second } => SpecError::new(
            format!("channels[{second}].downstream"),
            format!(
                "`{}` and `{}` both end at the outlet; a reach has one",
                name(first),
                name(second)
            ),
        ),
        NetworkError::LonelyJunction { junction: j, ends } => SpecError::new(
            "channels",
            format!(
                "junction `{}` is met by {ends} channel end(s); at least 2 are needed",
                junction(j)
            ),
        ),
        NetworkError::SelfLoop {
            channel,
            junction: j,
        } => SpecError::new(
            format!("channels[{channel}].downstream"),
            format!(
                "`{}` starts and ends at junction `{}`",
                name(channel),
                junction(j)
            ),
        ),
        NetworkError::Disconnected { channel } => SpecError::new(
            format!("channels[{channel}]"),
            format!(
                "`{}` is not connected to the outlet through junctions",
                name(channel)
            ),
        ),
        ref other => SpecError::new("channels", other.to_string()),
    }
}

/// Checks that `at` names one of `channels` (`channel` given exactly when
/// there are channels) and that `chainage` lies on it; `at` is the path of
/// the point or lateral.
pub fn check_on_channel(
    at: &str,
    channel: Option<&str>,
    chainage: f64,
    channels: &[ChannelSpec],
) -> Result<(), SpecError> {
    let field = format!("{at}.channel");
    let names = || {
        channels
            .iter()
            .map(|c| format!("`{}`", c.name))
            .collect::<Vec<_>>()
            .join(", ")
    };
    let c = match channel {
        None => {
            return Err(SpecError::new(
                field,
                format!("must name the channel it lies on (one of {})", names()),
            ));
        }
        Some(name) => channels.iter().find(|c| c.name == name).ok_or_else(|| {
            SpecError::new(
                &field,
                format!(
                    "`{name}` is not a channel of this reach (its channels: {})",
                    names()
                ),
            )
        })?,
    };
    let chainage_field = format!("{at}.chainage");
    finite(&chainage_field, chainage)?;
    let (first, last) = c
        .extent()
        .ok_or_else(|| SpecError::new(&field, "the channel has no sections"))?;
    if chainage < first || chainage > last {
        return Err(SpecError::new(
            chainage_field,
            format!(
                "{chainage} m lies outside channel `{}` ({first} m to {last} m)",
                c.name
            ),
        ));
    }
    Ok(())
}

/// The main stem: from the channel the reach's inflow enters, downstream
/// to the outlet, taking at each junction the first channel (in the
/// document's order) that leaves it. Channel indices, upstream first.
pub fn main_stem(channels: &[ChannelSpec]) -> Vec<usize> {
    let mut path = Vec::new();
    let mut next = channels
        .iter()
        .position(|c| c.upstream == ChannelStart::Inflow);
    while let Some(i) = next {
        if path.contains(&i) {
            break;
        }
        path.push(i);
        next = match channels[i].junctions().1 {
            None => None,
            Some(j) => channels.iter().position(|c| c.junctions().0 == Some(j)),
        };
    }
    path
}

//! Forecast threshold exceedances as OASIS CAP 1.2 alert messages, with an
//! Atom (RFC 4287) index feed for automated emergency-management systems.
//!
//! Two steps, both pure (no I/O, no clock: the caller passes `now`):
//!
//! 1. [`plan`] compares the latest forecast [`Situation`]s with the messages
//!    already [`Issued`] and decides, per (reach, point, threshold) [`Key`],
//!    whether a new `Alert`, an `Update`, a `Cancel` or nothing is due. A
//!    consumer of CAP keeps the latest message of a chain as the current
//!    statement, so we only send again when something it relies on changed
//!    materially; sending on every model run would drown the signal.
//! 2. [`render_cap`] and [`render_atom`] turn planned messages into XML.
//!    The XML is written by hand (it is small and fixed in shape), escaping
//!    every text node and attribute, so the crate needs no XML dependency.
//!
//! Every message carries [`crate::CAUTION`]: the output is advisory model
//! output, not an official warning.
//!
//! Standards followed (section numbers of OASIS CAP 1.2, 2010, and RFC 4287;
//! where a detail was recalled rather than read it says "from memory"):
//! - CAP §3.2.1 `alert`: identifier, sender, sent, status, msgType, scope are
//!   required; identifier and sender must not contain spaces, commas or the
//!   restricted characters `<` and `&`; `references` is a space-separated
//!   list of `sender,identifier,sent` triples.
//! - CAP §3.2.2 `info`: category, event, urgency, severity, certainty are
//!   required; the vocabularies are listed on the enums below.
//! - CAP §3.2.4 `area`: areaDesc required; `circle` is `lat,lon radius` in
//!   WGS 84 with the radius in kilometres (from memory).
//! - CAP §3.3.2 date-times: `YYYY-MM-DDThh:mm:ss±hh:mm`, no `Z`; UTC is
//!   written `-00:00` (see [`cap_time`]).
//! - RFC 4287 §4.1.1/§4.1.2: feed and entry require id, title, updated; a
//!   feed needs an author unless every entry has one; an entry without
//!   content needs a `rel="alternate"` link.

use std::collections::{BTreeMap, HashSet};
use std::fmt::Write as _;

use chrono::{DateTime, Duration, SecondsFormat, Timelike, Utc};
use serde::{Deserialize, Serialize};

use super::level::{LevelOutlook, Trace};
use super::run::PointForecast;
use super::spec::{PointKind, Severity};
use crate::CAUTION;

/// XML namespace of CAP 1.2 documents (CAP §3.2.1, from memory; also in
/// shared/REFERENCES.md).
pub const CAP_NAMESPACE: &str = "urn:oasis:names:tc:emergency:cap:1.2";
/// XML namespace of Atom (RFC 4287 §2).
pub const ATOM_NAMESPACE: &str = "http://www.w3.org/2005/Atom";
/// Media type under which CAP documents are served and linked.
pub const CAP_MEDIA_TYPE: &str = "application/cap+xml";
/// Media type of the Atom index (RFC 4287 §7).
pub const ATOM_MEDIA_TYPE: &str = "application/atom+xml";

/// A forecast onset that moves by at least this much is a material change:
/// less is within the spacing of reported forecast samples (15 min by
/// default) and would re-send a message on routing noise.
pub const ONSET_SHIFT: Duration = Duration::minutes(15);
/// A crest that changes by at least this much (m) is a material change:
/// smaller changes are below what gauge readings resolve in practice.
pub const CREST_CHANGE_M: f64 = 0.05;
/// A threshold elevation edited by at least this much (m) is a material
/// change: the message states the elevation, so it must be re-sent.
pub const ELEVATION_CHANGE_M: f64 = 0.005;
/// A first crossing at most this far ahead makes the urgency `Expected`
/// (CAP §3.2.2: "responsive action should be taken soon (within next
/// hour)", from memory).
pub const EXPECTED_WITHIN: Duration = Duration::hours(1);
/// How long a message stays valid after it is sent, unless the forecast
/// exceedance lasts longer (see [`CapOptions::validity`]).
pub const DEFAULT_VALIDITY: Duration = Duration::hours(6);

/// Why a message could not be planned or rendered.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CapError {
    /// CAP §3.2.1: sender must be non-empty and free of spaces, commas,
    /// `<` and `&`.
    #[error("sender `{0}`: must be non-empty without spaces, commas, `<` or `&` (CAP 1.2 §3.2.1)")]
    InvalidSender(String),
    /// An earlier message cannot be referenced because its sender or
    /// identifier would break the `sender,identifier,sent` triple.
    #[error("earlier message `{identifier}` cannot be referenced: {reason}")]
    InvalidReference { identifier: String, reason: String },
    /// A number in a situation is NaN or infinite.
    #[error("{key}: {field} must be a finite number")]
    NonFinite { key: String, field: &'static str },
    /// Two situations share a key, so the plan would be ambiguous.
    #[error("{0}: the same reach, point and threshold appear twice")]
    DuplicateKey(String),
    /// `now` lies before a message it would reference; the chain would no
    /// longer read forwards in time.
    #[error("now ({now}) is before the earlier message `{identifier}` sent {sent}")]
    ClockBehind {
        identifier: String,
        sent: String,
        now: String,
    },
    /// A URL or IRI that must be absolute is not.
    #[error("{field} `{value}`: must be an absolute URI without spaces")]
    InvalidUri { field: &'static str, value: String },
    /// A circle outside WGS 84 ranges or with a negative radius.
    #[error("area circle: {0}")]
    InvalidCircle(String),
    /// A text field that must not be empty is.
    #[error("{0} must not be empty")]
    Empty(&'static str),
    /// A forecast with no samples cannot describe the stage from now on.
    #[error("point `{0}`: the forecast has no usable samples")]
    EmptyForecast(String),
    /// A time computation went outside the representable range.
    #[error("time out of range")]
    TimeOutOfRange,
}

/// CAP §3.2.1 `status`: how the message is to be handled. `Actual` in
/// service; a demonstration uses `Exercise` or `Test` so that no consumer
/// acts on it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub enum Status {
    #[default]
    Actual,
    Exercise,
    System,
    Test,
    Draft,
}

impl Status {
    /// The CAP spelling.
    pub fn cap_value(self) -> &'static str {
        match self {
            Status::Actual => "Actual",
            Status::Exercise => "Exercise",
            Status::System => "System",
            Status::Test => "Test",
            Status::Draft => "Draft",
        }
    }
}

/// CAP §3.2.1 `msgType` values this module issues (`Ack` and `Error` are
/// for replies between systems, which a forecast never sends).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum MsgType {
    Alert,
    Update,
    Cancel,
}

impl MsgType {
    /// The CAP spelling.
    pub fn cap_value(self) -> &'static str {
        match self {
            MsgType::Alert => "Alert",
            MsgType::Update => "Update",
            MsgType::Cancel => "Cancel",
        }
    }
}

/// Identifies one (reach, point, threshold) across runs. Names, not
/// database ids, so that a reach re-uploaded with the same names keeps its
/// message chains; renaming a threshold therefore cancels the old chain and
/// starts a new one, which is what a consumer should see.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
pub struct Key {
    /// Reach slug.
    pub reach: String,
    pub point: String,
    pub threshold: String,
}

impl Key {
    /// 64-bit FNV-1a over the three fields separated by U+001F. FNV is
    /// specified independently of the Rust release (unlike
    /// `DefaultHasher`), so identifiers computed today and next year agree.
    pub fn digest(&self) -> u64 {
        const OFFSET: u64 = 0xcbf2_9ce4_8422_2325;
        const PRIME: u64 = 0x0000_0100_0000_01b3;
        let mut h = OFFSET;
        let parts = [&self.reach, &self.point, &self.threshold];
        for (i, part) in parts.iter().enumerate() {
            if i > 0 {
                h ^= 0x1f;
                h = h.wrapping_mul(PRIME);
            }
            for b in part.bytes() {
                h ^= u64::from(b);
                h = h.wrapping_mul(PRIME);
            }
        }
        h
    }
}

impl std::fmt::Display for Key {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}/{}", self.reach, self.point, self.threshold)
    }
}

/// A circular area in WGS 84 (CAP §3.2.4 `circle`; radius in km, from
/// memory).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Circle {
    /// Latitude (degrees, −90..=90).
    pub lat: f64,
    /// Longitude (degrees, −180..=180).
    pub lon: f64,
    /// Radius (km, ≥ 0).
    pub radius_km: f64,
}

/// One (point, threshold) pair at the latest forecast: everything a
/// message says about it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Situation {
    /// Reach slug (stable, URL-safe).
    pub reach_id: String,
    /// Reach display name.
    pub reach_name: String,
    pub point_name: String,
    pub point_kind: PointKind,
    /// Chainage of the point (m).
    pub chainage: f64,
    pub threshold_name: String,
    /// Threshold elevation (m).
    pub elevation: f64,
    pub severity: Severity,
    /// The forecast stage is above the threshold at some time from `now`
    /// on. (An exceedance wholly in the past is not a reason to alert.)
    pub exceeded: bool,
    /// The stage is above the threshold at `now`.
    pub above_now: bool,
    /// When the stage is forecast to rise above the threshold (or `now`
    /// when already above).
    pub first_above: Option<DateTime<Utc>>,
    /// When it is forecast to fall back below; `None` if it stays above to
    /// the end of the forecast.
    pub back_below: Option<DateTime<Utc>>,
    /// Highest forecast stage (m) and its time.
    pub crest_stage: f64,
    pub crest_time: DateTime<Utc>,
    /// Crest minus threshold (m); positive when exceeded.
    pub margin: f64,
    pub run_id: i64,
    /// When the run that produced this forecast finished.
    pub run_finished: DateTime<Utc>,
    /// No newer run arrived when one was due: the forecast may be out of
    /// date, so certainty drops to `Possible`.
    pub stale: bool,
    /// Optional WGS 84 circle for the CAP `area`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub location: Option<Circle>,
}

/// Run-level facts shared by every [`Situation`] built from one run.
#[derive(Debug, Clone, PartialEq)]
pub struct RunContext {
    pub reach_id: String,
    pub reach_name: String,
    pub run_id: i64,
    pub run_finished: DateTime<Utc>,
    pub stale: bool,
}

impl Situation {
    /// The identity of this situation across runs.
    pub fn key(&self) -> Key {
        Key {
            reach: self.reach_id.clone(),
            point: self.point_name.clone(),
            threshold: self.threshold_name.clone(),
        }
    }

    /// A message chain is open for this situation: the stage is above the
    /// threshold now or is forecast to be later.
    pub fn is_active(&self) -> bool {
        self.exceeded || self.above_now
    }

    /// The facts whose change warrants an `Update`.
    pub fn material(&self) -> Material {
        Material {
            first_above: self.first_above,
            crest_stage: self.crest_stage,
            stale: self.stale,
            severity: self.severity,
            elevation: self.elevation,
        }
    }

    /// Builds a situation from a run's point forecast and one of its
    /// thresholds, looking only at the forecast from `now` on: the run
    /// started earlier, and an exceedance that is already over must not
    /// open a chain. The stage at `now` is interpolated linearly between
    /// samples (as [`exceed`] does); after the last sample the last stage is
    /// carried forward (a stale forecast is flagged by `ctx.stale`); before
    /// the first sample the forecast is read from its start.
    pub fn from_forecast(
        ctx: &RunContext,
        point: &PointForecast,
        threshold: &LevelOutlook,
        now: DateTime<Utc>,
    ) -> Result<Situation, CapError> {
        let trace = Trace::new(&point.times, &point.stage);
        if trace.times.is_empty() {
            return Err(CapError::EmptyForecast(point.name.clone()));
        }
        let crest = trace.crest_from(now).ok_or_else(|| CapError::NonFinite {
            key: point.name.clone(),
            field: "stage",
        })?;
        let level = threshold.seen_from(&trace, now);
        Ok(Situation {
            reach_id: ctx.reach_id.clone(),
            reach_name: ctx.reach_name.clone(),
            point_name: point.name.clone(),
            point_kind: point.kind,
            chainage: point.chainage,
            threshold_name: level.name,
            elevation: level.elevation,
            severity: level.severity,
            exceeded: level.exceeded,
            above_now: level.above_now,
            first_above: level.first_above,
            back_below: level.back_below,
            crest_stage: crest.stage,
            crest_time: crest.time,
            margin: level.margin,
            run_id: ctx.run_id,
            run_finished: ctx.run_finished,
            stale: ctx.stale,
            location: None,
        })
    }

    fn check_finite(&self) -> Result<(), CapError> {
        let fields = [
            ("chainage", self.chainage),
            ("elevation", self.elevation),
            ("crest_stage", self.crest_stage),
            ("margin", self.margin),
        ];
        for (field, v) in fields {
            if !v.is_finite() {
                return Err(CapError::NonFinite {
                    key: self.key().to_string(),
                    field,
                });
            }
        }
        Ok(())
    }
}

/// The facts of a message that, when they change, warrant an `Update`.
/// Stored with each issued message so the next plan can compare.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Material {
    pub first_above: Option<DateTime<Utc>>,
    pub crest_stage: f64,
    pub stale: bool,
    pub severity: Severity,
    pub elevation: f64,
}

impl Material {
    /// Whether `new` differs materially from `self`, as seen at `now`:
    /// onset moved by ≥ [`ONSET_SHIFT`], crest by ≥ [`CREST_CHANGE_M`],
    /// staleness or severity changed, or the threshold was re-surveyed by
    /// ≥ [`ELEVATION_CHANGE_M`]. An onset that was already in the past and
    /// still is does not count: while the water stays above, each new run
    /// starts later and reports its own start as the "first crossing",
    /// which is not news.
    pub fn changed(&self, new: &Material, now: DateTime<Utc>) -> bool {
        let onset_moved = match (self.first_above, new.first_above) {
            (Some(a), Some(b)) if a <= now && b <= now => false,
            (Some(a), Some(b)) => (a - b).abs() >= ONSET_SHIFT,
            (None, None) => false,
            _ => true,
        };
        // A small tolerance so that exactly 5 cm in decimal counts.
        let tol = 1e-9;
        onset_moved
            || (self.crest_stage - new.crest_stage).abs() >= CREST_CHANGE_M - tol
            || self.stale != new.stale
            || self.severity != new.severity
            || (self.elevation - new.elevation).abs() >= ELEVATION_CHANGE_M - tol
    }
}

/// A message issued earlier for a key, as the caller stored it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Issued {
    pub key: Key,
    pub identifier: String,
    pub sender: String,
    /// Whole seconds, as rendered (see [`Planned::sent`]).
    pub sent: DateTime<Utc>,
    pub msg_type: MsgType,
    /// Its situation was active (an `Alert` or `Update`); a `Cancel` or an
    /// inactive message closes the chain.
    pub active: bool,
    /// What it said; `None` (unknown) makes the next plan send an
    /// `Update` so that consumers get a statement we can compare against.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub material: Option<Material>,
}

/// One entry of CAP `references` (CAP §3.2.1): an earlier message.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Reference {
    pub sender: String,
    pub identifier: String,
    pub sent: DateTime<Utc>,
}

impl Reference {
    /// `sender,identifier,sent` with the CAP time form.
    pub fn triple(&self) -> String {
        format!(
            "{},{},{}",
            self.sender,
            self.identifier,
            cap_time(self.sent)
        )
    }
}

/// What a planned message is about.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Subject {
    /// The latest forecast for the key (boxed: it is large).
    Forecast(Box<Situation>),
    /// The key is no longer configured (the point or threshold was removed
    /// or renamed), so its open chain is withdrawn without a forecast.
    Withdrawn {
        /// Display name of the reach if it is still configured, else the
        /// slug.
        reach_name: String,
    },
}

/// A message that [`plan`] decided to send.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Planned {
    pub key: Key,
    pub identifier: String,
    pub sender: String,
    /// `now` truncated to whole seconds: CAP times carry no fractions, and
    /// a stored value must equal the rendered one or later `references`
    /// would not match the message they point at.
    pub sent: DateTime<Utc>,
    pub msg_type: MsgType,
    /// Every earlier message of the open chain, oldest first (empty for an
    /// `Alert`).
    pub references: Vec<Reference>,
    pub subject: Subject,
}

impl Planned {
    /// The situation, unless the key was withdrawn.
    pub fn situation(&self) -> Option<&Situation> {
        match &self.subject {
            Subject::Forecast(s) => Some(s),
            Subject::Withdrawn { .. } => None,
        }
    }

    /// Whether this message leaves the chain open.
    pub fn is_active(&self) -> bool {
        self.msg_type != MsgType::Cancel
    }

    /// The record to store and pass back to the next [`plan`].
    pub fn to_issued(&self) -> Issued {
        Issued {
            key: self.key.clone(),
            identifier: self.identifier.clone(),
            sender: self.sender.clone(),
            sent: self.sent,
            msg_type: self.msg_type,
            active: self.is_active(),
            material: self.situation().map(Situation::material),
        }
    }
}

/// CAP §3.2.1: identifier and sender "MUST NOT include spaces, commas or
/// restricted characters (< and &)" (from memory). Other whitespace is
/// refused too, since `references` splits on it. Public so that
/// configuration can check `alerts.sender` before the first message.
pub fn is_cap_token(s: &str) -> bool {
    !s.is_empty()
        && !s
            .chars()
            .any(|c| c.is_whitespace() || c.is_control() || matches!(c, ',' | '<' | '&'))
}

/// `s` reduced to `[A-Za-z0-9._-]` (others become `_`), at most 48
/// characters, for use inside identifiers.
fn id_part(s: &str) -> String {
    let mut out: String = s
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-') {
                c
            } else {
                '_'
            }
        })
        .take(48)
        .collect();
    if out.is_empty() {
        out.push_str("reach");
    }
    out
}

fn truncate_seconds(t: DateTime<Utc>) -> DateTime<Utc> {
    t.with_nanosecond(0).unwrap_or(t)
}

/// Decides which messages to send now.
///
/// Per key (previous messages ordered by `sent`, the open chain being those
/// after the last `Cancel` or inactive message):
/// - active and no open chain → `Alert`;
/// - active, open chain, and [`Material::changed`] against the chain's
///   latest message → `Update` referencing the whole chain;
/// - active and unchanged → nothing (the latest message stays current);
/// - not active, or the key is no longer in `current`, with an open chain
///   → `Cancel` referencing the whole chain.
///
/// Identifiers are `reachcast-{reach}-r{run}-{digest}` for forecast
/// messages and `reachcast-{reach}-w{unix seconds}-{digest}` for
/// withdrawals, with `-2`, `-3`… appended should one already be in use: a
/// pure function of the inputs, unique because one run yields at most one
/// message per key. Output order: `current` order, then withdrawals by key.
pub fn plan(
    previous: &[Issued],
    current: &[Situation],
    now: DateTime<Utc>,
    sender: &str,
) -> Result<Vec<Planned>, CapError> {
    if !is_cap_token(sender) {
        return Err(CapError::InvalidSender(sender.to_owned()));
    }
    let sent = truncate_seconds(now);

    let mut seen = HashSet::new();
    for s in current {
        s.check_finite()?;
        if !seen.insert(s.key()) {
            return Err(CapError::DuplicateKey(s.key().to_string()));
        }
    }

    let mut by_key: BTreeMap<&Key, Vec<&Issued>> = BTreeMap::new();
    for m in previous {
        by_key.entry(&m.key).or_default().push(m);
    }
    let mut chains: BTreeMap<&Key, Vec<&Issued>> = BTreeMap::new();
    for (key, mut msgs) in by_key {
        // Stable: messages sent in the same second keep the caller's order.
        msgs.sort_by_key(|m| m.sent);
        let start = msgs
            .iter()
            .rposition(|m| m.msg_type == MsgType::Cancel || !m.active)
            .map_or(0, |i| i + 1);
        let chain: Vec<&Issued> = msgs[start..].to_vec();
        if !chain.is_empty() {
            chains.insert(key, chain);
        }
    }

    let mut used: HashSet<String> = previous.iter().map(|m| m.identifier.clone()).collect();
    let mut unique = |base: String| -> String {
        let mut id = base.clone();
        let mut n = 1u32;
        while used.contains(&id) {
            n += 1;
            id = format!("{base}-{n}");
        }
        used.insert(id.clone());
        id
    };

    let mut out = Vec::new();
    for s in current {
        let key = s.key();
        let chain = chains.get(&key);
        let msg_type = match (s.is_active(), chain) {
            (true, None) => MsgType::Alert,
            (true, Some(chain)) => {
                let changed = chain
                    .last()
                    .and_then(|m| m.material)
                    .is_none_or(|old| old.changed(&s.material(), now));
                if !changed {
                    continue;
                }
                MsgType::Update
            }
            (false, Some(_)) => MsgType::Cancel,
            (false, None) => continue,
        };
        let references = references_of(chain.map(Vec::as_slice).unwrap_or(&[]), sent)?;
        let identifier = unique(format!(
            "reachcast-{}-r{}-{:016x}",
            id_part(&s.reach_id),
            s.run_id,
            key.digest()
        ));
        out.push(Planned {
            key,
            identifier,
            sender: sender.to_owned(),
            sent,
            msg_type,
            references,
            subject: Subject::Forecast(Box::new(s.clone())),
        });
    }

    for (key, chain) in &chains {
        if seen.contains(*key) {
            continue;
        }
        let reach_name = current
            .iter()
            .find(|s| s.reach_id == key.reach)
            .map_or_else(|| key.reach.clone(), |s| s.reach_name.clone());
        let identifier = unique(format!(
            "reachcast-{}-w{}-{:016x}",
            id_part(&key.reach),
            sent.timestamp(),
            key.digest()
        ));
        out.push(Planned {
            key: (*key).clone(),
            identifier,
            sender: sender.to_owned(),
            sent,
            msg_type: MsgType::Cancel,
            references: references_of(chain, sent)?,
            subject: Subject::Withdrawn { reach_name },
        });
    }
    Ok(out)
}

fn references_of(chain: &[&Issued], sent: DateTime<Utc>) -> Result<Vec<Reference>, CapError> {
    chain
        .iter()
        .map(|m| {
            let bad = |reason: &str| CapError::InvalidReference {
                identifier: m.identifier.clone(),
                reason: reason.to_owned(),
            };
            if !is_cap_token(&m.sender) {
                return Err(bad("its sender has a space, comma, `<` or `&`"));
            }
            if !is_cap_token(&m.identifier) {
                return Err(bad("its identifier has a space, comma, `<` or `&`"));
            }
            let prior = truncate_seconds(m.sent);
            if prior > sent {
                return Err(CapError::ClockBehind {
                    identifier: m.identifier.clone(),
                    sent: cap_time(prior),
                    now: cap_time(sent),
                });
            }
            Ok(Reference {
                sender: m.sender.clone(),
                identifier: m.identifier.clone(),
                sent: prior,
            })
        })
        .collect()
}

/// A CAP date-time (CAP §3.3.2): `YYYY-MM-DDThh:mm:ss-00:00`, whole seconds.
///
/// CAP forbids alphabetic zone designators such as `Z` and says "The
/// timezone for UTC MUST be represented as -00:00". That sentence is quoted
/// identically by several independent CAP libraries citing CAP-v1.2-os
/// §3.3.2; the OASIS document itself was not re-read here. (RFC 3339 §4.3
/// gives `-00:00` the sense "UTC, local offset unknown", which is true of a
/// forecast service: it knows no local zone of its consumers.)
pub fn cap_time(t: DateTime<Utc>) -> String {
    truncate_seconds(t)
        .format("%Y-%m-%dT%H:%M:%S-00:00")
        .to_string()
}

/// An RFC 3339 date-time for Atom (RFC 4287 §3.3), whole seconds, `Z`.
pub fn atom_time(t: DateTime<Utc>) -> String {
    truncate_seconds(t).to_rfc3339_opts(SecondsFormat::Secs, true)
}

/// Escapes text for an XML text node or a double- or single-quoted
/// attribute: the five predefined entities (XML 1.0 §2.4), and characters
/// that XML 1.0 does not allow at all (most C0 controls, U+FFFE, U+FFFF)
/// become U+FFFD, because user-chosen names must never make a document
/// that consumers reject.
pub fn xml_escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\t' | '\n' | '\r' => out.push(c),
            c if (c as u32) < 0x20 || c == '\u{FFFE}' || c == '\u{FFFF}' => out.push('\u{FFFD}'),
            c => out.push(c),
        }
    }
    out
}

/// An absolute URI: a scheme (RFC 3986 §3.1), a colon, something after it,
/// and no whitespace or characters that need escaping in XML.
fn is_absolute_uri(s: &str) -> bool {
    let Some((scheme, rest)) = s.split_once(':') else {
        return false;
    };
    let mut chars = scheme.chars();
    chars.next().is_some_and(|c| c.is_ascii_alphabetic())
        && chars.all(|c| c.is_ascii_alphanumeric() || matches!(c, '+' | '-' | '.'))
        && !rest.is_empty()
        && !s.chars().any(|c| c.is_whitespace() || c.is_control())
}

fn check_uri(field: &'static str, value: &str) -> Result<(), CapError> {
    if is_absolute_uri(value) {
        Ok(())
    } else {
        Err(CapError::InvalidUri {
            field,
            value: value.to_owned(),
        })
    }
}

/// Rendering choices that are the deployment's, not the forecast's.
#[derive(Debug, Clone, PartialEq)]
pub struct CapOptions {
    /// CAP `status`; `Actual` in service, `Exercise` or `Test` for demos.
    pub status: Status,
    /// CAP `senderName`: human-readable name of the issuing service.
    pub sender_name: String,
    /// CAP `web`: absolute URL of the dashboard for this reach, if any.
    pub web: Option<String>,
    /// A message expires this long after it is sent, or when the forecast
    /// says the water falls back below, whichever is later. Consumers drop
    /// expired messages, so if this service stops sending, its last
    /// statement fades instead of standing forever; while it runs, the
    /// expiry is never earlier than the forecast end of the exceedance.
    pub validity: Duration,
    /// CAP `language` (RFC 3066 code).
    pub language: String,
}

impl Default for CapOptions {
    fn default() -> Self {
        Self {
            status: Status::Actual,
            sender_name: "reachcast advisory river-stage forecast".to_owned(),
            web: None,
            validity: DEFAULT_VALIDITY,
            language: "en".to_owned(),
        }
    }
}

/// CAP §3.2.2 `urgency` of a message.
pub fn urgency(msg: &Planned) -> &'static str {
    match (&msg.subject, msg.msg_type) {
        (Subject::Withdrawn { .. }, _) => "Unknown",
        (Subject::Forecast(_), MsgType::Cancel) => "Past",
        (Subject::Forecast(s), _) => match s.first_above {
            _ if s.above_now => "Immediate",
            Some(t) if t <= msg.sent => "Immediate",
            Some(t) if t - msg.sent <= EXPECTED_WITHIN => "Expected",
            Some(_) => "Future",
            None => "Unknown",
        },
    }
}

/// CAP §3.2.2 `certainty` of a message.
pub fn certainty(msg: &Planned) -> &'static str {
    match &msg.subject {
        Subject::Withdrawn { .. } => "Unknown",
        Subject::Forecast(s) if s.stale => "Possible",
        Subject::Forecast(_) => "Likely",
    }
}

/// CAP §3.2.2 `severity` of a message.
pub fn severity(msg: &Planned) -> &'static str {
    match &msg.subject {
        Subject::Withdrawn { .. } => "Unknown",
        Subject::Forecast(s) => s.severity.cap_value(),
    }
}

/// CAP §3.2.2 `responseType`, if any.
pub fn response_type(msg: &Planned) -> Option<&'static str> {
    match (&msg.subject, msg.msg_type) {
        (Subject::Withdrawn { .. }, _) => None,
        (Subject::Forecast(_), MsgType::Cancel) => Some("AllClear"),
        (Subject::Forecast(s), _) if s.stale => Some("Monitor"),
        (Subject::Forecast(_), _) => match urgency(msg) {
            "Immediate" | "Expected" => Some("Prepare"),
            _ => Some("Monitor"),
        },
    }
}

/// CAP §3.2.2 `category` values. `Met` is CAP's category for floods
/// ("Meteorological (inc. flood)"). A bridge or road crossing also gets
/// `Transport` ("Public and private transportation") so that road and rail
/// operators filtering by category see water at their crossings. `Safety`
/// is not added: it is CAP's catch-all for general public safety and would
/// add nothing a consumer can filter on.
pub fn categories(msg: &Planned) -> Vec<&'static str> {
    let mut c = vec!["Met"];
    if let Some(s) = msg.situation()
        && matches!(s.point_kind, PointKind::Bridge | PointKind::RoadCrossing)
    {
        c.push("Transport");
    }
    c
}

/// CAP `event`: the same text for every message of a chain, naming the
/// user's threshold.
pub fn event(msg: &Planned) -> String {
    format!("River stage forecast to exceed {}", msg.key.threshold)
}

fn short_time(t: DateTime<Utc>) -> String {
    t.format("%d %b %H:%M UTC").to_string()
}

fn long_time(t: DateTime<Utc>) -> String {
    t.format("%Y-%m-%d %H:%M UTC").to_string()
}

/// CAP `headline`, under 160 characters (CAP §3.2.2 suggests 160 as a
/// target for short displays, from memory); longer names are cut with `…`.
pub fn headline(msg: &Planned) -> String {
    let k = &msg.key;
    let text = match (&msg.subject, msg.msg_type) {
        (Subject::Withdrawn { .. }, _) => format!(
            "Advisory withdrawn: {} at {} is no longer forecast",
            k.threshold, k.point
        ),
        (Subject::Forecast(_), MsgType::Cancel) => format!(
            "Advisory ended: {} no longer forecast above {}",
            k.point, k.threshold
        ),
        (Subject::Forecast(s), _) if s.above_now => {
            format!("Advisory: {} forecast above {} now", k.point, k.threshold)
        }
        (Subject::Forecast(s), _) => match s.first_above {
            Some(t) => format!(
                "Advisory: {} forecast to exceed {} from {}",
                k.point,
                k.threshold,
                short_time(t)
            ),
            None => format!("Advisory: {} forecast to exceed {}", k.point, k.threshold),
        },
    };
    if text.chars().count() < 160 {
        text
    } else {
        let mut cut: String = text.chars().take(158).collect();
        cut.push('…');
        cut
    }
}

/// CAP `description`: what the forecast says, where, from which run, how
/// fresh, ending with the caution.
pub fn description(msg: &Planned) -> String {
    let mut d = String::new();
    let k = &msg.key;
    match &msg.subject {
        Subject::Withdrawn { reach_name } => {
            let _ = writeln!(
                d,
                "The threshold \"{}\" at {} on {} is no longer part of this forecast's \
                 configuration, so the earlier messages about it are withdrawn. This says \
                 nothing about the river stage there.",
                k.threshold, k.point, reach_name
            );
        }
        Subject::Forecast(s) => {
            let _ = writeln!(
                d,
                "{} ({}) on {}, chainage {:.0} m.",
                s.point_name, s.point_kind, s.reach_name, s.chainage
            );
            let _ = writeln!(
                d,
                "Threshold \"{}\": elevation {:.2} m.",
                s.threshold_name, s.elevation
            );
            if msg.msg_type == MsgType::Cancel {
                let _ = writeln!(
                    d,
                    "The stage is no longer forecast to exceed this threshold; the earlier \
                     messages about it are cancelled."
                );
            } else if s.above_now {
                let _ = writeln!(d, "The stage is above this threshold now.");
            }
            if msg.msg_type != MsgType::Cancel
                && !s.above_now
                && let Some(t) = s.first_above
            {
                let _ = writeln!(
                    d,
                    "Forecast to rise above the threshold at {}.",
                    long_time(t)
                );
            }
            if msg.msg_type != MsgType::Cancel {
                match s.back_below {
                    Some(t) => {
                        let _ = writeln!(d, "Forecast to fall back below at {}.", long_time(t));
                    }
                    None => {
                        let _ = writeln!(
                            d,
                            "Forecast to stay above it to the end of the forecast period."
                        );
                    }
                }
            }
            let _ = writeln!(
                d,
                "Forecast crest {:.2} m at {}, {:+.2} m relative to the threshold.",
                s.crest_stage,
                long_time(s.crest_time),
                s.margin
            );
            let _ = writeln!(
                d,
                "Model run {} finished at {}.",
                s.run_id,
                long_time(s.run_finished)
            );
            if s.stale {
                let _ = writeln!(
                    d,
                    "This forecast is stale: no newer model run finished when one was due, so \
                     it may be out of date."
                );
            }
        }
    }
    d.push_str(CAUTION);
    d
}

/// CAP `instruction`: the caution itself, so that a consumer that shows
/// only the instruction still shows it.
pub fn instruction() -> &'static str {
    CAUTION
}

/// CAP `parameter` pairs (valueName, value). Names are this service's own,
/// prefixed `reachcast:` so they cannot be mistaken for another system's;
/// quantities in metres, times in the CAP form.
pub fn parameters(msg: &Planned) -> Vec<(&'static str, String)> {
    let mut p = vec![("reachcast:reach_id", msg.key.reach.clone())];
    match &msg.subject {
        Subject::Withdrawn { .. } => {
            p.push(("reachcast:point_name", msg.key.point.clone()));
            p.push(("reachcast:threshold_name", msg.key.threshold.clone()));
        }
        Subject::Forecast(s) => {
            p.push(("reachcast:point_name", s.point_name.clone()));
            p.push(("reachcast:point_kind", s.point_kind.to_string()));
            p.push(("reachcast:chainage_m", format!("{:.1}", s.chainage)));
            p.push(("reachcast:threshold_name", s.threshold_name.clone()));
            p.push((
                "reachcast:threshold_elevation_m",
                format!("{:.3}", s.elevation),
            ));
            p.push(("reachcast:crest_stage_m", format!("{:.3}", s.crest_stage)));
            p.push(("reachcast:crest_time", cap_time(s.crest_time)));
            p.push(("reachcast:margin_m", format!("{:.3}", s.margin)));
            if let Some(t) = s.first_above {
                p.push(("reachcast:first_above", cap_time(t)));
            }
            if let Some(t) = s.back_below {
                p.push(("reachcast:back_below", cap_time(t)));
            }
            p.push(("reachcast:above_now", s.above_now.to_string()));
            p.push(("reachcast:run_id", s.run_id.to_string()));
            p.push(("reachcast:run_finished", cap_time(s.run_finished)));
            p.push(("reachcast:forecast_stale", s.stale.to_string()));
        }
    }
    p
}

/// CAP `expires` (see [`CapOptions::validity`]); a `Cancel` lasts only the
/// validity, long enough for every consumer to see it.
pub fn expires(msg: &Planned, validity: Duration) -> Result<DateTime<Utc>, CapError> {
    let base = msg
        .sent
        .checked_add_signed(validity)
        .ok_or(CapError::TimeOutOfRange)?;
    Ok(match msg.situation() {
        Some(s) if msg.msg_type != MsgType::Cancel => match s.back_below {
            Some(b) if b > base => truncate_seconds(b),
            _ => base,
        },
        _ => base,
    })
}

fn check_circle(c: &Circle) -> Result<(), CapError> {
    if !(c.lat.is_finite() && (-90.0..=90.0).contains(&c.lat)) {
        return Err(CapError::InvalidCircle(format!(
            "latitude {} outside -90..90",
            c.lat
        )));
    }
    if !(c.lon.is_finite() && (-180.0..=180.0).contains(&c.lon)) {
        return Err(CapError::InvalidCircle(format!(
            "longitude {} outside -180..180",
            c.lon
        )));
    }
    if !(c.radius_km.is_finite() && c.radius_km >= 0.0) {
        return Err(CapError::InvalidCircle(format!(
            "radius {} km must be zero or positive",
            c.radius_km
        )));
    }
    Ok(())
}

fn element(out: &mut String, indent: &str, name: &str, text: &str) {
    let _ = writeln!(out, "{indent}<{name}>{}</{name}>", xml_escape(text));
}

/// Renders a planned message as a CAP 1.2 XML document (UTF-8).
///
/// Element order follows the CAP 1.2 schema sequence (from memory):
/// `alert` = identifier, sender, sent, status, msgType, scope, references,
/// info; `info` = language, category, event, responseType, urgency,
/// severity, certainty, onset, expires, senderName, headline, description,
/// instruction, web, parameter, area; `area` = areaDesc, circle.
pub fn render_cap(msg: &Planned, opts: &CapOptions) -> Result<String, CapError> {
    if !is_cap_token(&msg.sender) {
        return Err(CapError::InvalidSender(msg.sender.clone()));
    }
    if !is_cap_token(&msg.identifier) {
        return Err(CapError::InvalidReference {
            identifier: msg.identifier.clone(),
            reason: "the identifier has a space, comma, `<` or `&`".to_owned(),
        });
    }
    if opts.language.trim().is_empty() {
        return Err(CapError::Empty("language"));
    }
    if let Some(web) = &opts.web {
        check_uri("web", web)?;
    }
    let circle = msg.situation().and_then(|s| s.location);
    if let Some(c) = &circle {
        check_circle(c)?;
    }
    let expires = expires(msg, opts.validity)?;

    let mut x = String::new();
    x.push_str("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    let _ = writeln!(x, "<alert xmlns=\"{CAP_NAMESPACE}\">");
    let a = "  ";
    element(&mut x, a, "identifier", &msg.identifier);
    element(&mut x, a, "sender", &msg.sender);
    element(&mut x, a, "sent", &cap_time(msg.sent));
    element(&mut x, a, "status", opts.status.cap_value());
    element(&mut x, a, "msgType", msg.msg_type.cap_value());
    element(&mut x, a, "scope", "Public");
    if !msg.references.is_empty() {
        let refs: Vec<String> = msg.references.iter().map(Reference::triple).collect();
        element(&mut x, a, "references", &refs.join(" "));
    }
    let _ = writeln!(x, "{a}<info>");
    let i = "    ";
    element(&mut x, i, "language", &opts.language);
    for c in categories(msg) {
        element(&mut x, i, "category", c);
    }
    element(&mut x, i, "event", &event(msg));
    if let Some(r) = response_type(msg) {
        element(&mut x, i, "responseType", r);
    }
    element(&mut x, i, "urgency", urgency(msg));
    element(&mut x, i, "severity", severity(msg));
    element(&mut x, i, "certainty", certainty(msg));
    if msg.msg_type != MsgType::Cancel
        && let Some(t) = msg.situation().and_then(|s| s.first_above)
    {
        element(&mut x, i, "onset", &cap_time(t));
    }
    element(&mut x, i, "expires", &cap_time(expires));
    if !opts.sender_name.trim().is_empty() {
        element(&mut x, i, "senderName", &opts.sender_name);
    }
    element(&mut x, i, "headline", &headline(msg));
    element(&mut x, i, "description", &description(msg));
    element(&mut x, i, "instruction", instruction());
    if let Some(web) = &opts.web {
        element(&mut x, i, "web", web);
    }
    let p = "      ";
    for (name, value) in parameters(msg) {
        let _ = writeln!(x, "{i}<parameter>");
        element(&mut x, p, "valueName", name);
        element(&mut x, p, "value", &value);
        let _ = writeln!(x, "{i}</parameter>");
    }
    let _ = writeln!(x, "{i}<area>");
    let area_desc = match &msg.subject {
        Subject::Forecast(s) => format!("{}, {}", s.point_name, s.reach_name),
        Subject::Withdrawn { reach_name } => format!("{}, {}", msg.key.point, reach_name),
    };
    element(&mut x, p, "areaDesc", &area_desc);
    if let Some(c) = circle {
        element(
            &mut x,
            p,
            "circle",
            &format!("{:.6},{:.6} {:.3}", c.lat, c.lon, c.radius_km),
        );
    }
    let _ = writeln!(x, "{i}</area>");
    let _ = writeln!(x, "{a}</info>");
    x.push_str("</alert>\n");
    Ok(x)
}

/// The Atom feed's own metadata.
#[derive(Debug, Clone, PartialEq)]
pub struct Feed {
    /// Permanent absolute IRI of the feed (RFC 4287 §4.2.6).
    pub id: String,
    pub title: String,
    /// URL at which the feed itself is served (`rel="self"`).
    pub self_url: String,
    /// Feed-level author (RFC 4287 §4.1.1: required unless every entry has
    /// one; entries here inherit it).
    pub author_name: String,
}

/// One entry of the index: a current CAP message and where it is served.
#[derive(Debug, Clone, PartialEq)]
pub struct FeedEntry {
    /// Permanent absolute IRI of the entry.
    pub id: String,
    pub title: String,
    pub summary: String,
    pub updated: DateTime<Utc>,
    /// URL of the CAP document.
    pub cap_url: String,
}

impl FeedEntry {
    /// The entry for a message served at `cap_url`. Its id is that URL:
    /// the URL names the message's identifier, which is never reused, so
    /// it is as permanent as RFC 4287 §4.2.6 asks; and a consumer that has
    /// the id can fetch the document.
    pub fn for_message(msg: &Planned, cap_url: &str) -> FeedEntry {
        let title = headline(msg);
        FeedEntry {
            id: cap_url.to_owned(),
            summary: format!("{} ({}). {}", title, msg.msg_type.cap_value(), CAUTION),
            title,
            updated: msg.sent,
            cap_url: cap_url.to_owned(),
        }
    }
}

/// Renders the Atom index of current CAP messages (RFC 4287): feed id,
/// title, updated, author and `rel="self"` link; per entry id, title,
/// updated, summary and a `rel="alternate"` link of type
/// `application/cap+xml` to the CAP document.
pub fn render_atom(
    feed: &Feed,
    entries: &[FeedEntry],
    updated: DateTime<Utc>,
) -> Result<String, CapError> {
    check_uri("feed id", &feed.id)?;
    check_uri("feed self URL", &feed.self_url)?;
    if feed.title.trim().is_empty() {
        return Err(CapError::Empty("feed title"));
    }
    if feed.author_name.trim().is_empty() {
        return Err(CapError::Empty("feed author name"));
    }
    for e in entries {
        check_uri("entry id", &e.id)?;
        check_uri("entry CAP URL", &e.cap_url)?;
        if e.title.trim().is_empty() {
            return Err(CapError::Empty("entry title"));
        }
    }
    let mut x = String::new();
    x.push_str("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    let _ = writeln!(x, "<feed xmlns=\"{ATOM_NAMESPACE}\">");
    let f = "  ";
    element(&mut x, f, "id", &feed.id);
    element(&mut x, f, "title", &feed.title);
    element(&mut x, f, "updated", &atom_time(updated));
    let _ = writeln!(
        x,
        "{f}<link rel=\"self\" type=\"{ATOM_MEDIA_TYPE}\" href=\"{}\"/>",
        xml_escape(&feed.self_url)
    );
    let _ = writeln!(x, "{f}<author>");
    element(&mut x, "    ", "name", &feed.author_name);
    let _ = writeln!(x, "{f}</author>");
    element(&mut x, f, "subtitle", CAUTION);
    for e in entries {
        let n = "    ";
        let _ = writeln!(x, "{f}<entry>");
        element(&mut x, n, "id", &e.id);
        element(&mut x, n, "title", &e.title);
        element(&mut x, n, "updated", &atom_time(e.updated));
        let _ = writeln!(
            x,
            "{n}<link rel=\"alternate\" type=\"{CAP_MEDIA_TYPE}\" href=\"{}\"/>",
            xml_escape(&e.cap_url)
        );
        element(&mut x, n, "summary", &e.summary);
        let _ = writeln!(x, "{f}</entry>");
    }
    x.push_str("</feed>\n");
    Ok(x)
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::TimeZone;

    fn t(h: u32, m: u32) -> DateTime<Utc> {
        Utc.with_ymd_and_hms(2031, 3, 14, h, m, 0)
            .single()
            .expect("valid time")
    }

    /// A bridge on an invented reach, forecast to exceed "Road closed" at
    /// 09:00, crest 12.40 m at 11:00, back below at 14:00; now is 06:00.
    fn situation() -> Situation {
        Situation {
            reach_id: "brindlemoor".into(),
            reach_name: "Brindlemoor River".into(),
            point_name: "Sallowgate Bridge".into(),
            point_kind: PointKind::Bridge,
            chainage: 4200.0,
            threshold_name: "Road closed".into(),
            elevation: 12.0,
            severity: Severity::Moderate,
            exceeded: true,
            above_now: false,
            first_above: Some(t(9, 0)),
            back_below: Some(t(14, 0)),
            crest_stage: 12.4,
            crest_time: t(11, 0),
            margin: 0.4,
            run_id: 7,
            run_finished: t(5, 50),
            stale: false,
            location: None,
        }
    }

    const SENDER: &str = "reachcast@brindlemoor.example";

    fn issued(p: &[Planned]) -> Vec<Issued> {
        p.iter().map(Planned::to_issued).collect()
    }

    #[test]
    fn new_exceedance_is_an_alert() {
        let out = plan(&[], &[situation()], t(6, 0), SENDER).expect("plan");
        assert_eq!(out.len(), 1);
        let m = &out[0];
        assert_eq!(m.msg_type, MsgType::Alert);
        assert!(m.references.is_empty());
        assert_eq!(m.identifier, "reachcast-brindlemoor-r7-f255937f9c274c04");
        assert!(is_cap_token(&m.identifier));
        assert_eq!(m.sent, t(6, 0));
    }

    #[test]
    fn nothing_is_sent_when_not_exceeded_and_no_chain() {
        let mut s = situation();
        s.exceeded = false;
        s.first_above = None;
        assert!(plan(&[], &[s], t(6, 0), SENDER).expect("plan").is_empty());
    }

    #[test]
    fn unchanged_forecast_sends_nothing() {
        let first = plan(&[], &[situation()], t(6, 0), SENDER).expect("plan");
        let mut s = situation();
        s.run_id = 8;
        s.crest_stage += 0.04; // below the 5 cm rule
        s.first_above = Some(t(9, 14)); // below the 15 min rule
        let out = plan(&issued(&first), &[s], t(7, 0), SENDER).expect("plan");
        assert!(out.is_empty(), "{out:?}");
    }

    #[test]
    fn material_changes_update_and_reference_the_whole_chain() {
        let mut history = issued(&plan(&[], &[situation()], t(6, 0), SENDER).expect("plan"));
        // Crest up by exactly 5 cm.
        let mut s = situation();
        s.run_id = 8;
        s.crest_stage = 12.45;
        let up1 = plan(&history, &[s.clone()], t(7, 0), SENDER).expect("plan");
        assert_eq!(up1.len(), 1);
        assert_eq!(up1[0].msg_type, MsgType::Update);
        assert_eq!(up1[0].references.len(), 1);
        assert_eq!(up1[0].references[0].identifier, history[0].identifier);
        history.extend(issued(&up1));
        // Onset 15 min earlier: second update references both earlier messages.
        s.run_id = 9;
        s.first_above = Some(t(8, 45));
        let up2 = plan(&history, &[s.clone()], t(8, 0), SENDER).expect("plan");
        assert_eq!(up2[0].msg_type, MsgType::Update);
        let refs: Vec<&str> = up2[0]
            .references
            .iter()
            .map(|r| r.identifier.as_str())
            .collect();
        assert_eq!(
            refs,
            vec![
                history[0].identifier.as_str(),
                history[1].identifier.as_str()
            ]
        );
        assert_eq!(
            up2[0].references[0].triple(),
            format!(
                "{SENDER},{},2031-03-14T06:00:00-00:00",
                history[0].identifier
            )
        );
        // Severity change is material too.
        history.extend(issued(&up2));
        s.run_id = 10;
        s.severity = Severity::Severe;
        let up3 = plan(&history, &[s], t(9, 0), SENDER).expect("plan");
        assert_eq!(up3[0].msg_type, MsgType::Update);
        assert_eq!(up3[0].references.len(), 3);
    }

    #[test]
    fn comparison_is_against_the_latest_message_not_the_first() {
        let mut history = issued(&plan(&[], &[situation()], t(6, 0), SENDER).expect("plan"));
        let mut s = situation();
        s.run_id = 8;
        s.crest_stage = 12.50;
        history.extend(issued(
            &plan(&history, &[s.clone()], t(7, 0), SENDER).expect("plan"),
        ));
        s.run_id = 9;
        s.crest_stage = 12.52; // 12 cm above the Alert, 2 cm above the Update
        assert!(
            plan(&history, &[s], t(8, 0), SENDER)
                .expect("plan")
                .is_empty()
        );
    }

    #[test]
    fn dropping_below_cancels_with_references_and_a_new_chain_starts_after() {
        let mut history = issued(&plan(&[], &[situation()], t(6, 0), SENDER).expect("plan"));
        let mut s = situation();
        s.run_id = 8;
        s.crest_stage = 12.6;
        history.extend(issued(
            &plan(&history, &[s.clone()], t(7, 0), SENDER).expect("plan"),
        ));
        s.run_id = 9;
        s.exceeded = false;
        s.first_above = None;
        s.back_below = None;
        s.crest_stage = 11.8;
        s.margin = -0.2;
        let cancel = plan(&history, &[s.clone()], t(8, 0), SENDER).expect("plan");
        assert_eq!(cancel.len(), 1);
        let c = &cancel[0];
        assert_eq!(c.msg_type, MsgType::Cancel);
        assert_eq!(c.references.len(), 2);
        assert_eq!(urgency(c), "Past");
        assert_eq!(response_type(c), Some("AllClear"));
        assert!(!c.to_issued().active);
        history.extend(issued(&cancel));
        // Still below: nothing more.
        s.run_id = 10;
        assert!(
            plan(&history, &[s], t(9, 0), SENDER)
                .expect("plan")
                .is_empty()
        );
        // Rising again: a fresh Alert with no references.
        let mut again = situation();
        again.run_id = 11;
        let alert = plan(&history, &[again], t(10, 0), SENDER).expect("plan");
        assert_eq!(alert[0].msg_type, MsgType::Alert);
        assert!(alert[0].references.is_empty());
    }

    #[test]
    fn stale_forecast_updates_with_possible_certainty() {
        let history = issued(&plan(&[], &[situation()], t(6, 0), SENDER).expect("plan"));
        let mut s = situation();
        s.stale = true; // same run, now flagged stale
        let out = plan(&history, &[s], t(8, 0), SENDER).expect("plan");
        assert_eq!(out.len(), 1);
        assert_eq!(out[0].msg_type, MsgType::Update);
        assert_eq!(certainty(&out[0]), "Possible");
        assert_eq!(response_type(&out[0]), Some("Monitor"));
        assert!(description(&out[0]).contains("stale"));
        // Same run id as the Alert: the identifier gets a suffix.
        assert_eq!(out[0].identifier, format!("{}-2", history[0].identifier));
    }

    #[test]
    fn removed_threshold_is_withdrawn() {
        let history = issued(&plan(&[], &[situation()], t(6, 0), SENDER).expect("plan"));
        let mut other = situation();
        other.threshold_name = "Deck awash".into();
        other.exceeded = false;
        other.first_above = None;
        let out = plan(&history, &[other], t(7, 0), SENDER).expect("plan");
        assert_eq!(out.len(), 1);
        let c = &out[0];
        assert_eq!(c.msg_type, MsgType::Cancel);
        assert_eq!(c.key, situation().key());
        assert_eq!(
            c.subject,
            Subject::Withdrawn {
                reach_name: "Brindlemoor River".into()
            }
        );
        assert_eq!(
            (urgency(c), severity(c), certainty(c)),
            ("Unknown", "Unknown", "Unknown")
        );
        assert_eq!(response_type(c), None);
        assert!(c.identifier.starts_with("reachcast-brindlemoor-w"));
        let xml = render_cap(c, &CapOptions::default()).expect("render");
        assert!(xml.contains(CAUTION));
    }

    #[test]
    fn urgency_follows_time_to_onset() {
        let at = |now: DateTime<Utc>, s: Situation| {
            let p = plan(&[], &[s], now, SENDER).expect("plan");
            urgency(&p[0])
        };
        assert_eq!(at(t(6, 0), situation()), "Future");
        assert_eq!(at(t(8, 0), situation()), "Expected");
        assert_eq!(at(t(8, 1), situation()), "Expected");
        let mut s = situation();
        s.above_now = true;
        s.first_above = Some(t(6, 0));
        assert_eq!(at(t(6, 0), s), "Immediate");
    }

    #[test]
    fn onsets_both_in_the_past_are_not_news() {
        let mut a = situation().material();
        a.first_above = Some(t(6, 0));
        let mut b = a;
        b.first_above = Some(t(7, 0));
        assert!(!a.changed(&b, t(7, 30)));
        assert!(a.changed(&b, t(6, 30)));
    }

    #[test]
    fn cap_time_has_offset_and_no_fraction() {
        let x = Utc
            .with_ymd_and_hms(2031, 1, 2, 3, 4, 5)
            .single()
            .expect("valid")
            + Duration::milliseconds(987);
        assert_eq!(cap_time(x), "2031-01-02T03:04:05-00:00");
        assert_eq!(atom_time(x), "2031-01-02T03:04:05Z");
    }

    #[test]
    fn special_characters_in_names_are_escaped() {
        assert_eq!(
            xml_escape("a<b & c>d \"e\" 'f'"),
            "a&lt;b &amp; c&gt;d &quot;e&quot; &apos;f&apos;"
        );
        assert_eq!(xml_escape("bell\u{7}"), "bell\u{FFFD}");
        let mut s = situation();
        s.point_name = "Mill <Lane> & \"Ford\" 'Crossing'".into();
        let p = plan(&[], &[s], t(6, 0), SENDER).expect("plan");
        let xml = render_cap(&p[0], &CapOptions::default()).expect("render");
        assert!(xml.contains("Mill &lt;Lane&gt; &amp; &quot;Ford&quot; &apos;Crossing&apos;"));
        assert!(!xml.contains("<Lane>"));
        assert!(!xml.contains("& \""));
    }

    #[test]
    fn identifiers_are_safe_whatever_the_slug() {
        let mut s = situation();
        s.reach_id = "Brindle moor, <upper> & lower".into();
        let p = plan(&[], &[s], t(6, 0), SENDER).expect("plan");
        assert!(is_cap_token(&p[0].identifier), "{}", p[0].identifier);
        assert!(
            p[0].identifier
                .starts_with("reachcast-Brindle_moor___upper____lower-r7-")
        );
    }

    #[test]
    fn bad_inputs_are_typed_errors() {
        assert!(matches!(
            plan(&[], &[situation()], t(6, 0), "has space"),
            Err(CapError::InvalidSender(_))
        ));
        assert!(matches!(
            plan(&[], &[situation()], t(6, 0), "a,b"),
            Err(CapError::InvalidSender(_))
        ));
        assert!(matches!(
            plan(&[], &[situation(), situation()], t(6, 0), SENDER),
            Err(CapError::DuplicateKey(_))
        ));
        let mut s = situation();
        s.crest_stage = f64::NAN;
        assert!(matches!(
            plan(&[], &[s], t(6, 0), SENDER),
            Err(CapError::NonFinite {
                field: "crest_stage",
                ..
            })
        ));
        let history = issued(&plan(&[], &[situation()], t(6, 0), SENDER).expect("plan"));
        let mut s = situation();
        s.crest_stage = 13.0;
        assert!(matches!(
            plan(&history, &[s], t(5, 0), SENDER),
            Err(CapError::ClockBehind { .. })
        ));
        let p = plan(&[], &[situation()], t(6, 0), SENDER).expect("plan");
        let opts = CapOptions {
            web: Some("not a url".into()),
            ..CapOptions::default()
        };
        assert!(matches!(
            render_cap(&p[0], &opts),
            Err(CapError::InvalidUri { .. })
        ));
        let mut s = situation();
        s.location = Some(Circle {
            lat: 95.0,
            lon: 0.0,
            radius_km: 1.0,
        });
        let p = plan(&[], &[s], t(6, 0), SENDER).expect("plan");
        assert!(matches!(
            render_cap(&p[0], &CapOptions::default()),
            Err(CapError::InvalidCircle(_))
        ));
    }

    #[test]
    fn expires_is_validity_or_back_below_whichever_later() {
        let p = plan(&[], &[situation()], t(6, 0), SENDER).expect("plan");
        // back_below 14:00 is later than 06:00 + 6 h.
        assert_eq!(expires(&p[0], DEFAULT_VALIDITY).expect("expires"), t(14, 0));
        let mut s = situation();
        s.back_below = Some(t(10, 0));
        let p = plan(&[], &[s], t(6, 0), SENDER).expect("plan");
        assert_eq!(expires(&p[0], DEFAULT_VALIDITY).expect("expires"), t(12, 0));
    }

    #[test]
    fn headline_stays_under_160_characters() {
        let mut s = situation();
        s.point_name = "Sallowgate ".repeat(30);
        let p = plan(&[], &[s], t(6, 0), SENDER).expect("plan");
        assert!(headline(&p[0]).chars().count() < 160);
        assert!(
            headline(&plan(&[], &[situation()], t(6, 0), SENDER).expect("plan")[0])
                .contains("Sallowgate Bridge")
        );
    }

    #[test]
    fn caution_is_in_description_and_instruction() {
        let p = plan(&[], &[situation()], t(6, 0), SENDER).expect("plan");
        assert!(description(&p[0]).ends_with(CAUTION));
        assert_eq!(instruction(), CAUTION);
    }

    #[test]
    fn categories_add_transport_at_crossings_only() {
        let p = plan(&[], &[situation()], t(6, 0), SENDER).expect("plan");
        assert_eq!(categories(&p[0]), vec!["Met", "Transport"]);
        let mut s = situation();
        s.point_kind = PointKind::Town;
        let p = plan(&[], &[s], t(6, 0), SENDER).expect("plan");
        assert_eq!(categories(&p[0]), vec!["Met"]);
    }

    fn point(times: Vec<DateTime<Utc>>, stage: Vec<f64>) -> (PointForecast, LevelOutlook) {
        let point = PointForecast {
            name: "Sallowgate Bridge".into(),
            chainage: 4200.0,
            kind: PointKind::Bridge,
            bed_elevation: 8.0,
            low_chord: None,
            deck: None,
            discharge: vec![0.0; times.len()],
            times,
            stage,
            crest_stage: 0.0,
            crest_time: t(0, 0),
            peak_discharge: 0.0,
            low_chord_margin: None,
            deck_margin: None,
            thresholds: vec![],
        };
        let th = LevelOutlook {
            name: "Road closed".into(),
            elevation: 12.0,
            severity: Severity::Moderate,
            exceeded: true,
            above_now: false,
            first_above: None,
            back_below: None,
            duration_above_s: 0.0,
            margin: 0.0,
        };
        (point, th)
    }

    #[test]
    fn from_forecast_reads_the_series_from_now_on() {
        let ctx = RunContext {
            reach_id: "brindlemoor".into(),
            reach_name: "Brindlemoor River".into(),
            run_id: 3,
            run_finished: t(5, 0),
            stale: false,
        };
        // Above 12 m only between 06:00 and 08:00, peaking 13 m at 07:00.
        let times = vec![t(5, 0), t(6, 0), t(7, 0), t(8, 0), t(9, 0)];
        let (p, th) = point(times, vec![11.0, 12.0, 13.0, 12.0, 11.0]);
        // At 06:30 it is above now (12.5 m), back below at 08:00.
        let s = Situation::from_forecast(&ctx, &p, &th, t(6, 30)).expect("situation");
        assert!(s.above_now && s.exceeded);
        assert_eq!(s.first_above, Some(t(6, 30)));
        assert_eq!(s.back_below, Some(t(8, 0)));
        assert_eq!((s.crest_stage, s.crest_time), (13.0, t(7, 0)));
        // At 08:30 the exceedance is over: no chain should open.
        let s = Situation::from_forecast(&ctx, &p, &th, t(8, 30)).expect("situation");
        assert!(!s.above_now && !s.exceeded && !s.is_active());
        // Before the forecast starts, the whole series is read, not "now".
        let s = Situation::from_forecast(&ctx, &p, &th, t(4, 0)).expect("situation");
        assert!(!s.above_now && s.exceeded);
        assert_eq!(s.first_above, Some(t(6, 0)));
        // After it ends, the last stage is carried forward.
        let s = Situation::from_forecast(&ctx, &p, &th, t(10, 0)).expect("situation");
        assert!(!s.exceeded);
        let (empty, th) = point(vec![], vec![]);
        assert!(matches!(
            Situation::from_forecast(&ctx, &empty, &th, t(6, 0)),
            Err(CapError::EmptyForecast(_))
        ));
    }

    #[test]
    fn key_digest_is_fnv1a_with_unit_separators() {
        // Cross-checked with an independent FNV-1a 64 implementation, which
        // also gives the published test vector FNV-1a("a") = af63dc4c8601ec8c.
        assert_eq!(situation().key().digest(), 0xf255_937f_9c27_4c04);
    }
}

//! Planning: which `Alert`, `Update` or `Cancel` is due per (reach, point,
//! threshold) [`Key`], given the messages already [`Issued`]. A consumer of
//! CAP keeps the latest message of a chain as the current statement, so we
//! only send again when something it relies on changed materially; sending
//! on every model run would drown the signal.

use std::collections::{BTreeMap, HashSet};

use chrono::{DateTime, Duration, Utc};
use serde::{Deserialize, Serialize};

use super::lexical::{cap_time, is_cap_token, truncate_seconds};
use super::{CapError, Key, Situation, situation::Certainty};
use crate::forecast::spec::Severity;

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

/// The facts of a message that, when they change, warrant an `Update`.
/// Stored with each issued message so the next plan can compare.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Material {
    pub first_above: Option<DateTime<Utc>>,
    pub crest_stage: f64,
    pub stale: bool,
    pub severity: Severity,
    pub elevation: f64,
    /// Messages stored before certainty followed the ensemble were
    /// `Likely` unless stale, which `stale` records on its own.
    #[serde(default)]
    pub certainty: Certainty,
}

impl Material {
    /// Whether `new` differs materially from `self`, as seen at `now`:
    /// onset moved by ≥ [`ONSET_SHIFT`], crest by ≥ [`CREST_CHANGE_M`],
    /// staleness, severity or certainty changed, or the threshold was re-surveyed by
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
            || self.certainty != new.certainty
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
        /// Display name of the point if it is still configured, else its
        /// id.
        point_name: String,
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

/// Who issues the messages: the CAP `sender`, and the identity of the
/// database they are stored in (`service_meta.instance_id`). Identifiers
/// carry the instance because neither the sender (often left at its
/// default) nor the run id (1 again in every new database) tells two
/// installs apart, and CAP §3.2.1 asks for an identifier unique to the
/// sender.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Issuer<'a> {
    pub sender: &'a str,
    /// ASCII letters and digits (the database's random hex id).
    pub instance: &'a str,
}

/// Mints identifiers `reachcast-{instance}-{reach}-{run part}-{digest}`,
/// appending `-2`, `-3`… to one already in use.
struct Identifiers<'a> {
    instance: &'a str,
    used: HashSet<String>,
}

impl Identifiers<'_> {
    fn mint(&mut self, key: &Key, run_part: &str) -> String {
        let base = format!(
            "reachcast-{}-{}-{run_part}-{:016x}",
            self.instance,
            id_part(&key.reach),
            key.digest()
        );
        let mut id = base.clone();
        let mut n = 1u32;
        while self.used.contains(&id) {
            n += 1;
            id = format!("{base}-{n}");
        }
        self.used.insert(id.clone());
        id
    }
}

/// Per key, the open chain of `previous`: the messages after its last
/// `Cancel` or inactive message, ordered by `sent` (stable, so messages
/// sent in the same second keep the caller's order). Closed keys are left
/// out.
fn open_chains(previous: &[Issued]) -> BTreeMap<&Key, Vec<&Issued>> {
    let mut by_key: BTreeMap<&Key, Vec<&Issued>> = BTreeMap::new();
    for m in previous {
        by_key.entry(&m.key).or_default().push(m);
    }
    let mut chains = BTreeMap::new();
    for (key, mut msgs) in by_key {
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
    chains
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
/// Identifiers are `reachcast-{instance}-{reach}-r{run}-{digest}` for
/// forecast messages and `reachcast-{instance}-{reach}-w{unix
/// seconds}-{digest}` for withdrawals, with `-2`, `-3`… appended should
/// one already be in use: a pure function of the inputs, unique because
/// one run yields at most one message per key and the instance differs
/// between databases. Output order: `current` order, then withdrawals by
/// key.
pub fn plan(
    previous: &[Issued],
    current: &[Situation],
    now: DateTime<Utc>,
    issuer: &Issuer<'_>,
) -> Result<Vec<Planned>, CapError> {
    let sender = issuer.sender;
    if !is_cap_token(sender) {
        return Err(CapError::InvalidSender(sender.to_owned()));
    }
    if issuer.instance.is_empty() || !issuer.instance.chars().all(|c| c.is_ascii_alphanumeric()) {
        return Err(CapError::InvalidInstance(issuer.instance.to_owned()));
    }
    let sent = truncate_seconds(now);

    let mut seen = HashSet::new();
    for s in current {
        s.check_finite()?;
        if !seen.insert(s.key()) {
            return Err(CapError::DuplicateKey(s.key().to_string()));
        }
    }
    let chains = open_chains(previous);
    let mut ids = Identifiers {
        instance: issuer.instance,
        used: previous.iter().map(|m| m.identifier.clone()).collect(),
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
        out.push(Planned {
            identifier: ids.mint(&key, &format!("r{}", s.run_id)),
            key,
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
        let point_name = current
            .iter()
            .find(|s| s.reach_id == key.reach && s.point_id == key.point)
            .map_or_else(|| key.point.clone(), |s| s.point_name.clone());
        out.push(Planned {
            key: (*key).clone(),
            identifier: ids.mint(key, &format!("w{}", sent.timestamp())),
            sender: sender.to_owned(),
            sent,
            msg_type: MsgType::Cancel,
            references: references_of(chain, sent)?,
            subject: Subject::Withdrawn {
                reach_name,
                point_name,
            },
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::CAUTION;
    use crate::forecast::cap::fixtures::{INSTANCE, ISSUER, SENDER, issued, situation, t};
    use crate::forecast::cap::{
        CapOptions, certainty, description, is_cap_token, render_cap, response_type, severity,
        urgency,
    };

    #[test]
    fn new_exceedance_is_an_alert() {
        let out = plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan");
        assert_eq!(out.len(), 1);
        let m = &out[0];
        assert_eq!(m.msg_type, MsgType::Alert);
        assert!(m.references.is_empty());
        assert_eq!(
            m.identifier,
            format!("reachcast-{INSTANCE}-brindlemoor-r7-2fa42d3a144bea9c")
        );
        assert!(is_cap_token(&m.identifier));
        assert_eq!(m.sent, t(6, 0));
    }

    #[test]
    fn nothing_is_sent_when_not_exceeded_and_no_chain() {
        let mut s = situation();
        s.exceeded = false;
        s.first_above = None;
        assert!(plan(&[], &[s], t(6, 0), &ISSUER).expect("plan").is_empty());
    }

    #[test]
    fn unchanged_forecast_sends_nothing() {
        let first = plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan");
        let mut s = situation();
        s.run_id = 8;
        s.crest_stage += 0.04; // below the 5 cm rule
        s.first_above = Some(t(9, 14)); // below the 15 min rule
        let out = plan(&issued(&first), &[s], t(7, 0), &ISSUER).expect("plan");
        assert!(out.is_empty(), "{out:?}");
    }

    #[test]
    fn material_changes_update_and_reference_the_whole_chain() {
        let mut history = issued(&plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan"));
        // Crest up by exactly 5 cm.
        let mut s = situation();
        s.run_id = 8;
        s.crest_stage = 12.45;
        let up1 = plan(&history, &[s.clone()], t(7, 0), &ISSUER).expect("plan");
        assert_eq!(up1.len(), 1);
        assert_eq!(up1[0].msg_type, MsgType::Update);
        assert_eq!(up1[0].references.len(), 1);
        assert_eq!(up1[0].references[0].identifier, history[0].identifier);
        history.extend(issued(&up1));
        // Onset 15 min earlier: second update references both earlier messages.
        s.run_id = 9;
        s.first_above = Some(t(8, 45));
        let up2 = plan(&history, &[s.clone()], t(8, 0), &ISSUER).expect("plan");
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
        let up3 = plan(&history, &[s], t(9, 0), &ISSUER).expect("plan");
        assert_eq!(up3[0].msg_type, MsgType::Update);
        assert_eq!(up3[0].references.len(), 3);
    }

    #[test]
    fn comparison_is_against_the_latest_message_not_the_first() {
        let mut history = issued(&plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan"));
        let mut s = situation();
        s.run_id = 8;
        s.crest_stage = 12.50;
        history.extend(issued(
            &plan(&history, &[s.clone()], t(7, 0), &ISSUER).expect("plan"),
        ));
        s.run_id = 9;
        s.crest_stage = 12.52; // 12 cm above the Alert, 2 cm above the Update
        assert!(
            plan(&history, &[s], t(8, 0), &ISSUER)
                .expect("plan")
                .is_empty()
        );
    }

    #[test]
    fn dropping_below_cancels_with_references_and_a_new_chain_starts_after() {
        let mut history = issued(&plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan"));
        let mut s = situation();
        s.run_id = 8;
        s.crest_stage = 12.6;
        history.extend(issued(
            &plan(&history, &[s.clone()], t(7, 0), &ISSUER).expect("plan"),
        ));
        s.run_id = 9;
        s.exceeded = false;
        s.first_above = None;
        s.back_below = None;
        s.crest_stage = 11.8;
        s.margin = -0.2;
        let cancel = plan(&history, &[s.clone()], t(8, 0), &ISSUER).expect("plan");
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
            plan(&history, &[s], t(9, 0), &ISSUER)
                .expect("plan")
                .is_empty()
        );
        // Rising again: a fresh Alert with no references.
        let mut again = situation();
        again.run_id = 11;
        let alert = plan(&history, &[again], t(10, 0), &ISSUER).expect("plan");
        assert_eq!(alert[0].msg_type, MsgType::Alert);
        assert!(alert[0].references.is_empty());
    }

    #[test]
    fn stale_forecast_updates_with_possible_certainty() {
        let history = issued(&plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan"));
        let mut s = situation();
        s.stale = true; // same run, now flagged stale
        let out = plan(&history, &[s], t(8, 0), &ISSUER).expect("plan");
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
        let history = issued(&plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan"));
        let mut other = situation();
        other.level_id = "deck-awash".into();
        other.threshold_name = "Deck awash".into();
        other.exceeded = false;
        other.first_above = None;
        let out = plan(&history, &[other], t(7, 0), &ISSUER).expect("plan");
        assert_eq!(out.len(), 1);
        let c = &out[0];
        assert_eq!(c.msg_type, MsgType::Cancel);
        assert_eq!(c.key, situation().key());
        assert_eq!(
            c.subject,
            Subject::Withdrawn {
                reach_name: "Brindlemoor River".into(),
                point_name: "Sallowgate Bridge".into(),
            }
        );
        assert_eq!(
            (urgency(c), severity(c), certainty(c)),
            ("Unknown", "Unknown", "Unknown")
        );
        assert_eq!(response_type(c), None);
        assert!(
            c.identifier
                .starts_with(&format!("reachcast-{INSTANCE}-brindlemoor-w"))
        );
        let xml = render_cap(c, &CapOptions::default()).expect("render");
        assert!(xml.contains(CAUTION));
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
    fn identifiers_are_safe_whatever_the_slug() {
        let mut s = situation();
        s.reach_id = "Brindle moor, <upper> & lower".into();
        let p = plan(&[], &[s], t(6, 0), &ISSUER).expect("plan");
        assert!(is_cap_token(&p[0].identifier), "{}", p[0].identifier);
        assert!(p[0].identifier.starts_with(&format!(
            "reachcast-{INSTANCE}-Brindle_moor___upper____lower-r7-"
        )));
    }

    #[test]
    fn identifiers_differ_between_databases() {
        // Two databases, same sender, same run number and key: CAP §3.2.1
        // wants the identifier unique for the sender, so the database
        // identity must tell them apart.
        let other = Issuer {
            instance: "0123456789abcdef0123456789abcdef",
            ..ISSUER
        };
        let a = plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan");
        let b = plan(&[], &[situation()], t(6, 0), &other).expect("plan");
        assert_ne!(a[0].identifier, b[0].identifier);
        assert!(b[0].identifier.contains(other.instance));
        for bad in ["", "has-dash", "spa ce"] {
            let issuer = Issuer {
                instance: bad,
                ..ISSUER
            };
            assert!(matches!(
                plan(&[], &[situation()], t(6, 0), &issuer),
                Err(CapError::InvalidInstance(_))
            ));
        }
    }

    #[test]
    fn bad_plan_inputs_are_typed_errors() {
        // CAP §3.2.1: no spaces or commas in the sender.
        for sender in ["has space", "a,b"] {
            let issuer = Issuer { sender, ..ISSUER };
            assert!(matches!(
                plan(&[], &[situation()], t(6, 0), &issuer),
                Err(CapError::InvalidSender(_))
            ));
        }
        assert!(matches!(
            plan(&[], &[situation(), situation()], t(6, 0), &ISSUER),
            Err(CapError::DuplicateKey(_))
        ));
        let mut s = situation();
        s.crest_stage = f64::NAN;
        assert!(matches!(
            plan(&[], &[s], t(6, 0), &ISSUER),
            Err(CapError::NonFinite {
                field: "crest_stage",
                ..
            })
        ));
        let history = issued(&plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan"));
        let mut s = situation();
        s.crest_stage = 13.0;
        assert!(matches!(
            plan(&history, &[s], t(5, 0), &ISSUER),
            Err(CapError::ClockBehind { .. })
        ));
    }
}

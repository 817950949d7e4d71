//! CAP messages from forecast runs: after each successful run the scheduler
//! hands the run's [`Situation`]s to [`Alerter::after_run`], which loads the
//! reach's open message chains, lets [`cap::plan`] decide what is due,
//! renders each message once and stores it with its document. The HTTP
//! layer (`http/cap.rs`) serves the stored documents as they were rendered.
//!
//! Failures are logged and never fail the run: a forecast is worth serving
//! even when its messages could not be issued, and the next run plans
//! against whatever was stored.
//!
//! Renewal: a message expires (CAP `expires`) 6 h after it is sent or when
//! the forecast says the water falls back, whichever is later, so that a
//! service that stops leaves no statement standing for ever. While the
//! forecast stays the same, [`cap::plan`] sends nothing; so when the current
//! message of an open chain would expire within two forecast intervals, it
//! is treated as saying nothing comparable (`material: None`, which the
//! plan documents as forcing an `Update`) and is restated in good time.

use std::collections::HashSet;

use chrono::{DateTime, Duration, Utc};

use crate::{
    config::{AlertsConfig, Config},
    forecast::levels::levels_of,
    forecast::{
        cap::{
            self, AtomIds, CapError, CapOptions, Feed, FeedEntry, Issued, Issuer, Key, Situation,
        },
        spec::ReachSpec,
    },
    store::{CurrentCap, NewCapMessage, OpenMessage, ReachVersion, ServiceMeta, Store, StoreError},
};

/// Why the messages of a run were not issued.
#[derive(Debug, thiserror::Error)]
pub enum AlertError {
    #[error("planning CAP messages: {0}")]
    Cap(#[from] CapError),
    #[error(transparent)]
    Store(#[from] StoreError),
    /// A configured (point, threshold) with an open chain has no situation
    /// in the run (its results could not be read): the plan would take it
    /// for removed and withdraw its messages, which would be false.
    #[error("{0}: configured, but the run gave no forecast for it; its messages stay as they are")]
    Incomplete(String),
}

/// Plans, renders and stores CAP messages. Cheap to share.
#[derive(Debug, Clone)]
pub struct Alerter {
    sender: String,
    options: CapOptions,
    base_url: Option<String>,
    renew_within: Duration,
}

impl Alerter {
    pub fn new(config: &Config) -> Self {
        let minutes = i64::try_from(config.forecast.interval_minutes).unwrap_or(1_440);
        Self {
            sender: config.alerts.sender.clone(),
            options: CapOptions {
                status: config.cap_status(),
                ..CapOptions::default()
            },
            base_url: config.alerts.base_url().map(str::to_owned),
            renew_within: Duration::minutes(2 * minutes),
        }
    }

    /// Issues the messages due after run `run_id` of `reach` (the version
    /// the run used), whose situations (one per point and threshold) are
    /// `situations`. Logs the outcome and returns the `msgType` of each
    /// message issued; never fails.
    pub async fn after_run(
        &self,
        store: &Store,
        reach: &ReachVersion,
        run_id: i64,
        situations: &[Situation],
    ) -> Vec<&'static str> {
        let reach_id = reach.reach_id.as_str();
        match self
            .issue(store, reach, run_id, situations, Utc::now())
            .await
        {
            Ok(issued) => {
                for m in &issued {
                    tracing::info!(
                        reach = reach_id,
                        run_id,
                        identifier = %m.issued.identifier,
                        msg_type = m.issued.msg_type.cap_value(),
                        key = %m.issued.key,
                        "CAP message issued"
                    );
                }
                issued
                    .iter()
                    .map(|m| m.issued.msg_type.cap_value())
                    .collect()
            }
            Err(e) => {
                tracing::error!(
                    reach = reach_id,
                    run_id,
                    error = %e,
                    "CAP messages not issued; the forecast is served regardless"
                );
                Vec::new()
            }
        }
    }

    /// Plans against the stored open chains at `now`, renders and stores
    /// (one transaction); returns what was stored.
    pub async fn issue(
        &self,
        store: &Store,
        reach: &ReachVersion,
        run_id: i64,
        situations: &[Situation],
        now: DateTime<Utc>,
    ) -> Result<Vec<NewCapMessage>, AlertError> {
        let reach_id = reach.reach_id.as_str();
        let mut open = store.cap_open_chains(reach_id).await?;
        let renames = legacy_renames(&open, &reach.spec);
        if !renames.is_empty() {
            store.rekey_cap_chains(reach_id, &renames).await?;
            open = store.cap_open_chains(reach_id).await?;
        }
        check_complete(&open, situations, &reach.spec)?;
        let previous = with_renewals(&open, now, self.renew_within);
        // The database's identity goes into every identifier, so that two
        // installs never issue the same one (see `cap::Issuer`).
        let meta = store.service_meta().await?;
        let issuer = Issuer {
            sender: &self.sender,
            instance: &meta.instance_id,
        };
        let planned = cap::plan(&previous, situations, now, &issuer)?;
        let options = CapOptions {
            web: self
                .base_url
                .as_ref()
                .map(|b| format!("{b}/#reach={reach_id}")),
            ..self.options.clone()
        };
        let mut out = Vec::with_capacity(planned.len());
        for p in &planned {
            // The Atom entry's title and summary are stored with the
            // message; its id and links are made when serving.
            out.push(NewCapMessage {
                issued: p.to_issued(),
                expires: cap::expires(p, options.validity)?,
                document: cap::render_cap(p, &options)?,
                title: cap::headline(p),
                summary: cap::summary(p),
                run_id,
            });
        }
        store.insert_cap_messages(&out).await?;
        Ok(out)
    }
}

/// Path of the CAP document of a message, under the service's base URL.
pub fn document_path(identifier: &str) -> String {
    format!("/api/cap/{identifier}")
}

/// The ids of the Atom index: URLs under `alerts.base_url` when it is set,
/// else tag URIs minted under `alerts.sender` (see [`AtomIds`]).
fn atom_ids(alerts: &AlertsConfig, meta: &ServiceMeta) -> AtomIds {
    match alerts.base_url() {
        Some(base) => AtomIds::Url {
            base: base.to_owned(),
        },
        None => AtomIds::Tag {
            authority: alerts.sender.clone(),
            instance: meta.instance_id.clone(),
            created: meta.created_at,
        },
    }
}

/// Renders the Atom index of `current` served at `path`. Links start with
/// `links` (the public base URL, or one built from the request); ids never
/// do, since an id must not change (RFC 4287 §4.2.6): see [`atom_ids`].
/// `updated` is when the list last changed, or the database's creation
/// when nothing was ever issued, so the same messages give the same bytes.
pub fn atom_feed(
    links: &str,
    alerts: &AlertsConfig,
    meta: &ServiceMeta,
    path: &str,
    title: &str,
    current: &CurrentCap,
) -> Result<String, CapError> {
    let ids = atom_ids(alerts, meta);
    let feed = Feed {
        id: ids.feed(path)?,
        title: title.to_owned(),
        self_url: format!("{links}{path}"),
        author_name: alerts.sender.clone(),
    };
    let entries = current
        .entries
        .iter()
        .map(|e| {
            let doc = document_path(&e.identifier);
            Ok(FeedEntry {
                id: ids.entry(&e.identifier, e.sent, &doc)?,
                title: e.title.clone(),
                summary: e.summary.clone(),
                updated: e.sent,
                cap_url: format!("{links}{doc}"),
            })
        })
        .collect::<Result<Vec<_>, CapError>>()?;
    cap::render_atom(&feed, &entries, current.updated.unwrap_or(meta.created_at))
}

/// Refuses to plan when a key that is still configured in `spec` has an
/// open chain but no situation: [`cap::plan`] withdraws keys missing from
/// its input, which is right for a removed threshold and wrong for one
/// whose forecast merely could not be read.
pub fn check_complete(
    open: &[OpenMessage],
    situations: &[Situation],
    spec: &ReachSpec,
) -> Result<(), AlertError> {
    let have: HashSet<Key> = situations.iter().map(Situation::key).collect();
    let configured = |k: &Key| {
        spec.points
            .iter()
            .any(|p| p.point_id() == k.point && levels_of(p).iter().any(|l| l.id == k.level))
    };
    match open
        .iter()
        .map(|m| &m.issued)
        .find(|i| i.active && !have.contains(&i.key) && configured(&i.key))
    {
        Some(i) => Err(AlertError::Incomplete(i.key.to_string())),
        None => Ok(()),
    }
}

/// Open chains stored before CAP keys were ids carry the point's and the
/// threshold's display names; each such key that names a point and one of
/// its levels of `spec` (or a threshold merged into its low chord or deck)
/// maps to that level's id key, so the chain goes on instead of being
/// withdrawn and alerted again. Keys already made of ids are left alone.
pub fn legacy_renames(open: &[OpenMessage], spec: &ReachSpec) -> Vec<(Key, Key)> {
    let mut out: Vec<(Key, Key)> = Vec::new();
    for k in open.iter().map(|m| &m.issued.key) {
        if out.iter().any(|(old, _)| old == k) {
            continue;
        }
        let by_id = spec.points.iter().find(|p| p.point_id() == k.point);
        if by_id.is_some_and(|p| levels_of(p).iter().any(|l| l.id == k.level)) {
            continue;
        }
        let Some(p) = spec.points.iter().find(|p| p.name == k.point) else {
            continue;
        };
        let level = levels_of(p)
            .into_iter()
            .find(|l| l.name == k.level || l.also_named.contains(&k.level));
        if let Some(l) = level {
            let new = Key {
                reach: k.reach.clone(),
                point: p.point_id(),
                level: l.id,
            };
            out.push((k.clone(), new));
        }
    }
    out
}

/// The stored messages as the plan's `previous`, with the current message
/// of each open chain marked for restating (`material: None`) when it
/// expires within `within` of `now`. Input order (oldest first) is kept.
pub fn with_renewals(open: &[OpenMessage], now: DateTime<Utc>, within: Duration) -> Vec<Issued> {
    let mut out: Vec<Issued> = open.iter().map(|m| m.issued.clone()).collect();
    for (i, m) in open.iter().enumerate() {
        let newest_of_key = !open[i + 1..].iter().any(|n| n.issued.key == m.issued.key);
        let due = now
            .checked_add_signed(within)
            .is_none_or(|t| m.expires <= t);
        if newest_of_key && m.issued.active && due {
            out[i].material = None;
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use chrono::TimeZone;

    use super::*;
    use crate::forecast::{
        cap::{Key, Material, MsgType},
        spec::Severity,
    };

    const ISSUER: Issuer<'static> = Issuer {
        sender: "reachcast@localhost",
        instance: "5eed0f1e2d3c4b5a69788796a5b4c3d2",
    };

    fn t(h: u32) -> DateTime<Utc> {
        Utc.with_ymd_and_hms(2031, 3, 14, h, 0, 0)
            .single()
            .expect("valid time")
    }

    fn msg(level: &str, id: &str, sent: u32, msg_type: MsgType, expires: u32) -> OpenMessage {
        let active = msg_type != MsgType::Cancel;
        OpenMessage {
            issued: Issued {
                key: Key {
                    reach: "fernhollow".into(),
                    point: "quillby-weir".into(),
                    level: level.into(),
                },
                identifier: id.into(),
                sender: "reachcast@localhost".into(),
                sent: t(sent),
                msg_type,
                active,
                material: active.then_some(Material {
                    first_above: Some(t(sent + 1)),
                    crest_stage: 12.0,
                    stale: false,
                    severity: Severity::Minor,
                    elevation: 11.0,
                    certainty: crate::forecast::cap::Certainty::Likely,
                }),
            },
            expires: t(expires),
        }
    }

    #[test]
    fn only_the_newest_active_message_near_expiry_is_restated() {
        let open = vec![
            // Chain A: Alert then Update; the Update expires at 12:00.
            msg("towpath", "a1", 1, MsgType::Alert, 7),
            msg("towpath", "a2", 3, MsgType::Update, 12),
            // Chain B: one Alert expiring at 20:00.
            msg("lock gate", "b1", 2, MsgType::Alert, 20),
            // C: closed by a Cancel that expires at 11:00.
            msg("mill yard", "c1", 1, MsgType::Cancel, 11),
        ];
        let within = Duration::minutes(30);
        // At 09:00 nothing is close to expiry.
        let p = with_renewals(&open, t(9), within);
        assert!(p.iter().all(|m| m.material.is_some() || !m.active));
        // At 11:40 the Update of A expires within 30 min: only it is
        // restated; the older Alert of A keeps its material (it is not the
        // chain's current statement); the Cancel is left alone.
        let p = with_renewals(
            &open,
            Utc.with_ymd_and_hms(2031, 3, 14, 11, 40, 0)
                .single()
                .expect("valid time"),
            within,
        );
        assert!(p[0].material.is_some());
        assert!(p[1].material.is_none());
        assert!(p[2].material.is_some());
        assert_eq!(p[3].msg_type, MsgType::Cancel);
        assert_eq!(
            p.iter().map(|m| &m.identifier).collect::<Vec<_>>(),
            ["a1", "a2", "b1", "c1"]
        );
    }

    fn spec(thresholds: &[&str]) -> ReachSpec {
        let t: Vec<serde_json::Value> = thresholds
            .iter()
            .enumerate()
            .map(|(i, n)| serde_json::json!({"name": n, "elevation": 11.0 + i as f64}))
            .collect();
        let section = |c: f64, bed: f64| {
            serde_json::json!({"name": format!("S{c}"), "chainage": c, "geometry": {
                "shape": "trapezoid", "bed_elevation": bed, "bottom_width": 10.0,
                "side_slope": 2.0, "n": 0.035}})
        };
        let doc = serde_json::json!({
            "name": "Fernhollow Water",
            "sections": [section(0.0, 10.0), section(2000.0, 9.0)],
            "downstream": {"kind": "normal_depth", "friction_slope": 0.0005},
            "points": [{"name": "Quillby Weir", "chainage": 1000.0, "kind": "other",
                        "thresholds": t}]
        });
        ReachSpec::from_json(&doc.to_string()).expect("spec")
    }

    #[test]
    fn a_configured_key_without_a_situation_is_not_withdrawn() {
        let open = vec![msg("towpath", "a1", 1, MsgType::Alert, 7)];
        // Still configured, but the run gave no situation for it: refuse.
        let e = check_complete(&open, &[], &spec(&["towpath"])).unwrap_err();
        assert!(
            matches!(e, AlertError::Incomplete(ref k) if k.contains("towpath")),
            "{e}"
        );
        // Removed from the configuration: the plan may withdraw it.
        assert!(check_complete(&open, &[], &spec(&["lock gate"])).is_ok());
        // A closed chain needs nothing.
        let closed = vec![msg("towpath", "c1", 1, MsgType::Cancel, 7)];
        assert!(check_complete(&closed, &[], &spec(&["towpath"])).is_ok());
    }

    #[test]
    fn chains_stored_under_names_are_rekeyed_to_ids_once() {
        let mut legacy = msg("Lock Gate 2", "a1", 1, MsgType::Alert, 7);
        legacy.issued.key.point = "Quillby Weir".into();
        let current = msg("towpath", "b1", 1, MsgType::Alert, 7);
        let gone = {
            let mut m = msg("old level", "c1", 1, MsgType::Alert, 7);
            m.issued.key.point = "Quillby Weir".into();
            m
        };
        let spec = spec(&["towpath", "Lock Gate 2"]);
        let r = legacy_renames(&[legacy.clone(), current, gone], &spec);
        assert_eq!(r.len(), 1, "{r:?}");
        assert_eq!(r[0].0, legacy.issued.key);
        assert_eq!(r[0].1.to_string(), "fernhollow/quillby-weir/lock-gate-2");
    }

    #[test]
    fn a_restated_chain_gets_an_update_from_the_plan() {
        let open = vec![msg("towpath", "a1", 1, MsgType::Alert, 7)];
        let p = with_renewals(&open, t(7), Duration::minutes(30));
        assert!(p[0].material.is_none());
        // The plan's documented rule: unknown material → Update.
        let s = Situation {
            reach_id: "fernhollow".into(),
            reach_name: "Fernhollow Water".into(),
            point_id: "quillby-weir".into(),
            point_name: "Quillby Weir".into(),
            point_kind: crate::forecast::spec::PointKind::Other,
            chainage: 1000.0,
            level_id: "towpath".into(),
            level_kind: crate::forecast::levels::LevelKind::Threshold,
            threshold_name: "towpath".into(),
            elevation: 11.0,
            severity: Severity::Minor,
            exceeded: true,
            above_now: true,
            above_since: Some(t(2)),
            above_since_start: false,
            first_above: Some(t(2)),
            back_below: None,
            crest_stage: 12.0,
            crest_time: t(8),
            margin: 1.0,
            run_id: 9,
            run_finished: t(7),
            stale: false,
            location: None,
            chance: None,
            alert_floor: None,
        };
        let planned = cap::plan(&p, std::slice::from_ref(&s), t(7), &ISSUER).expect("plan");
        assert_eq!(planned.len(), 1);
        assert_eq!(planned[0].msg_type, MsgType::Update);
        assert_eq!(planned[0].references.len(), 1);
        // Without renewal the same forecast is unchanged: nothing is sent.
        let plain: Vec<Issued> = open.iter().map(|m| m.issued.clone()).collect();
        let planned = cap::plan(&plain, &[s], t(7), &ISSUER).expect("plan");
        assert!(planned.is_empty());
    }
}

//! CAP 1.2 messages and their Atom index through the running service: a real
//! server on port 0 with a temporary SQLite database, a reach described in
//! the test, inflows uploaded by a forecaster key and runs triggered with
//! `?wait=true` (no sleeps).
//!
//! Sources: OASIS CAP 1.2 (2010) section numbers; RFC 4287 (Atom) section
//! numbers; RFC 9110 for conditional requests. Details recalled rather than
//! re-read are marked "(from memory)". The reach and its places are
//! invented.

use std::collections::HashMap;

use crate::common::{
    self, body_of,
    xml::{El, cap_time_value as time_of, is_cap_time, is_cap_token, parse},
};
use chrono::{DateTime, Duration, Utc};
use reachcast::{CAUTION, auth::Role, config::Config, forecast::cap::Status};
use serde_json::{Value, json};

const CAP_NS: &str = "urn:oasis:names:tc:emergency:cap:1.2";
const ATOM_NS: &str = "http://www.w3.org/2005/Atom";
const SENDER: &str = "reachcast@fernhollow.example";
const BASE: &str = "http://cap.fernhollow.example";
const REACH: &str = "fernhollow";

// ------------------------------------------------------------ the reach

/// An invented 2 km trapezoidal channel (bottom 10 m, sides 1:2, n 0.035,
/// bed falling 1 m) with one footbridge at mid-reach. Normal depth is about
/// 0.8 m at 5 m³/s, 3 m at 50 m³/s and 4.5 m at 120 m³/s, so with the bed
/// at 9.5 m there: "Towpath" (11.0) and "Lock gate" (12.0) are exceeded by
/// the flood, "Mill lane" (13.4) only by the bigger flood, "Mill yard"
/// (17.0) by neither.
fn reach_json() -> Value {
    let section = |name: &str, chainage: f64, bed: f64| {
        json!({"name": name, "chainage": chainage, "geometry": {
            "shape": "trapezoid", "bed_elevation": bed, "bottom_width": 10.0,
            "side_slope": 2.0, "n": 0.035, "height": 10.0
        }})
    };
    json!({
        "name": "Fernhollow Water: Quillby to Marrowdown (invented test reach)",
        "sections": [section("FH-00", 0.0, 10.0), section("FH-20", 2000.0, 9.0)],
        "max_node_spacing": 100.0,
        "downstream": {"kind": "normal_depth", "friction_slope": 0.0005},
        "points": [{
            "name": "Quillby Footbridge", "chainage": 1000.0, "kind": "bridge",
            "thresholds": [
                {"name": "Towpath", "elevation": 11.0},
                {"name": "Lock gate", "elevation": 12.0},
                {"name": "Mill lane", "elevation": 13.4},
                {"name": "Mill yard", "elevation": 17.0, "severity": "extreme"}
            ]
        }]
    })
}

/// A hydrograph around `now`: `base` until an hour before now, rising to
/// `peak` two hours after, holding to ten hours after, back to `base` at
/// sixteen hours; covering the whole run window [now − 24 h, now + 48 h].
fn hydrograph(now: DateTime<Utc>, base: f64, peak: f64) -> Value {
    let at = |h: i64| (now + Duration::hours(h)).to_rfc3339();
    json!({
        "reason": "test storm",
        "series": [
            {"time": at(-30), "discharge": base},
            {"time": at(-1), "discharge": base},
            {"time": at(2), "discharge": peak},
            {"time": at(10), "discharge": peak},
            {"time": at(16), "discharge": base},
            {"time": at(60), "discharge": base},
        ]
    })
}

// ------------------------------------------------------------ helpers

struct Service {
    app: common::TestApp,
    forecaster: String,
    storm_start: DateTime<Utc>,
}

impl Service {
    async fn upload(&self, base: f64, peak: f64) {
        let series = hydrograph(self.storm_start, base, peak);
        let res = self.app.post_inflow(&self.forecaster, REACH, &series).await;
        assert!(res.status().is_success(), "upload: {}", res.status());
    }

    /// Triggers a run and waits for it; returns its id.
    async fn run(&self) -> i64 {
        let res = self.app.run_and_wait(&self.forecaster, REACH).await;
        assert_eq!(res.status(), 200);
        let body: Value = res.json().await.expect("run summary");
        assert_eq!(body["status"], "ok", "{body}");
        body["run_id"].as_i64().expect("run id")
    }

    /// The feed, its ETag, and each entry's CAP document parsed.
    async fn feed(&self, path: &str) -> (El, String, Vec<Message>) {
        let res = self.app.get(path).await;
        assert_eq!(res.status(), 200);
        // RFC 4287 §7: the Atom media type.
        assert_eq!(res.headers()["content-type"], "application/atom+xml");
        let etag = res.headers()["etag"]
            .to_str()
            .expect("etag text")
            .to_owned();
        let feed = parse(&res.text().await.expect("feed body"));
        assert_eq!(feed.name, "feed");
        assert_eq!(feed.ns.as_deref(), Some(ATOM_NS));
        // RFC 4287 §4.1.1: id, title, updated; an author (no entry has
        // its own); the self link (§4.2.7.2).
        assert_eq!(feed.text_of("id"), format!("{BASE}{path}"));
        assert!(!feed.text_of("title").is_empty());
        time_of(feed.text_of("updated"));
        assert_eq!(feed.one("author").text_of("name"), SENDER);
        let self_link = feed
            .all("link")
            .into_iter()
            .find(|l| l.attrs.get("rel").map(String::as_str) == Some("self"))
            .expect("rel=self link");
        assert_eq!(self_link.attrs["href"], format!("{BASE}{path}"));
        let mut messages = Vec::new();
        for entry in feed.all("entry") {
            // RFC 4287 §4.1.2: id, title, updated; without content, a
            // rel="alternate" link.
            let link = entry.one("link");
            assert_eq!(link.attrs["rel"], "alternate");
            assert_eq!(link.attrs["type"], "application/cap+xml");
            let href = link.attrs["href"].clone();
            assert_eq!(entry.text_of("id"), href);
            assert!(!entry.text_of("title").is_empty());
            let m = self.message(&href).await;
            // The entry is as new as the message.
            assert_eq!(time_of(entry.text_of("updated")), time_of(&m.sent));
            assert!(entry.text_of("summary").contains(CAUTION));
            messages.push(m);
        }
        (feed, etag, messages)
    }

    /// Fetches one CAP document by its absolute link (under `BASE`) from
    /// the test server and checks the elements CAP 1.2 requires.
    async fn message(&self, href: &str) -> Message {
        let path = href.strip_prefix(BASE).expect("link under alerts.base_url");
        let res = self.app.get(path).await;
        assert_eq!(res.status(), 200, "{href}");
        assert_eq!(res.headers()["content-type"], "application/cap+xml");
        let xml = res.text().await.expect("CAP body");
        let alert = parse(&xml);
        // CAP §3.2.1: the root `alert` in the CAP 1.2 namespace with
        // identifier, sender, sent, status, msgType and scope.
        assert_eq!(alert.name, "alert");
        assert_eq!(alert.ns.as_deref(), Some(CAP_NS));
        let identifier = alert.text_of("identifier").to_owned();
        assert!(is_cap_token(&identifier), "{identifier}");
        assert_eq!(path, format!("/api/cap/{identifier}"));
        assert_eq!(alert.text_of("sender"), SENDER);
        let sent = alert.text_of("sent").to_owned();
        assert!(is_cap_time(&sent), "CAP §3.3.2 time: {sent}");
        // CAP §3.2.1 status values.
        let status = alert.text_of("status").to_owned();
        assert!(
            ["Actual", "Exercise", "System", "Test", "Draft"].contains(&status.as_str()),
            "{status}"
        );
        let msg_type = alert.text_of("msgType").to_owned();
        assert!(["Alert", "Update", "Cancel"].contains(&msg_type.as_str()));
        assert_eq!(alert.text_of("scope"), "Public");
        // CAP §3.2.1: references are space-separated sender,identifier,sent.
        let references: Vec<String> = alert
            .opt_text("references")
            .map(|r| r.split(' ').map(str::to_owned).collect())
            .unwrap_or_default();
        // CAP §3.2.2: info with category, event, urgency, severity,
        // certainty.
        let info = alert.one("info");
        assert!(!info.all("category").is_empty());
        assert!(info.all("category").iter().any(|c| c.text == "Met"));
        assert!(!info.text_of("event").is_empty());
        let urgency = info.text_of("urgency").to_owned();
        assert!(["Immediate", "Expected", "Future", "Past", "Unknown"].contains(&urgency.as_str()));
        let severity = info.text_of("severity").to_owned();
        assert!(["Extreme", "Severe", "Moderate", "Minor", "Unknown"].contains(&severity.as_str()));
        let certainty = info.text_of("certainty").to_owned();
        assert!(
            ["Observed", "Likely", "Possible", "Unlikely", "Unknown"].contains(&certainty.as_str())
        );
        assert!(is_cap_time(info.text_of("expires")));
        assert!(time_of(info.text_of("expires")) > time_of(&sent));
        // The caution in every message (project rule).
        assert!(info.text_of("description").contains(CAUTION));
        // CAP §3.2.2 `web`: the dashboard of the reach under base_url.
        assert_eq!(info.text_of("web"), format!("{BASE}/#reach={REACH}"));
        let params: HashMap<String, String> = info
            .all("parameter")
            .iter()
            .map(|p| {
                (
                    p.text_of("valueName").to_owned(),
                    p.text_of("value").to_owned(),
                )
            })
            .collect();
        // Certainty (CAP §3.2.2: Likely "p > ~50%", Possible "p <= ~50%",
        // from memory): Possible whenever the forecast is stale; else from
        // the ensemble's probability when the message carries one, else
        // Likely.
        let probability = params
            .get("reachcast:probability")
            .map(|p| p.parse::<f64>().expect("probability"));
        if params.get("reachcast:forecast_stale").map(String::as_str) == Some("true") {
            assert_eq!(certainty, "Possible");
        } else if msg_type != "Cancel" {
            let likely = probability.is_none_or(|p| p > 0.5);
            assert_eq!(
                certainty,
                if likely { "Likely" } else { "Possible" },
                "{params:?}"
            );
        }
        // CAP §3.2.4: area with areaDesc.
        assert!(
            info.one("area")
                .text_of("areaDesc")
                .contains("Quillby Footbridge")
        );
        Message {
            identifier,
            sent,
            status,
            msg_type,
            references,
            level: params["reachcast:level_id"].clone(),
            severity,
            certainty,
            headline: info.text_of("headline").to_owned(),
            description: info.text_of("description").to_owned(),
            params,
        }
    }
}

#[derive(Debug, Clone)]
struct Message {
    identifier: String,
    /// The `sent` text exactly as in the document.
    sent: String,
    status: String,
    msg_type: String,
    references: Vec<String>,
    /// The level id the message is about (`reachcast:level_id`).
    level: String,
    severity: String,
    certainty: String,
    headline: String,
    description: String,
    /// CAP `parameter`s by valueName.
    params: HashMap<String, String>,
}

impl Message {
    /// This message as a CAP §3.2.1 reference triple.
    fn triple(&self) -> String {
        format!("{SENDER},{},{}", self.identifier, self.sent)
    }
}

fn by_threshold(messages: &[Message]) -> HashMap<String, Message> {
    let mut map = HashMap::new();
    for m in messages {
        // One current message per (point, threshold).
        assert!(
            map.insert(m.level.clone(), m.clone()).is_none(),
            "two current messages for {}",
            m.level
        );
    }
    map
}

/// The identifiers of `messages`, sorted.
fn ids(messages: &[Message]) -> Vec<String> {
    let mut v: Vec<String> = messages.iter().map(|m| m.identifier.clone()).collect();
    v.sort();
    v
}

/// The service's configuration in these tests: `SENDER`, exercise
/// messages, and runs only when the test asks: data-triggered runs wait
/// ten minutes, longer than the test; the periodic run is an hour away.
fn service_config(dir: &std::path::Path) -> Config {
    let mut config = common::test_config(dir);
    config.forecast.debounce_ms = 600_000;
    config.forecast.interval_minutes = 60;
    config.alerts.sender = SENDER.to_owned();
    config.alerts.cap_status = Some(Status::Exercise);
    config
}

async fn start(dir: &std::path::Path) -> Service {
    start_with(dir, |_| {}).await
}

/// [`start`] with the test's changes to the configuration.
async fn start_with(dir: &std::path::Path, change: impl FnOnce(&mut Config)) -> Service {
    let mut config = service_config(dir);
    config.alerts.base_url = format!("{BASE}/");
    change(&mut config);
    let app = common::spawn_app_with(config).await;
    let admin = app.key(Role::Admin, &[]).await;
    let forecaster = app.key(Role::Forecaster, &[]).await;
    body_of(app.put_reach(&admin, REACH, &reach_json()).await, 201).await;
    Service {
        app,
        forecaster,
        storm_start: Utc::now(),
    }
}

// ---------------------------------------------------------------- tests

#[tokio::test]
async fn alert_update_cancel_chain_through_the_service() {
    let dir = tempfile::tempdir().expect("temp dir");
    let s = start(dir.path()).await;
    let feed_path = "/api/cap/feed.atom";

    // Nothing issued yet: a valid, empty feed.
    let (feed, _, messages) = s.feed(feed_path).await;
    assert!(messages.is_empty());
    assert!(feed.all("entry").is_empty());

    // 1. A flood of 50 m³/s: Alerts for the two thresholds it exceeds.
    s.upload(5.0, 50.0).await;
    s.run().await;
    let (_, etag1, messages) = s.feed(feed_path).await;
    let alerts = by_threshold(&messages);
    let mut names: Vec<&str> = alerts.keys().map(String::as_str).collect();
    names.sort_unstable();
    assert_eq!(names, ["lock-gate", "towpath"], "{messages:#?}");
    for m in alerts.values() {
        assert_eq!(m.msg_type, "Alert");
        // `alerts.cap_status = "Exercise"` in this test's configuration.
        assert_eq!(m.status, "Exercise");
        // CAP §3.2.1: an Alert references nothing.
        assert!(m.references.is_empty());
    }
    // Severity from the rank among the point's four thresholds (lowest
    // Minor, middle Moderate).
    assert_eq!(alerts["towpath"].severity, "Minor");
    assert_eq!(alerts["lock-gate"].severity, "Moderate");

    // 2. The same data again: nothing new, and the feed answers 304 to its
    // ETag (RFC 9110 §13.1.2).
    s.run().await;
    let res = s.app.get_with(feed_path, "if-none-match", &etag1).await;
    assert_eq!(res.status(), 304);
    assert_eq!(res.headers()["etag"].to_str().expect("etag"), etag1);
    let (_, etag_again, again) = s.feed(feed_path).await;
    assert_eq!(etag_again, etag1);
    assert_eq!(ids(&again), ids(&messages));

    // 3. A bigger flood (120 m³/s): Updates referencing the Alerts, and an
    // Alert for the threshold now exceeded too.
    s.upload(5.0, 120.0).await;
    s.run().await;
    let (_, etag2, messages) = s.feed(feed_path).await;
    assert_ne!(etag2, etag1);
    let updates = by_threshold(&messages);
    assert_eq!(updates.len(), 3, "{messages:#?}");
    for name in ["towpath", "lock-gate"] {
        let u = &updates[name];
        assert_eq!(u.msg_type, "Update", "{name}");
        // CAP §3.2.1: `references` names the earlier message by sender,
        // identifier and sent exactly as that message stated them.
        assert_eq!(u.references, [alerts[name].triple()], "{name}");
        assert!(time_of(&u.sent) >= time_of(&alerts[name].sent));
    }
    assert_eq!(updates["mill-lane"].msg_type, "Alert");
    assert!(updates["mill-lane"].references.is_empty());
    // The earlier Alerts stay retrievable by identifier.
    for a in alerts.values() {
        let res = s.app.get(&format!("/api/cap/{}", a.identifier)).await;
        assert_eq!(res.status(), 200);
    }

    // 4. Back to low flow: Cancels referencing each whole chain, oldest
    // first.
    s.upload(5.0, 5.0).await;
    s.run().await;
    let (_, etag3, messages) = s.feed(feed_path).await;
    assert_ne!(etag3, etag2);
    let cancels = by_threshold(&messages);
    assert_eq!(cancels.len(), 3, "{messages:#?}");
    for name in ["towpath", "lock-gate"] {
        let c = &cancels[name];
        assert_eq!(c.msg_type, "Cancel", "{name}");
        assert_eq!(
            c.references,
            [alerts[name].triple(), updates[name].triple()],
            "{name}"
        );
    }
    assert_eq!(cancels["mill-lane"].msg_type, "Cancel");
    assert_eq!(
        cancels["mill-lane"].references,
        [updates["mill-lane"].triple()]
    );

    // 5. Low flow again: nothing new.
    s.run().await;
    assert_eq!(
        s.app
            .get_with(feed_path, "if-none-match", &etag3)
            .await
            .status(),
        304
    );

    // The reach's own feed lists the same messages.
    let reach_path = format!("/api/reaches/{REACH}/cap/feed.atom");
    let (_, _, own) = s.feed(&reach_path).await;
    assert_eq!(ids(&own), ids(&messages));

    s.app.stop().await;
}

#[tokio::test]
async fn unknown_message_and_reach_are_404_problems() {
    let dir = tempfile::tempdir().expect("temp dir");
    let s = start(dir.path()).await;
    for path in [
        "/api/cap/reachcast-nowhere-r1-0000000000000000".to_owned(),
        "/api/reaches/nowhere/cap/feed.atom".to_owned(),
    ] {
        let res = s.app.get(&path).await;
        assert_eq!(res.status(), 404, "{path}");
        // RFC 9457 problem details.
        assert_eq!(
            res.headers()["content-type"],
            "application/problem+json",
            "{path}"
        );
        let body: Value = res.json().await.expect("problem");
        assert_eq!(body["status"], 404);
    }
    s.app.stop().await;
}

#[tokio::test]
async fn messages_survive_a_restart_and_chains_continue() {
    let dir = tempfile::tempdir().expect("temp dir");
    let s = start(dir.path()).await;
    s.upload(5.0, 50.0).await;
    s.run().await;
    let (_, etag, before) = s.feed("/api/cap/feed.atom").await;
    assert_eq!(before.len(), 2);
    let alerts = by_threshold(&before);
    let forecaster = s.forecaster.clone();
    let storm_start = s.storm_start;
    s.app.stop().await;

    // Same data directory, new process state.
    let mut config = service_config(dir.path());
    config.alerts.base_url = BASE.to_owned();
    let s = Service {
        app: common::spawn_app_with(config).await,
        forecaster,
        storm_start,
    };
    // The stored messages are served as before (same bytes, same ETag)…
    assert_eq!(
        s.app
            .get_with("/api/cap/feed.atom", "if-none-match", &etag)
            .await
            .status(),
        304
    );
    // …and the next plan continues their chains from the stored `sent`
    // text: a Cancel references the Alerts exactly.
    s.upload(5.0, 5.0).await;
    s.run().await;
    let (_, _, after) = s.feed("/api/cap/feed.atom").await;
    let cancels = by_threshold(&after);
    assert_eq!(cancels.len(), 2);
    for (name, c) in &cancels {
        assert_eq!(c.msg_type, "Cancel");
        assert_eq!(c.references, [alerts[name].triple()], "{name}");
    }
    s.app.stop().await;
}

#[tokio::test]
async fn removing_a_threshold_withdraws_its_chain_only() {
    let dir = tempfile::tempdir().expect("temp dir");
    let s = start(dir.path()).await;
    s.upload(5.0, 50.0).await;
    s.run().await;
    let (_, _, before) = s.feed("/api/cap/feed.atom").await;
    let alerts = by_threshold(&before);
    assert_eq!(alerts.len(), 2);

    // A new reach version without "lock-gate".
    let admin = s.app.key(Role::Admin, &[]).await;
    let mut reach = reach_json();
    let thresholds = reach["points"][0]["thresholds"]
        .as_array_mut()
        .expect("thresholds");
    thresholds.retain(|t| t["name"] != "Lock gate");
    let res = s.app.put_reach(&admin, REACH, &reach).await;
    assert_eq!(res.status(), 200);
    s.run().await;

    let (_, _, after) = s.feed("/api/cap/feed.atom").await;
    let now = by_threshold(&after);
    assert_eq!(now.len(), 2, "{after:#?}");
    // The removed threshold's chain ends with a Cancel referencing it
    // (CAP §3.2.1 msgType Cancel, references).
    let gone = &now["lock-gate"];
    assert_eq!(gone.msg_type, "Cancel");
    assert_eq!(gone.references, [alerts["lock-gate"].triple()]);
    // The other chain is untouched: its Alert is still the current message.
    assert_eq!(now["towpath"].identifier, alerts["towpath"].identifier);
    s.app.stop().await;
}

#[tokio::test]
async fn two_fresh_installs_never_issue_the_same_identifier() {
    // Same configuration, same reach, same storm, and run numbers that
    // start at 1 in each database: before identifiers carried the database
    // identity, both installs issued the same `reachcast-fernhollow-r…`.
    // CAP §3.2.1: the identifier is unique for the sender, and both use the
    // same sender here.
    let (dir_a, dir_b) = (
        tempfile::tempdir().expect("temp dir"),
        tempfile::tempdir().expect("temp dir"),
    );
    let mut identifiers = Vec::new();
    for dir in [&dir_a, &dir_b] {
        let s = start(dir.path()).await;
        s.upload(5.0, 50.0).await;
        s.run().await;
        let (_, ready) = s.app.get_json("/ready").await;
        let instance = ready["instance"]["instance_id"]
            .as_str()
            .expect("instance id")
            .to_owned();
        let (_, _, messages) = s.feed("/api/cap/feed.atom").await;
        assert_eq!(messages.len(), 2);
        for m in &messages {
            assert!(m.identifier.contains(&instance), "{}", m.identifier);
        }
        identifiers.push(ids(&messages));
        s.app.stop().await;
    }
    assert!(
        identifiers[0].iter().all(|i| !identifiers[1].contains(i)),
        "{identifiers:?}"
    );
}

#[tokio::test]
async fn atom_ids_do_not_change_with_the_host_header() {
    // RFC 4287 §4.2.6: an id is permanent and never changes. Without
    // `alerts.base_url` the links follow the request's Host (they must
    // reach the service), but the ids are tag URIs (RFC 4151) minted under
    // the sender.
    let dir = tempfile::tempdir().expect("temp dir");
    let s = start_with(dir.path(), |c| c.alerts.base_url = String::new()).await;
    s.upload(5.0, 50.0).await;
    s.run().await;
    let fetch = async |host: &str| {
        let res = s.app.get_with("/api/cap/feed.atom", "host", host).await;
        assert_eq!(res.status(), 200);
        parse(&res.text().await.expect("feed body"))
    };
    let a = fetch("cast-a.fernhollow.example").await;
    let b = fetch("cast-b.fernhollow.example:8080").await;
    let ids = |feed: &El| -> Vec<String> {
        std::iter::once(feed.text_of("id").to_owned())
            .chain(feed.all("entry").iter().map(|e| e.text_of("id").to_owned()))
            .collect()
    };
    assert_eq!(ids(&a).len(), 3, "the feed and two entries");
    assert_eq!(ids(&a), ids(&b));
    // Tag URIs under the sender (RFC 4151 §2.1: "tag:" authority "," date
    // ":" specific); the entry's names the message's identifier.
    for id in ids(&a) {
        assert!(id.starts_with(&format!("tag:{SENDER},")), "{id}");
    }
    for entry in a.all("entry") {
        let href = &entry.one("link").attrs["href"];
        assert!(
            href.starts_with("http://cast-a.fernhollow.example/api/cap/"),
            "{href}"
        );
        let identifier = href.rsplit('/').next().expect("identifier");
        assert!(entry.text_of("id").ends_with(&format!(":cap/{identifier}")));
    }
    // The links did follow the Host header.
    let href_b = &b.all("entry")[0].one("link").attrs["href"];
    assert!(
        href_b.starts_with("http://cast-b.fernhollow.example:8080/"),
        "{href_b}"
    );
    s.app.stop().await;
}

#[tokio::test]
async fn demo_messages_are_exercises_unless_a_status_is_set() {
    // While the invented demo is on, nobody must act on a message, so with
    // `alerts.cap_status` unset the status is `Exercise` (CAP §3.2.1:
    // actionable only by designated exercise participants, from memory).
    // An explicit setting wins; without the demo the default is `Actual`.
    let cases = [
        (true, None, "Exercise"),
        (true, Some(Status::Actual), "Actual"),
        (false, None, "Actual"),
    ];
    for (demo, set, expected) in cases {
        let dir = tempfile::tempdir().expect("temp dir");
        let s = start_with(dir.path(), |c| {
            c.demo.enabled = demo;
            // No replayed demo reading during the test.
            c.demo.replay_secs = 3_600;
            c.alerts.cap_status = set;
        })
        .await;
        s.upload(5.0, 50.0).await;
        s.run().await;
        // This reach's feed only: the demo reach may issue its own.
        let (_, _, messages) = s.feed(&format!("/api/reaches/{REACH}/cap/feed.atom")).await;
        assert_eq!(messages.len(), 2, "demo {demo}, cap_status {set:?}");
        for m in &messages {
            assert_eq!(m.status, expected, "demo {demo}, cap_status {set:?}");
        }
        s.app.stop().await;
    }
}

#[tokio::test]
async fn every_issued_message_is_in_the_audit_log() {
    // Project invariant (DEVELOPERS.md): every write goes to the audit log,
    // in the same transaction. CAP messages are written by the service
    // itself after a run, so the actor is the system, not a key.
    let dir = tempfile::tempdir().expect("temp dir");
    let s = start(dir.path()).await;
    s.upload(5.0, 50.0).await;
    let run_id = s.run().await;
    let (_, _, messages) = s.feed("/api/cap/feed.atom").await;
    assert_eq!(messages.len(), 2);
    let log = s.app.store.audit_log(100).await.expect("audit log");
    for m in &messages {
        let entry = log
            .iter()
            .find(|e| e.action == "cap.issue" && e.target == format!("cap:{}", m.identifier))
            .unwrap_or_else(|| panic!("no audit entry for {}: {log:#?}", m.identifier));
        assert_eq!(entry.actor, "system:alerts");
        assert_eq!(entry.key_id, None);
        assert_eq!(entry.summary["msg_type"], "Alert");
        assert_eq!(entry.summary["level"], m.level.as_str());
        // The run that issued it: the one waited for, or one the reach's
        // worker started on its own just before.
        let issued_by = entry.summary["run_id"].as_i64().expect("run id");
        assert!((1..=run_id).contains(&issued_by), "{issued_by} vs {run_id}");
    }
    assert_eq!(
        log.iter().filter(|e| e.action == "cap.issue").count(),
        messages.len()
    );
    s.app.stop().await;
}

/// Probabilities through the service (issue: "How sure"): a reach with an
/// ensemble whose only spread is the peak factor (uniform 0.5–1.5) and
/// thresholds laid over the members' crests. Every board item's certainty
/// follows its probability; a level the central run misses but enough
/// members reach opens a chain marked `Possible` that says so; a level
/// the central run reaches with most members stays `Likely`.
#[tokio::test]
async fn certainty_follows_the_ensemble_probability() {
    let dir = tempfile::tempdir().expect("temp dir");
    let s = start_with(dir.path(), |c| c.forecast.max_ensemble_members = 12).await;
    let admin = s.app.key(Role::Admin, &[]).await;
    let mut doc = reach_json();
    doc["ensemble"] = json!({"members": 12, "peak_scale": [0.5, 1.5], "timing_shift_hours": 0,
        "manning_factor": [1, 1], "rating_factor": [1, 1]});
    body_of(s.app.put_reach(&admin, REACH, &doc).await, 200).await;
    s.upload(5.0, 50.0).await;
    s.run().await;
    let (_, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    assert_eq!(f["run"]["ensemble"]["status"], "ready", "{}", f["run"]);
    assert_eq!(f["run"]["ensemble"]["members_used"], 12);
    assert_eq!(f["run"]["ensemble"]["spreads_are_defaults"], false);
    let p = &f["points"][0];
    let det_crest = p["crest_stage"].as_f64().expect("crest");
    let crest = &p["ensemble"]["crest"];
    let (lo, hi) = (
        crest["min"].as_f64().expect("min"),
        crest["max"].as_f64().expect("max"),
    );
    assert!(
        lo < det_crest && det_crest < hi,
        "{lo} < {det_crest} < {hi}"
    );

    // Thresholds every tenth of the way from the lowest member crest to
    // the highest: those above the central crest are reached by members
    // only, the lowest by nearly all.
    let grid: Vec<Value> = (1..10)
        .map(|k| {
            let z = lo + (hi - lo) * f64::from(k) / 10.0;
            json!({"id": format!("g{k}"), "name": format!("Grid {k}"), "elevation": z})
        })
        .collect();
    doc["points"][0]["thresholds"] = Value::Array(grid);
    body_of(s.app.put_reach(&admin, REACH, &doc).await, 200).await;
    s.run().await;

    let (_, board) = s
        .app
        .get_json(&format!("/api/exceedances?reach={REACH}"))
        .await;
    let items = board["items"].as_array().expect("items");
    let mut last = 1.0;
    let (mut likely, mut members_only) = (None, None);
    for it in items.iter().filter(|i| i["level_kind"] == "threshold") {
        let prob = it["probability"]
            .as_f64()
            .expect("probability on every item");
        assert_eq!(it["members"], 12);
        assert!(
            prob <= last,
            "probability never rises with elevation: {items:#?}"
        );
        last = prob;
        let want = if prob > 0.5 { "Likely" } else { "Possible" };
        assert_eq!(it["certainty"], want, "{it}");
        if it["exceeded"] == true && prob > 0.5 {
            likely = Some(it["level_id"].as_str().expect("id").to_owned());
        }
        if it["members_only"] == true {
            assert!(prob >= 0.1 && it["exceeded"] == false, "{it}");
            members_only = Some(it["level_id"].as_str().expect("id").to_owned());
        }
    }
    let likely = likely.expect("a level the central run reaches with most members");
    let members_only = members_only.expect("a level only members reach");

    let (_, _, messages) = s.feed("/api/cap/feed.atom").await;
    let current = by_threshold(&messages);
    let m = &current[&members_only];
    assert_eq!(m.certainty, "Possible");
    assert_eq!(m.params["reachcast:members_only"], "true");
    assert_eq!(m.params["reachcast:ensemble_members"], "12");
    assert!(m.headline.contains("of 12 scenarios"), "{}", m.headline);
    assert!(
        m.description.contains("central forecast stays below"),
        "{}",
        m.description
    );
    assert_eq!(current[&likely].certainty, "Likely");
    assert_eq!(current[&likely].params["reachcast:members_only"], "false");
}

/// Retention (issue "Operations", part 3) never touches an open chain: a
/// chain closed by a `Cancel` that expired longer ago than the grace goes
/// whole; the chain opened after it stays, the feed is unchanged, and the
/// next run issues nothing new (the open chain goes on as before).
#[tokio::test]
async fn pruning_removes_closed_chains_only() {
    let dir = tempfile::tempdir().expect("temp dir");
    let s = start(dir.path()).await;
    let feed_path = "/api/cap/feed.atom";
    s.upload(5.0, 50.0).await;
    s.run().await;
    let (_, _, first) = s.feed(feed_path).await;
    s.upload(5.0, 5.0).await;
    s.run().await;
    s.upload(5.0, 50.0).await;
    s.run().await;
    let (_, etag, open) = s.feed(feed_path).await;
    assert!(open.iter().all(|m| m.msg_type == "Alert"), "{open:#?}");
    assert_eq!(open.len(), first.len());
    // 40 days on with a 30-day grace: the Cancels (6 h expiry) are long past.
    let config = reachcast::config::RetentionConfig::default();
    let later = Utc::now() + chrono::Duration::days(40);
    let policy = reachcast::store::Retention::of(
        &config,
        &reachcast::config::ForecastConfig::default(),
        later,
    );
    let p = s.app.store.prune(&policy).await.expect("prune");
    assert_eq!(p.cap_messages as usize, 2 * first.len(), "{p:?}");
    for m in &first {
        let res = s.app.get(&format!("/api/cap/{}", m.identifier)).await;
        assert_eq!(res.status(), 404, "the closed chain's Alert is gone");
    }
    for m in &open {
        let res = s.app.get(&format!("/api/cap/{}", m.identifier)).await;
        assert_eq!(res.status(), 200, "the open chain stays");
    }
    s.run().await;
    let (_, etag_after, after) = s.feed(feed_path).await;
    assert_eq!(ids(&after), ids(&open));
    assert_eq!(etag_after, etag);
}

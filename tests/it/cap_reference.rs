//! Rendered CAP 1.2 messages and the Atom index, parsed back with
//! quick-xml's namespace-aware reader (strict about well-formedness) and
//! checked against the standards, not against how they were written.
//!
//! Sources: OASIS CAP 1.2 (2010) section numbers; RFC 4287 (Atom) section
//! numbers; RFC 3339 for Atom dates. Details recalled rather than re-read are
//! marked "(from memory)". All places are invented.

use std::collections::HashMap;

use crate::common::xml::{El, cap_time_value, is_cap_time, is_cap_token, parse_document as parse};
use chrono::{DateTime, TimeZone, Utc};
use reachcast::CAUTION;
use reachcast::forecast::cap::{
    CAP_MEDIA_TYPE, CAP_NAMESPACE, CapOptions, Circle, Feed, FeedEntry, Issued, Issuer, MsgType,
    Planned, Situation, Status, plan, render_atom, render_cap,
};
use reachcast::forecast::levels::LevelKind;
use reachcast::forecast::spec::{PointKind, Severity};

const ATOM_NS: &str = "http://www.w3.org/2005/Atom";
const SENDER: &str = "reachcast@brindlemoor.example";
/// A database identity as `service_meta.instance_id` holds it (invented).
const ISSUER: Issuer<'static> = Issuer {
    sender: SENDER,
    instance: "5eed0f1e2d3c4b5a69788796a5b4c3d2",
};

// ------------------------------------------------------------ vocabulary

// OASIS CAP 1.2 §3.2.1 and §3.2.2 code values.
const STATUS: &[&str] = &["Actual", "Exercise", "System", "Test", "Draft"];
const MSG_TYPE: &[&str] = &["Alert", "Update", "Cancel", "Ack", "Error"];
const SCOPE: &[&str] = &["Public", "Restricted", "Private"];
const CATEGORY: &[&str] = &[
    "Geo",
    "Met",
    "Safety",
    "Security",
    "Rescue",
    "Fire",
    "Health",
    "Env",
    "Transport",
    "Infra",
    "CBRNE",
    "Other",
];
const RESPONSE_TYPE: &[&str] = &[
    "Shelter", "Evacuate", "Prepare", "Execute", "Avoid", "Monitor", "Assess", "AllClear", "None",
];
const URGENCY: &[&str] = &["Immediate", "Expected", "Future", "Past", "Unknown"];
const SEVERITY: &[&str] = &["Extreme", "Severe", "Moderate", "Minor", "Unknown"];
const CERTAINTY: &[&str] = &["Observed", "Likely", "Possible", "Unlikely", "Unknown"];

/// Subsequence check: `present` appears in the order of `schema`, and holds
/// nothing outside it.
fn in_schema_order(present: &[&str], schema: &[&str]) -> bool {
    let mut pos = 0;
    for name in present {
        match schema[pos..].iter().position(|s| s == name) {
            Some(i) => pos += i,
            None => return false,
        }
    }
    true
}

// -------------------------------------------------------------- scenario

fn t(h: u32, m: u32) -> DateTime<Utc> {
    Utc.with_ymd_and_hms(2031, 3, 14, h, m, 0)
        .single()
        .expect("valid time")
}

fn bridge() -> Situation {
    Situation {
        reach_id: "brindlemoor".into(),
        reach_name: "Brindlemoor River".into(),
        point_id: "sallowgate-bridge".into(),
        point_name: "Sallowgate Bridge".into(),
        point_kind: PointKind::Bridge,
        chainage: 4200.0,
        level_id: "road-closed".into(),
        level_kind: LevelKind::Threshold,
        threshold_name: "Road closed".into(),
        elevation: 12.0,
        severity: Severity::Moderate,
        exceeded: true,
        above_now: false,
        above_since: None,
        above_since_start: false,
        first_above: Some(t(9, 0)),
        back_below: Some(t(14, 0)),
        crest_stage: 12.4,
        crest_time: t(11, 0),
        margin: 0.4,
        run_id: 1,
        run_finished: t(5, 50),
        stale: false,
        location: Some(Circle {
            lat: 51.25,
            lon: -1.5,
            radius_km: 0.5,
        }),
        chance: None,
        alert_floor: None,
    }
}

fn town() -> Situation {
    Situation {
        point_id: "hollin-vale-quay".into(),
        level_id: "gardens-wet".into(),
        point_name: "Hollin & <Vale> \"Quay\"".into(),
        point_kind: PointKind::Town,
        chainage: 9100.0,
        threshold_name: "Gardens 'wet'".into(),
        elevation: 7.5,
        severity: Severity::Minor,
        first_above: Some(t(6, 20)),
        back_below: None,
        crest_stage: 8.1,
        crest_time: t(12, 0),
        margin: 0.6,
        location: None,
        ..bridge()
    }
}

/// Five runs: Alerts, an Update on a crest change, a stale Update, a
/// Cancel when the bridge threshold is no longer forecast, and a
/// withdrawal when the town's threshold is removed from the configuration.
/// Returns every planned message in order.
fn scenario() -> Vec<Planned> {
    let mut history: Vec<Issued> = Vec::new();
    let mut all: Vec<Planned> = Vec::new();
    let mut step = |current: Vec<Situation>, now: DateTime<Utc>| {
        let out = plan(&history, &current, now, &ISSUER).expect("plan");
        history.extend(out.iter().map(Planned::to_issued));
        all.extend(out);
    };
    step(vec![bridge(), town()], t(6, 0));
    let mut b = bridge();
    b.run_id = 2;
    b.crest_stage = 12.7;
    b.margin = 0.7;
    let mut w = town();
    w.run_id = 2;
    w.above_now = true;
    w.first_above = Some(t(7, 0));
    step(vec![b.clone(), w.clone()], t(7, 0));
    b.run_id = 3;
    b.stale = true;
    w.run_id = 3;
    w.stale = true;
    step(vec![b.clone(), w.clone()], t(8, 0));
    b.run_id = 4;
    b.stale = false;
    b.exceeded = false;
    b.first_above = None;
    b.back_below = None;
    b.crest_stage = 11.6;
    b.margin = -0.4;
    w.run_id = 4;
    step(vec![b.clone(), w], t(9, 0));
    b.run_id = 5;
    step(vec![b], t(10, 0));
    all
}

fn options_for(i: usize) -> CapOptions {
    // Vary the deployment options across messages: status and `web`.
    CapOptions {
        status: if i.is_multiple_of(2) {
            Status::Actual
        } else {
            Status::Exercise
        },
        web: i
            .is_multiple_of(3)
            .then(|| "https://forecast.example/reaches/brindlemoor".to_owned()),
        ..CapOptions::default()
    }
}

// ----------------------------------------------------------------- tests

#[test]
fn scenario_covers_every_message_type() {
    let msgs = scenario();
    let kinds: Vec<MsgType> = msgs.iter().map(|m| m.msg_type).collect();
    for k in [MsgType::Alert, MsgType::Update, MsgType::Cancel] {
        assert!(kinds.contains(&k), "{kinds:?}");
    }
    assert_eq!(msgs.len(), 7, "{kinds:?}");
}

#[test]
fn every_cap_document_meets_cap_1_2() {
    let msgs = scenario();
    // identifier -> (sender, sent) of every message rendered so far.
    let mut earlier: HashMap<String, (String, DateTime<Utc>)> = HashMap::new();
    for (i, m) in msgs.iter().enumerate() {
        let xml = render_cap(m, &options_for(i)).expect("render");
        let (alert, version, encoding) = parse(&xml);

        // XML 1.0 §2.8 declaration; CAP 1.2 §3.1 (from memory): UTF-8 XML.
        assert_eq!(version, "1.0");
        assert_eq!(encoding, "UTF-8");

        // OASIS CAP 1.2 §3.2.1 (from memory) / REFERENCES.md: the root is
        // `alert` in namespace urn:oasis:names:tc:emergency:cap:1.2.
        assert_eq!(alert.name, "alert");
        assert_eq!(alert.ns.as_deref(), Some(CAP_NAMESPACE));
        assert_eq!(CAP_NAMESPACE, "urn:oasis:names:tc:emergency:cap:1.2");
        fn all_in_ns(e: &El) -> bool {
            e.ns.as_deref() == Some(CAP_NAMESPACE) && e.children.iter().all(all_in_ns)
        }
        assert!(all_in_ns(&alert), "every element in the CAP namespace");

        // OASIS CAP 1.2 §3.2.1: alert requires identifier, sender, sent,
        // status, msgType, scope (each exactly once).
        let identifier = alert.text_of("identifier");
        let sender = alert.text_of("sender");
        let sent = alert.text_of("sent");
        let status = alert.text_of("status");
        let msg_type = alert.text_of("msgType");
        let scope = alert.text_of("scope");

        // OASIS CAP 1.2 §3.2.1: identifier and sender without spaces,
        // commas, `<` or `&` (from memory).
        assert!(is_cap_token(identifier), "{identifier}");
        assert!(is_cap_token(sender), "{sender}");
        assert_eq!(identifier, m.identifier);
        assert!(
            !earlier.contains_key(identifier),
            "CAP 1.2 §3.2.1: identifier unique for the sender"
        );

        // OASIS CAP 1.2 §3.2.1 code values for status, msgType, scope.
        assert!(STATUS.contains(&status), "{status}");
        assert!(MSG_TYPE.contains(&msg_type), "{msg_type}");
        assert!(SCOPE.contains(&scope), "{scope}");
        assert_eq!(status, options_for(i).status.cap_value());
        assert_eq!(scope, "Public");

        // OASIS CAP 1.2 §3.3.2 (and §3.2.1 sent): date-time form, no `Z`,
        // no fractions; UTC written -00:00.
        assert!(is_cap_time(sent), "{sent}");
        assert!(sent.ends_with("-00:00"), "{sent}");
        let sent_t = cap_time_value(sent);

        // OASIS CAP 1.2 §3.2.1: Update and Cancel identify earlier
        // messages in `references`, space-separated `sender,identifier,sent`
        // triples. Here each must name a message rendered before it, with
        // exactly that sender and sent time.
        let refs = alert.opt("references");
        if msg_type == "Alert" {
            assert!(refs.is_none(), "a new Alert starts a chain");
        } else {
            let refs = refs.expect("Update/Cancel carry references");
            let triples: Vec<&str> = refs.text.split(' ').collect();
            assert_eq!(triples.len(), m.references.len());
            for triple in triples {
                let parts: Vec<&str> = triple.split(',').collect();
                assert_eq!(parts.len(), 3, "triple `{triple}`");
                let (r_sender, r_id, r_sent) = (parts[0], parts[1], parts[2]);
                assert!(is_cap_token(r_sender) && is_cap_token(r_id), "{triple}");
                assert!(is_cap_time(r_sent), "{triple}");
                let (e_sender, e_sent) = earlier
                    .get(r_id)
                    .unwrap_or_else(|| panic!("`{r_id}` is not an earlier message"));
                assert_eq!(r_sender, e_sender);
                assert_eq!(cap_time_value(r_sent), *e_sent);
                assert!(*e_sent <= sent_t, "references point back in time");
            }
        }

        // OASIS CAP 1.2 schema sequence for alert children (from memory).
        let alert_order = [
            "identifier",
            "sender",
            "sent",
            "status",
            "msgType",
            "source",
            "scope",
            "restriction",
            "addresses",
            "code",
            "note",
            "references",
            "incidents",
            "info",
        ];
        assert!(
            in_schema_order(&alert.names(), &alert_order),
            "{:?}",
            alert.names()
        );

        // OASIS CAP 1.2 §3.2.2: info requires category (1+), event,
        // urgency, severity, certainty, each from its vocabulary.
        let info = alert.one("info");
        let categories = info.all("category");
        assert!(!categories.is_empty());
        for c in &categories {
            assert!(CATEGORY.contains(&c.text.as_str()), "{}", c.text);
        }
        assert!(
            categories.iter().any(|c| c.text == "Met"),
            "CAP 1.2 §3.2.2: Met is 'Meteorological (inc. flood)'"
        );
        assert!(!info.text_of("event").trim().is_empty());
        let urgency = info.text_of("urgency");
        let severity = info.text_of("severity");
        let certainty = info.text_of("certainty");
        assert!(URGENCY.contains(&urgency), "{urgency}");
        assert!(SEVERITY.contains(&severity), "{severity}");
        assert!(CERTAINTY.contains(&certainty), "{certainty}");
        for r in info.all("responseType") {
            assert!(RESPONSE_TYPE.contains(&r.text.as_str()), "{}", r.text);
        }
        if msg_type == "Cancel" {
            assert!(
                matches!(urgency, "Past" | "Unknown"),
                "a Cancel says no action is due"
            );
        }

        // OASIS CAP 1.2 §3.2.2: language is an RFC 3066 code (default en-US).
        if let Some(lang) = info.opt("language") {
            assert!(!lang.text.is_empty() && !lang.text.contains(' '));
        }

        // OASIS CAP 1.2 §3.2.2 / §3.3.2: onset and expires in CAP time form;
        // expires after sent.
        for name in ["effective", "onset", "expires"] {
            if let Some(e) = info.opt(name) {
                assert!(is_cap_time(&e.text), "{name} `{}`", e.text);
            }
        }
        let expires = cap_time_value(&info.opt("expires").expect("we always set expires").text);
        assert!(expires > sent_t);

        // OASIS CAP 1.2 §3.2.2: headline short, 160 characters suggested
        // (from memory).
        let headline = info.text_of("headline");
        assert!(headline.chars().count() < 160);

        // Project rule: every message says it is advisory and defers to
        // official warnings and local emergency authorities.
        assert!(
            info.text_of("description").contains(CAUTION)
                || info.text_of("instruction").contains(CAUTION)
        );

        // OASIS CAP 1.2 §3.2.2: web is a full absolute URI (from memory).
        if let Some(web) = info.opt("web") {
            assert!(web.text.starts_with("https://"), "{}", web.text);
        }

        // OASIS CAP 1.2 §3.2.2: each parameter has valueName and value.
        let params = info.all("parameter");
        assert!(!params.is_empty());
        for p in &params {
            assert!(!p.text_of("valueName").is_empty());
            p.one("value");
        }
        let names: Vec<&str> = params.iter().map(|p| p.text_of("valueName")).collect();
        if m.situation().is_some() {
            for required in [
                "reachcast:threshold_elevation_m",
                "reachcast:crest_stage_m",
                "reachcast:crest_time",
                "reachcast:run_id",
            ] {
                assert!(names.contains(&required), "{required} in {names:?}");
            }
        }

        // OASIS CAP 1.2 §3.2.4: area requires areaDesc; circle is
        // "lat,lon radius" in WGS 84, radius in km (from memory).
        let areas = info.all("area");
        assert!(!areas.is_empty());
        for area in areas {
            assert!(!area.text_of("areaDesc").trim().is_empty());
            for c in area.all("circle") {
                let (point, radius) = c.text.split_once(' ').expect("point and radius");
                let (lat, lon) = point.split_once(',').expect("lat,lon");
                let (lat, lon): (f64, f64) = (lat.parse().expect("lat"), lon.parse().expect("lon"));
                let radius: f64 = radius.parse().expect("radius");
                assert!((-90.0..=90.0).contains(&lat) && (-180.0..=180.0).contains(&lon));
                assert!(radius >= 0.0);
            }
            assert!(in_schema_order(
                &area.names(),
                &[
                    "areaDesc", "polygon", "circle", "geocode", "altitude", "ceiling"
                ]
            ));
        }

        // OASIS CAP 1.2 schema sequence for info children (from memory).
        let info_order = [
            "language",
            "category",
            "event",
            "responseType",
            "urgency",
            "severity",
            "certainty",
            "audience",
            "eventCode",
            "effective",
            "onset",
            "expires",
            "senderName",
            "headline",
            "description",
            "instruction",
            "web",
            "contact",
            "parameter",
            "resource",
            "area",
        ];
        assert!(
            in_schema_order(&info.names(), &info_order),
            "{:?}",
            info.names()
        );

        earlier.insert(identifier.to_owned(), (sender.to_owned(), sent_t));
    }
}

#[test]
fn special_characters_survive_a_round_trip() {
    let msgs = scenario();
    let town = msgs
        .iter()
        .find(|m| m.key.point.starts_with("hollin"))
        .expect("town message");
    let (alert, _, _) = parse(&render_cap(town, &CapOptions::default()).expect("render"));
    let info = alert.one("info");
    // XML 1.0 §2.4: `<` and `&` escaped in text; the parser gives back the
    // original characters.
    assert!(
        info.one("area")
            .text_of("areaDesc")
            .starts_with("Hollin & <Vale> \"Quay\"")
    );
    assert!(info.text_of("event").ends_with("Gardens 'wet'"));
}

#[test]
fn stale_forecasts_are_possible_not_likely() {
    for m in scenario() {
        let Some(s) = m.situation() else { continue };
        let (alert, _, _) = parse(&render_cap(&m, &CapOptions::default()).expect("render"));
        let certainty = alert.one("info").text_of("certainty").to_owned();
        // OASIS CAP 1.2 §3.2.2 certainty: Likely (p > ~50%), Possible
        // (p <= ~50%) (from memory).
        assert_eq!(certainty, if s.stale { "Possible" } else { "Likely" });
    }
}

#[test]
fn atom_index_meets_rfc_4287() {
    let msgs = scenario();
    // The current message of each key: the last one planned for it.
    let mut latest: HashMap<String, &Planned> = HashMap::new();
    for m in &msgs {
        latest.insert(m.key.to_string(), m);
    }
    let mut current: Vec<&Planned> = latest.into_values().collect();
    current.sort_by(|a, b| a.identifier.cmp(&b.identifier));
    let entries: Vec<FeedEntry> = current
        .iter()
        .map(|m| {
            let url = format!("https://forecast.example/cap/{}.xml", m.identifier);
            FeedEntry::for_message(m, &url, &url)
        })
        .collect();
    let feed = Feed {
        id: "https://forecast.example/cap/brindlemoor.atom".into(),
        title: "Brindlemoor River: advisory stage forecasts (CAP)".into(),
        self_url: "https://forecast.example/cap/brindlemoor.atom".into(),
        author_name: "reachcast".into(),
    };
    let xml = render_atom(&feed, &entries, t(10, 0)).expect("render");
    let (root, version, _) = parse(&xml);
    assert_eq!(version, "1.0");

    // RFC 4287 §2 / §1.2: Atom namespace http://www.w3.org/2005/Atom;
    // §4.1.1: the root of a Feed Document is atom:feed.
    assert_eq!(root.name, "feed");
    assert_eq!(root.ns.as_deref(), Some(ATOM_NS));

    // RFC 4287 §4.1.1: atom:feed requires exactly one id, title, updated.
    let id = root.text_of("id");
    root.one("title");
    let updated = root.text_of("updated");
    // RFC 4287 §4.2.6: id is an absolute IRI.
    assert!(id.starts_with("https://"));
    // RFC 4287 §3.3: dates are RFC 3339 date-time with upper-case T and Z.
    assert!(DateTime::parse_from_rfc3339(updated).is_ok(), "{updated}");
    assert!(updated.contains('T') && !updated.contains('t'));
    // RFC 4287 §4.1.1: one or more atom:author unless every entry has one.
    let authors = root.all("author");
    assert!(!authors.is_empty());
    for a in authors {
        // RFC 4287 §3.2: a Person construct requires atom:name.
        assert!(!a.text_of("name").is_empty());
    }
    // RFC 4287 §4.1.1: a feed SHOULD contain a link with rel="self".
    let selfs: Vec<&El> = root
        .all("link")
        .into_iter()
        .filter(|l| l.attrs.get("rel").map(String::as_str) == Some("self"))
        .collect();
    assert_eq!(selfs.len(), 1);
    assert_eq!(selfs[0].attrs["href"], feed.self_url);

    let entries_xml = root.all("entry");
    assert_eq!(entries_xml.len(), current.len());
    let mut ids = std::collections::HashSet::new();
    for (e, m) in entries_xml.iter().zip(&current) {
        assert_eq!(e.ns.as_deref(), Some(ATOM_NS));
        // RFC 4287 §4.1.2: atom:entry requires exactly one id, title,
        // updated.
        let eid = e.text_of("id");
        assert!(eid.starts_with("https://"), "RFC 4287 §4.2.6: absolute IRI");
        assert!(
            ids.insert(eid.to_owned()),
            "RFC 4287 §4.1.1: entry ids distinct within a feed (from memory)"
        );
        assert!(!e.text_of("title").is_empty());
        let eu = e.text_of("updated");
        assert!(DateTime::parse_from_rfc3339(eu).is_ok(), "{eu}");
        assert_eq!(
            DateTime::parse_from_rfc3339(eu).expect("date"),
            m.sent,
            "updated is the CAP sent time"
        );
        // RFC 4287 §4.1.2: an entry without atom:content has a link with
        // rel="alternate"; §4.2.7.3: type is a media type.
        assert!(e.opt("content").is_none());
        let alt: Vec<&El> = e
            .all("link")
            .into_iter()
            .filter(|l| l.attrs.get("rel").map(String::as_str) == Some("alternate"))
            .collect();
        assert_eq!(alt.len(), 1);
        assert_eq!(alt[0].attrs["type"], CAP_MEDIA_TYPE);
        assert!(alt[0].attrs["href"].ends_with(&format!("{}.xml", m.identifier)));
        // RFC 4287 §4.2.13: summary, a Text construct.
        assert!(e.text_of("summary").contains(CAUTION));
    }
}

#[test]
fn rendering_is_deterministic() {
    let a: Vec<String> = scenario()
        .iter()
        .map(|m| render_cap(m, &CapOptions::default()).expect("render"))
        .collect();
    let b: Vec<String> = scenario()
        .iter()
        .map(|m| render_cap(m, &CapOptions::default()).expect("render"))
        .collect();
    assert_eq!(a, b);
}

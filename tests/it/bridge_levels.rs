//! A bridge's low chord and deck as levels, end to end through the real
//! server on a real SQLite file: the forecast says when the water reaches
//! each and when it falls back below, the exceedance board and CAP report
//! them with stable ids and their default severities, a threshold typed at
//! the low chord's elevation is not reported twice, renaming the bridge
//! keeps every id and message chain, and the longitudinal profile shows
//! the envelope meeting the bridge's crest above its low chord.

use std::collections::HashMap;

use crate::common::{ReachApp, assert_success, bridge_reach, json_of, reach_gauge, xml::parse};
use chrono::{DateTime, Duration, Utc};
use serde_json::{Value, json};

const REACH: &str = "level-reach";
const GAUGE: &str = "level-gauge";

/// The common bridge reach (low chord 19.5 m, deck 20.5 m at chainage
/// 5 km; bed 15 m there) with 15-minute output and a third threshold typed
/// at the low chord's elevation, as reach files written before the low
/// chord was a level did.
fn reach_doc() -> Value {
    let mut d = bridge_reach("Level reach (invented)", "Marl Bridge", GAUGE);
    d["routing"]["output_interval_s"] = json!(900);
    d["points"][0]["thresholds"]
        .as_array_mut()
        .expect("thresholds")
        .push(json!({"name": "beams wet", "elevation": 19.5}));
    d
}

async fn setup() -> ReachApp {
    let gauge = reach_gauge("Level gauge", REACH, "discharge", 19.0, 2.0);
    ReachApp::start(
        |c| {
            // Runs only when the test asks.
            c.forecast.debounce_ms = 600_000;
            c.forecast.interval_minutes = 60;
        },
        (REACH, &reach_doc()),
        (GAUGE, &gauge),
    )
    .await
}

/// Readings at 40 m³/s up to now, and an upload rising to 400 m³/s four
/// hours ahead, holding four hours and falling back to 20 m³/s at sixteen:
/// by Manning's formula (b 15 m, 1:2 sides, n 0.035, S 0.001) normal depth
/// is about 5.0 m at 253 m³/s and 5.5 m at 304 m³/s, so at the bridge
/// (bed 15 m) the flood passes the low chord (19.5 m) and the deck
/// (20.5 m) and falls back below both within the forecast.
async fn flood(s: &ReachApp) {
    let now = Utc::now();
    let readings: Vec<Value> = (0..=12)
        .map(|k| {
            let t = now - Duration::minutes(15 * (12 - k));
            json!({"time": t.to_rfc3339(), "discharge": 40.0, "quality": "good"})
        })
        .collect();
    let body = json!({ "readings": readings });
    assert_success(s.app.post_readings(&s.keys.gauge, GAUGE, &body).await).await;
    let h = |x: i64| (now + Duration::hours(x)).to_rfc3339();
    let series = [(0, 40.0), (4, 400.0), (8, 400.0), (16, 20.0), (48, 20.0)];
    let upload = json!({
        "reason": "invented flood for the level tests",
        "series": series.iter().map(|(t, q)| json!({"time": h(*t), "discharge": q})).collect::<Vec<_>>(),
    });
    json_of(
        s.app.post_inflow(&s.keys.forecaster, REACH, &upload).await,
        201,
    )
    .await;
    json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;
}

fn time(v: &Value) -> DateTime<Utc> {
    DateTime::parse_from_rfc3339(v.as_str().expect("time string"))
        .expect("RFC 3339")
        .with_timezone(&Utc)
}

/// The first upward crossing of `z` after `now` and the first downward
/// crossing after that, by linear interpolation between the served
/// samples (similar triangles): computed here, independently of the
/// service's own crossing code.
fn crossings(
    times: &[DateTime<Utc>],
    stage: &[f64],
    now: DateTime<Utc>,
    z: f64,
) -> (DateTime<Utc>, DateTime<Utc>) {
    let at = |i: usize| {
        let dt = (times[i] - times[i - 1]).num_milliseconds() as f64;
        let w = (z - stage[i - 1]) / (stage[i] - stage[i - 1]);
        times[i - 1] + Duration::milliseconds((dt * w).round() as i64)
    };
    let up = (1..times.len())
        .find(|&i| times[i - 1] >= now && stage[i - 1] <= z && stage[i] > z)
        .expect("an upward crossing ahead");
    let down = (up + 1..times.len())
        .find(|&i| stage[i - 1] > z && stage[i] <= z)
        .expect("a downward crossing");
    (at(up), at(down))
}

fn close(a: DateTime<Utc>, b: DateTime<Utc>) -> bool {
    (a - b).num_milliseconds().abs() <= 1000
}

#[tokio::test]
async fn the_low_chord_and_deck_are_levels_with_crossing_times() {
    let s = setup().await;
    flood(&s).await;
    let (status, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    assert_eq!(status, 200);
    let p = &f["points"][0];
    assert_eq!(p["id"], "marl-bridge");
    let now = time(&f["now"]);
    let times: Vec<DateTime<Utc>> = p["times"]
        .as_array()
        .expect("times")
        .iter()
        .map(time)
        .collect();
    let stage: Vec<f64> = p["stage"]
        .as_array()
        .expect("stage")
        .iter()
        .filter_map(Value::as_f64)
        .collect();
    // Served every 15 minutes (the reach's output interval).
    assert!(
        times
            .windows(2)
            .take(10)
            .all(|w| w[1] - w[0] == Duration::minutes(15))
    );
    let levels = p["levels"].as_array().expect("levels");
    let ids: Vec<&str> = levels.iter().filter_map(|l| l["id"].as_str()).collect();
    // "beams wet" at 19.5 m is the low chord: merged, not reported twice.
    assert_eq!(ids, ["low", "high", "low_chord", "deck"], "{levels:?}");
    let by_id: HashMap<&str, &Value> = ids.iter().copied().zip(levels).collect();
    assert_eq!(by_id["low_chord"]["also_named"], json!(["beams wet"]));
    let crest = p["crest_stage"].as_f64().expect("crest");
    for (id, z) in [("low_chord", 19.5), ("deck", 20.5)] {
        let l = by_id[id];
        assert_eq!(l["kind"], id);
        assert_eq!(l["exceeded"], true, "{id}: crest {crest}");
        let (up, down) = crossings(&times, &stage, now, z);
        assert!(
            close(time(&l["first_above"]), up),
            "{id}: {} vs {up}",
            l["first_above"]
        );
        assert!(
            close(time(&l["back_below"]), down),
            "{id}: {} vs {down}",
            l["back_below"]
        );
        assert!((l["margin"].as_f64().expect("margin") - (crest - z)).abs() < 1e-9);
    }
    assert_eq!(p["highest_exceeded_id"], "deck");

    // The same levels as a CSV table (RFC 4180), one row per level.
    let res = s
        .app
        .get(&format!(
            "/api/reaches/{REACH}/forecast?format=csv&table=levels"
        ))
        .await;
    assert_eq!(res.status(), 200);
    let text = res.text().await.expect("csv");
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let head = reader.headers().expect("header").clone();
    let col = |name: &str| head.iter().position(|h| h == name).expect(name);
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.expect("row")).collect();
    assert_eq!(rows.len(), 4);
    let lc = rows
        .iter()
        .find(|r| &r[col("level_id")] == "low_chord")
        .expect("low chord row");
    assert_eq!(&lc[col("point_id")], "marl-bridge");
    assert_eq!(&lc[col("elevation_m")], "19.5000");
    assert!(close(
        time(&json!(lc[col("first_above")].to_owned())),
        time(&by_id["low_chord"]["first_above"])
    ));
    assert!(lc[col("caution")].contains("not an official warning"));

    // The exceedance board: stable ids, level kinds, default severities,
    // and the same crossing as the forecast.
    let (_, ex) = s
        .app
        .get_json(&format!("/api/exceedances?reach={REACH}"))
        .await;
    let items = ex["items"].as_array().expect("items");
    assert_eq!(items.len(), 4, "one item per level: {items:?}");
    let item = |id: &str| {
        items
            .iter()
            .find(|i| i["id"] == format!("{REACH}/marl-bridge/{id}"))
            .unwrap_or_else(|| panic!("no item {id}: {items:?}"))
    };
    assert_eq!(item("low_chord")["severity"], "severe");
    assert_eq!(item("low_chord")["level_kind"], "low_chord");
    assert_eq!(
        item("low_chord")["first_above"],
        by_id["low_chord"]["first_above"]
    );
    assert_eq!(item("deck")["severity"], "extreme");
    assert_eq!(item("deck")["back_below"], by_id["deck"]["back_below"]);

    // CAP: the low chord and the deck each have an alert in planner's words.
    let alerts = cap_messages(&s).await;
    let lc = &alerts["low_chord"];
    assert_eq!(lc.severity, "Severe");
    assert!(
        lc.headline.contains("reach the low chord"),
        "{}",
        lc.headline
    );
    let deck = &alerts["deck"];
    assert_eq!(deck.severity, "Extreme");
    assert!(
        deck.description.contains("Deck forecast under water from"),
        "{}",
        deck.description
    );
    s.app.stop().await;
}

/// Renaming the bridge (its id set to the old default) keeps the ids of
/// its exceedance items and its CAP chains: nothing is cancelled.
#[tokio::test]
async fn renaming_a_bridge_keeps_its_ids_and_chains() {
    let s = setup().await;
    flood(&s).await;
    let before = cap_messages(&s).await;
    let mut doc = reach_doc();
    doc["points"][0]["name"] = json!("Marl Road Bridge");
    doc["points"][0]["id"] = json!("marl-bridge");
    assert_eq!(
        s.app.put_reach(&s.keys.admin, REACH, &doc).await.status(),
        200
    );
    json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;
    let (_, ex) = s
        .app
        .get_json(&format!("/api/exceedances?reach={REACH}"))
        .await;
    let items = ex["items"].as_array().expect("items");
    assert!(
        items
            .iter()
            .any(|i| i["id"] == format!("{REACH}/marl-bridge/low_chord")
                && i["point"] == "Marl Road Bridge")
    );
    let after = cap_messages(&s).await;
    assert!(
        after.contains_key("low_chord") && after.contains_key("deck"),
        "{after:?}"
    );
    for (level, m) in &after {
        assert_ne!(m.msg_type, "Cancel", "{level} was cancelled by a rename");
        let old = &before[level];
        assert!(
            m.identifier == old.identifier || m.references.contains(&old.identifier),
            "{level}: the chain goes on"
        );
    }
    // An id that is not a slug is refused, naming the field.
    doc["points"][0]["id"] = json!("Marl Bridge");
    let res = s.app.put_reach(&s.keys.admin, REACH, &doc).await;
    assert_eq!(res.status(), 422);
    let p: Value = res.json().await.expect("problem");
    assert_eq!(p["field"], "points[0].id");
    s.app.stop().await;
}

/// What a CAP message says, as far as these tests look.
#[derive(Debug)]
struct Cap {
    identifier: String,
    msg_type: String,
    references: String,
    severity: String,
    headline: String,
    description: String,
}

/// The current CAP message of each level of the reach, by level id, read
/// from the Atom feed and the CAP documents it links.
async fn cap_messages(s: &ReachApp) -> HashMap<String, Cap> {
    let res = s.app.get("/api/cap/feed.atom").await;
    assert_eq!(res.status(), 200);
    let feed = parse(&res.text().await.expect("feed"));
    let mut out = HashMap::new();
    for entry in feed.all("entry") {
        let href = entry.one("link").attrs["href"].clone();
        let xml = reqwest::get(&href)
            .await
            .expect("CAP")
            .text()
            .await
            .expect("body");
        let alert = parse(&xml);
        let info = alert.one("info");
        let params: HashMap<&str, &str> = info
            .all("parameter")
            .iter()
            .map(|p| (p.text_of("valueName"), p.text_of("value")))
            .collect();
        out.insert(
            params["reachcast:level_id"].to_owned(),
            Cap {
                identifier: alert.text_of("identifier").to_owned(),
                msg_type: alert.text_of("msgType").to_owned(),
                references: alert.opt_text("references").unwrap_or_default().to_owned(),
                severity: info.text_of("severity").to_owned(),
                headline: info.text_of("headline").to_owned(),
                description: info.text_of("description").to_owned(),
            },
        );
    }
    out
}

/// The profile's envelope: at each point it is the point's forecast crest
/// (within 1 mm); the node envelope interpolated to the point is not
/// below it (a linear blend of two nodes' maxima is at least the maximum
/// of their blend); everywhere it is above the bed and the water now; at
/// the bridge it stands above the low chord. US units scale every length
/// by 1/0.3048 (the international foot, NIST SP 811).
#[tokio::test]
async fn the_profile_envelope_meets_each_crest() {
    let s = setup().await;
    flood(&s).await;
    let (status, prof) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/profile"))
        .await;
    assert_eq!(status, 200, "{prof}");
    let (_, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;
    assert!(
        prof["caution"]
            .as_str()
            .expect("caution")
            .contains("not an official warning")
    );
    let num = |v: &Value| v.as_f64().expect("number");
    let nodes = prof["nodes"].as_array().expect("nodes");
    assert!(nodes.len() >= 40, "every node: {}", nodes.len());
    for n in nodes {
        let (bed, high, now) = (num(&n["bed"]), num(&n["highest"]), num(&n["stage_now"]));
        assert!(high >= now - 1e-12 && now >= bed, "{n}");
    }
    let p = &prof["points"][0];
    let crest = num(&f["points"][0]["crest_stage"]);
    assert!(
        (num(&p["highest"]) - crest).abs() < 1e-3,
        "{} vs {crest}",
        p["highest"]
    );
    assert_eq!(p["highest_time"], f["points"][0]["crest_time"]);
    // The node envelope at the bridge's chainage, linear between nodes.
    let x = num(&p["chainage"]);
    let k = nodes
        .iter()
        .position(|n| num(&n["chainage"]) >= x)
        .expect("a node past the bridge");
    let (a, b) = (&nodes[k.saturating_sub(1)], &nodes[k]);
    let (xa, xb) = (num(&a["chainage"]), num(&b["chainage"]));
    let w = if xb > xa { (x - xa) / (xb - xa) } else { 0.0 };
    let envelope = num(&a["highest"]) * (1.0 - w) + num(&b["highest"]) * w;
    assert!(envelope >= crest - 1e-3, "{envelope} vs crest {crest}");
    assert!(envelope > 19.5, "above the low chord: {envelope}");
    assert_eq!(num(&p["low_chord"]), 19.5);
    let kinds: Vec<&str> = p["levels"]
        .as_array()
        .expect("levels")
        .iter()
        .filter_map(|l| l["kind"].as_str())
        .collect();
    assert_eq!(kinds, ["threshold", "threshold", "low_chord", "deck"]);
    // The test reach's trapezoids have no bank height: no bank tops.
    assert_eq!(prof["banks"].as_array().expect("banks").len(), 2);
    assert!(prof["banks"][0]["left_top"].is_null());

    let (_, us) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/profile?units=us"))
        .await;
    assert_eq!(us["units"]["elevation"], "ft");
    let last = nodes.len() - 1;
    for (i, field) in [(last, "chainage"), (last, "bed"), (0, "highest")] {
        let si = num(&nodes[i][field]);
        let ft = num(&us["nodes"][i][field]);
        assert!(
            (ft * 0.3048 - si).abs() < 1e-9,
            "{field}: {ft} ft vs {si} m"
        );
    }
    s.app.stop().await;
}

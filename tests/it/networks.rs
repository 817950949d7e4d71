//! A reach of several channels through the real HTTP server on a real
//! SQLite file: a confluence whose tributary has a gauge of its own. The
//! network description is accepted at `PUT`, the tributary gauge's
//! readings feed its channel, the forecast reports points on every
//! channel and the flow split at the junction, and the profile draws one
//! channel or the main stem.
//!
//! Reference: continuity (common practice). In steady flow the lower
//! river carries the upstream 40 m³/s plus the tributary's 20 m³/s, and
//! the two arrive at the junction in the shares 2/3 and 1/3.

use chrono::{DateTime, Duration, Utc};
use serde_json::{Value, json};

use crate::common::{ReachApp, assert_success, json_of, problem, reach_gauge, steady_discharge};

const REACH: &str = "network-reach";
const UPSTREAM: &str = "network-upstream";
const TRIBUTARY: &str = "nettle-beck";

fn trapezoid(name: &str, chainage: f64, bed: f64, width: f64) -> Value {
    json!({"name": name, "chainage": chainage, "geometry": {"shape": "trapezoid",
           "bed_elevation": bed, "bottom_width": width, "side_slope": 2.0, "n": 0.035}})
}

/// An invented confluence: the Harrow Water (upper and lower) and the
/// Nettle Beck joining it at Nettle Foot.
fn doc() -> Value {
    json!({
        "name": "Harrow Water and Nettle Beck (invented)",
        "channels": [
            {"name": "Harrow upper", "sections": [trapezoid("H0", 0.0, 20.0, 15.0), trapezoid("H5", 5000.0, 15.0, 15.0)],
             "upstream": {"kind": "inflow"}, "downstream": {"kind": "junction", "junction": "Nettle Foot"}},
            {"name": "Nettle Beck", "sections": [trapezoid("N0", 0.0, 21.0, 6.0), trapezoid("N3", 3000.0, 15.2, 6.0)],
             "upstream": {"kind": "tributary", "name": "Nettle Beck", "gauge": TRIBUTARY},
             "downstream": {"kind": "junction", "junction": "Nettle Foot"}},
            {"name": "Harrow lower", "sections": [trapezoid("H5", 5000.0, 15.0, 18.0), trapezoid("H10", 10000.0, 10.0, 18.0)],
             "upstream": {"kind": "junction", "junction": "Nettle Foot"}, "downstream": {"kind": "outlet"}}
        ],
        "max_node_spacing": 250,
        "downstream": {"kind": "normal_depth", "friction_slope": 0.001},
        "points": [
            {"name": "Harrow Bridge", "channel": "Harrow lower", "chainage": 7500, "kind": "bridge",
             "low_chord": 19.5, "deck": 20.5},
            {"name": "Nettle ford", "channel": "Nettle Beck", "chainage": 1500, "kind": "road_crossing",
             "thresholds": [{"name": "ford awash", "elevation": 18.5}]}
        ],
        "routing": {"output_interval_s": 600},
        "service": {"upstream_gauge": UPSTREAM, "time_zone": "+01:00"}
    })
}

async fn setup() -> ReachApp {
    let upstream = reach_gauge("Harrow upstream (invented)", REACH, "discharge", 19.0, 2.0);
    let s = ReachApp::start(
        |c| {
            c.forecast.debounce_ms = 600_000;
            c.forecast.lookback_hours = 6;
            c.forecast.horizon_hours = 6;
        },
        (REACH, &doc()),
        (UPSTREAM, &upstream),
    )
    .await;
    let trib = json!({"name": "Nettle Beck gauge (invented)", "reach": REACH, "chainage_m": 0.0,
                      "measures": "discharge", "stage_min_m": 0.0, "stage_max_m": 30.0,
                      "max_rise_m_per_h": 2.0, "discharge_max_m3s": 500.0});
    assert_success(s.app.put_gauge(&s.keys.admin, TRIBUTARY, &trib).await).await;
    s
}

/// Posts 6 h of a steady discharge `q` ending `now` to a gauge as `key`.
async fn post_steady(s: &ReachApp, (key, gauge): (&str, &str), q: f64, now: DateTime<Utc>) {
    let body = steady_discharge(q, now);
    assert_success(s.app.post_readings(key, gauge, &body).await).await;
}

#[tokio::test]
async fn a_gauged_tributary_channel_feeds_the_network_and_the_split_is_reported() {
    let s = setup().await;
    let now = Utc::now();
    post_steady(&s, (&s.keys.gauge, UPSTREAM), 40.0, now).await;
    let trib_key = s.app.key(reachcast::auth::Role::Gauge, &[TRIBUTARY]).await;
    post_steady(&s, (&trib_key, TRIBUTARY), 20.0, now).await;
    let summary = json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;
    assert_eq!(summary["status"], "ok", "{summary}");
    // The tributary channel's provenance: its gauge, its observations.
    let (_, run) = s
        .app
        .get_json(&format!("/api/runs/{}", summary["run_id"]))
        .await;
    let beck = run["provenance"]["laterals"]
        .as_array()
        .and_then(|l| l.iter().find(|t| t["name"] == "Nettle Beck"))
        .cloned()
        .unwrap_or_else(|| panic!("Nettle Beck in {}", run["provenance"]));
    assert_eq!(beck["gauge"], TRIBUTARY, "{beck}");
    assert!(
        beck["inflow"]["observed_count"].as_u64().unwrap_or(0) >= 20,
        "{beck}"
    );
    let (_, f) = s
        .app
        .get_json(&format!("/api/reaches/{REACH}/forecast"))
        .await;

    let point = |name: &str| {
        f["points"]
            .as_array()
            .and_then(|ps| ps.iter().find(|p| p["name"] == name))
            .cloned()
            .unwrap_or_else(|| panic!("{name} in {f}"))
    };
    let bridge = point("Harrow Bridge");
    assert_eq!(bridge["channel"], "Harrow lower");
    let q = bridge["peak_discharge"].as_f64().expect("peak");
    assert!(
        (q - 60.0).abs() < 0.6,
        "40 + 20 m³/s below the confluence: {q}"
    );
    let ford = point("Nettle ford");
    assert_eq!(ford["channel"], "Nettle Beck");
    let q = ford["peak_discharge"].as_f64().expect("peak");
    assert!((q - 20.0).abs() < 0.2, "the tributary gauge's 20 m³/s: {q}");

    let j = &f["junctions"][0];
    assert_eq!(j["name"], "Nettle Foot", "{f}");
    let ends = j["ends"].as_array().expect("ends");
    assert_eq!(ends.len(), 3);
    let last = |e: &Value, what: &str| {
        e[what]
            .as_array()
            .and_then(|a| a.last())
            .and_then(Value::as_f64)
            .expect("a value")
    };
    for e in ends {
        let (share, expected) = match e["channel"].as_str() {
            Some("Harrow upper") => (last(e, "share"), 2.0 / 3.0),
            Some("Nettle Beck") => (last(e, "share"), 1.0 / 3.0),
            Some("Harrow lower") => (last(e, "share"), 1.0),
            other => panic!("unexpected end {other:?}"),
        };
        assert!((share - expected).abs() < 0.01, "{e}");
        assert_eq!(e["times"], Value::Null, "times are the junction's");
    }
    assert_eq!(
        j["times"].as_array().map(Vec::len),
        ends[0]["discharge"].as_array().map(Vec::len)
    );
    s.app.stop().await;
}

#[tokio::test]
async fn the_profile_draws_the_main_stem_or_the_channel_asked_for() {
    let s = setup().await;
    let now = Utc::now();
    post_steady(&s, (&s.keys.gauge, UPSTREAM), 40.0, now).await;
    // The tributary gauge has never reported and its channel has no
    // upload or hydrograph of its own: the run fails naming it.
    let summary = json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;
    assert_eq!(summary["status"], "failed", "{summary}");
    let error = summary["error"].as_str().unwrap_or_default();
    assert!(
        error.contains("channels[1].upstream (Nettle Beck)"),
        "{error}"
    );
    let trib_key = s.app.key(reachcast::auth::Role::Gauge, &[TRIBUTARY]).await;
    post_steady(&s, (&trib_key, TRIBUTARY), 20.0, now).await;
    let summary = json_of(s.app.run_and_wait(&s.keys.forecaster, REACH).await, 200).await;
    assert_eq!(summary["status"], "ok", "{summary}");

    let path = |q: &str| format!("/api/reaches/{REACH}/profile{q}");
    let (status, stem) = s.app.get_json(&path("")).await;
    assert_eq!(status, 200, "{stem}");
    let stems: Vec<(String, bool)> = stem["channels"]
        .as_array()
        .expect("channels")
        .iter()
        .map(|c| {
            (
                c["name"].as_str().unwrap_or("").to_owned(),
                c["main_stem"] == true,
            )
        })
        .collect();
    assert_eq!(
        stems,
        vec![
            ("Harrow upper".to_owned(), true),
            ("Nettle Beck".to_owned(), false),
            ("Harrow lower".to_owned(), true)
        ]
    );
    let chainage: Vec<f64> = stem["nodes"]
        .as_array()
        .expect("nodes")
        .iter()
        .filter_map(|n| n["chainage"].as_f64())
        .collect();
    assert_eq!(chainage.first(), Some(&0.0));
    assert_eq!(chainage.last(), Some(&10_000.0));
    let names: Vec<&str> = stem["points"]
        .as_array()
        .expect("points")
        .iter()
        .filter_map(|p| p["name"].as_str())
        .collect();
    assert_eq!(names, vec!["Harrow Bridge"]);

    let (status, beck) = s.app.get_json(&path("?channel=Nettle%20Beck")).await;
    assert_eq!(status, 200, "{beck}");
    assert_eq!(beck["channel"], "Nettle Beck");
    let last = beck["nodes"]
        .as_array()
        .and_then(|n| n.last())
        .expect("nodes");
    assert_eq!(last["chainage"], 3000.0);
    assert_eq!(beck["points"][0]["name"], "Nettle ford");
    assert_eq!(beck["banks"].as_array().map(Vec::len), Some(2));

    // No such channel: the profile asked for does not exist.
    let p = problem(s.app.get(&path("?channel=Nowhere")).await, 404).await;
    assert_eq!(p["field"], "channel", "{p}");
    s.app.stop().await;
}

#[tokio::test]
async fn network_rules_are_refused_at_put_naming_the_field() {
    let s = setup().await;
    let mut bad = doc();
    bad["points"][1]["channel"] = json!("Harrow middle");
    let p = problem(s.app.put_reach(&s.keys.admin, REACH, &bad).await, 422).await;
    assert_eq!(p["field"], "points[1].channel", "{p}");
    let mut bad = doc();
    bad["channels"][2]["downstream"] = json!({"kind": "junction", "junction": "Nettle Foot"});
    let p = problem(s.app.put_reach(&s.keys.admin, REACH, &bad).await, 422).await;
    assert_eq!(p["field"], "channels", "{p}");
    // A tributary channel's upload names it as its boundary.
    let inflow = json!({"reason": "revised beck inflow", "series": [
        {"time": Utc::now().to_rfc3339(), "discharge": 12.0},
        {"time": (Utc::now() + Duration::hours(6)).to_rfc3339(), "discharge": 30.0}]});
    let res = s
        .app
        .post_json(
            &s.keys.forecaster,
            &format!("/api/reaches/{REACH}/inflows?boundary=Nettle%20Beck"),
            &inflow,
        )
        .await;
    let up = json_of(res, 201).await;
    assert_eq!(up["boundary"], "Nettle Beck", "{up}");
    s.app.stop().await;
}

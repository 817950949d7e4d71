//! A network reach through the forecast layer, on the invented demo
//! files: REACH.json's `channels` parsed, checked, routed and reported.

use serde_json::{Value, json};

use crate::forecast::{
    hydrograph::Hydrograph,
    inflow,
    run::{RunOutput, run},
    spec::ReachSpec,
};

const ONE: &str = include_str!("../demo/brindlemoor-reach.json");
const NETWORK: &str = include_str!("../demo/brindlemoor-network.json");
const STORM: &str = include_str!("../demo/brindlemoor-inflow.csv");

fn storm() -> Hydrograph {
    inflow::parse_csv(STORM.as_bytes()).expect("storm").series
}

fn network_json() -> Value {
    serde_json::from_str(NETWORK).expect("json")
}

fn spec_of(v: &Value) -> Result<ReachSpec, crate::forecast::spec::SpecError> {
    ReachSpec::from_json(&v.to_string())
}

fn routed(v: &Value) -> RunOutput {
    run(&spec_of(v).expect("valid"), &storm(), None).expect("routes")
}

/// The demo network without its tributary: the main river as two channels
/// meeting end to end at Moss Foot.
fn main_river_in_two() -> Value {
    let mut v = network_json();
    let channels = v["channels"].as_array_mut().expect("channels");
    channels.retain(|c| c["name"] != "Moss Gill");
    let points = v["points"].as_array_mut().expect("points");
    points.retain(|p| p["channel"] != "Moss Gill");
    v
}

/// A junction met by two channel ends only is an interior point of one
/// channel: the shared level there and continuity of the junction's
/// storage (the zero-inertia junction treatment, Cunge, Holly and Verwey
/// 1980, from memory) give the same equations as the single channel's
/// node. So the main river cut in two at Moss Foot reproduces the
/// one-channel run: within 1 mm of stage and 0.1 % of discharge at every
/// point and output.
#[test]
fn a_river_cut_in_two_at_a_junction_is_the_one_channel_river() {
    let one = run(&ReachSpec::from_json(ONE).expect("one"), &storm(), None).expect("one routes");
    let two = routed(&main_river_in_two());
    assert_eq!(one.points.len(), two.points.len());
    let mut worst = (0.0_f64, 0.0_f64);
    for (a, b) in one.points.iter().zip(&two.points) {
        assert_eq!(a.name, b.name);
        assert_eq!(a.times, b.times);
        for k in 0..a.stage.len() {
            worst.0 = worst.0.max((a.stage[k] - b.stage[k]).abs());
            let q = a.discharge[k].abs().max(1.0);
            worst.1 = worst.1.max((a.discharge[k] - b.discharge[k]).abs() / q);
        }
    }
    // Printed for the README's figures (`cargo test -- --nocapture`).
    println!(
        "cut in two: stage within {:e} m, discharge {:e}",
        worst.0, worst.1
    );
    assert!(worst.0 < 1e-3, "stage differs by {} m", worst.0);
    assert!(
        worst.1 < 1e-3,
        "discharge differs by {} (relative)",
        worst.1
    );
    assert!(two.diagnostics.mass_balance_error_pct.abs() < 0.1);
}

/// The demo confluence: volume is conserved through the network (under
/// 0.1 %, common practice for a routing model's check), the flow split is
/// reported with the tributary arriving at Moss Foot, and at the flood's
/// peak what leaves the junction is what arrives, less the little the
/// junction stores (within 1 % of the through-flow).
#[test]
fn the_demo_confluence_conserves_volume_and_reports_its_split() {
    let out = routed(&network_json());
    assert!(
        out.diagnostics.mass_balance_error_pct.abs() < 0.1,
        "{:?}",
        out.diagnostics
    );
    let [j] = out.junctions.as_slice() else {
        panic!("one junction: {:?}", out.junctions.len());
    };
    assert_eq!(j.junction, "Moss Foot");
    let side = |name: &str| {
        j.ends
            .iter()
            .find(|e| e.channel == name)
            .unwrap_or_else(|| panic!("{name} at the junction"))
    };
    assert!(!side("Moss Gill").leaves && !side("Brindle above Moss Foot").leaves);
    assert!(side("Brindle below Moss Foot").leaves);
    let below = &side("Brindle below Moss Foot").discharge;
    let k = (0..below.len())
        .max_by(|&a, &b| below[a].total_cmp(&below[b]))
        .expect("outputs");
    let arriving = side("Moss Gill").discharge[k] + side("Brindle above Moss Foot").discharge[k];
    assert!(
        (arriving - below[k]).abs() < 0.01 * below[k],
        "{arriving} in, {} out",
        below[k]
    );
    // The tributary's point is on its channel, in its own chainage.
    let bridge = out
        .points
        .iter()
        .find(|p| p.name == "Gill End footbridge")
        .expect("footbridge");
    assert_eq!(bridge.channel.as_deref(), Some("Moss Gill"));
    assert!(bridge.peak_discharge < 70.0 && bridge.peak_discharge > 50.0);
}

/// Every rule of the network form is refused with the field that breaks it
/// (RFC 9457 problems name it; the check is the project's own contract).
#[test]
fn network_errors_name_the_field() {
    let field = |v: Value| spec_of(&v).err().map(|e| e.field).unwrap_or_default();
    let mut v = network_json();
    v["sections"] = ReachSpec::from_json(ONE)
        .map(|s| json!(s.sections))
        .expect("one");
    assert_eq!(field(v), "sections");

    let mut v = network_json();
    v["points"][1]["channel"] = json!("Nowhere Brook");
    assert_eq!(field(v), "points[1].channel");

    let mut v = network_json();
    v["points"][1]
        .as_object_mut()
        .expect("point")
        .remove("channel");
    assert_eq!(field(v), "points[1].channel");

    let mut v = network_json();
    v["points"][1]["chainage"] = json!(12_000.0);
    assert_eq!(field(v), "points[1].chainage");

    let mut v = network_json();
    v["channels"][1]["upstream"] = json!({"kind": "inflow"});
    assert_eq!(field(v), "channels[1].upstream");

    let mut v = network_json();
    v["channels"][1]["downstream"] = json!({"kind": "junction", "junction": "Nowhere"});
    assert_eq!(field(v), "channels");

    let mut v = network_json();
    v["channels"][1]["downstream"] = json!({"kind": "junction", "junction": " "});
    assert_eq!(field(v), "channels[1].downstream.junction");

    let mut v = network_json();
    v["channels"][2]["name"] = json!("Moss Gill");
    assert_eq!(field(v), "channels[2].name");

    let mut v = network_json();
    v["routing"]["method"] = json!("kinematic");
    assert_eq!(field(v), "routing.method");

    let mut v = network_json();
    v["channels"][1]["upstream"]
        .as_object_mut()
        .expect("upstream")
        .remove("gauge");
    v["channels"][1]["upstream"]["inflow"] = json!([]);
    assert_eq!(field(v), "channels[1].upstream.inflow");

    // A reach of one channel has no channels to name.
    let mut one: Value = serde_json::from_str(ONE).expect("json");
    one["points"][0]["channel"] = json!("Brindle");
    assert_eq!(field(one), "points[0].channel");
}

fn trapezoid(name: &str, chainage: f64, bed: f64, width: f64, n: f64) -> Value {
    json!({"name": name, "chainage": chainage, "geometry": {"shape": "trapezoid",
           "bed_elevation": bed, "bottom_width": width, "side_slope": 2.0, "n": n}})
}

/// An invented river with a floodplain path beside its middle third: the
/// path leaves at Split and rejoins at Rejoin, its bed 2.5 m above the
/// river's, so it carries nothing until the river is that deep.
fn floodplain_loop() -> Value {
    let junction = |j: &str| json!({"kind": "junction", "junction": j});
    json!({
        "name": "Teasel River with its floodplain path (invented)",
        "channels": [
            {"name": "Upper", "sections": [trapezoid("U0", 0.0, 20.0, 15.0, 0.035), trapezoid("U3", 3000.0, 17.0, 15.0, 0.035)],
             "upstream": {"kind": "inflow"}, "downstream": junction("Split")},
            {"name": "Middle", "sections": [trapezoid("M3", 3000.0, 17.0, 15.0, 0.035), trapezoid("M6", 6000.0, 14.0, 15.0, 0.035)],
             "upstream": junction("Split"), "downstream": junction("Rejoin")},
            {"name": "Floodplain path", "sections": [trapezoid("F3", 0.0, 19.5, 30.0, 0.06), trapezoid("F6", 3000.0, 16.5, 30.0, 0.06)],
             "upstream": junction("Split"), "downstream": junction("Rejoin")},
            {"name": "Lower", "sections": [trapezoid("L6", 6000.0, 14.0, 15.0, 0.035), trapezoid("L10", 10000.0, 10.0, 15.0, 0.035)],
             "upstream": junction("Rejoin"), "downstream": {"kind": "outlet"}}
        ],
        "max_node_spacing": 250,
        "downstream": {"kind": "normal_depth", "friction_slope": 0.001},
        "points": [
            {"name": "Path crossing", "channel": "Floodplain path", "chainage": 1500, "kind": "road_crossing"},
            {"name": "Lower bridge", "channel": "Lower", "chainage": 8000, "kind": "bridge", "low_chord": 16.0, "deck": 17.0}
        ],
        "routing": {"output_interval_s": 900}
    })
}

/// 10 m³/s rising to 200 m³/s at 6 h and back by 18 h, held to 36 h.
fn flood() -> Hydrograph {
    let t0 = chrono::DateTime::from_timestamp(1_773_446_400, 0).expect("time");
    let q = |h: f64| match h {
        h if h <= 6.0 => 10.0 + 190.0 * h / 6.0,
        h if h <= 18.0 => 200.0 - 190.0 * (h - 6.0) / 12.0,
        _ => 10.0,
    };
    Hydrograph::parse(
        (0..=36)
            .map(|h| (t0 + chrono::Duration::hours(h), q(h as f64)))
            .collect(),
    )
    .expect("flood")
}

/// A loop through REACH.json with a side channel that is dry at low flow:
/// it wets as the flood rises over its bed, carries a share of the flood,
/// and dries again, with no NaN, no stage below the bed and volume
/// conserved within 0.1 % (common practice); the leaving shares at Split
/// add up to the whole in steady flow (continuity).
#[test]
fn a_dry_floodplain_path_wets_and_dries_through_a_flood() {
    let spec = spec_of(&floodplain_loop()).expect("valid loop");
    let out = run(&spec, &flood(), None).expect("routes");
    assert!(
        out.diagnostics.mass_balance_error_pct.abs() < 0.1,
        "{:?}",
        out.diagnostics
    );
    for p in &out.points {
        assert!(p.stage.iter().all(|z| z.is_finite()), "{}", p.name);
        assert!(
            p.stage.iter().all(|z| *z >= p.bed_elevation - 1e-9),
            "{}",
            p.name
        );
    }
    let split = out
        .junctions
        .iter()
        .find(|j| j.junction == "Split")
        .expect("Split");
    let view = crate::forecast::splits::view(split, false);
    let share = |name: &str| {
        view.ends
            .iter()
            .find(|e| e.channel == name)
            .map(|e| e.share.clone())
            .expect("end")
    };
    let (path, middle) = (share("Floodplain path"), share("Middle"));
    let at = |s: &[Option<f64>], k: usize| s[k].unwrap_or(0.0);
    let peak = (0..path.len())
        .max_by(|&a, &b| at(&path, a).total_cmp(&at(&path, b)))
        .expect("outputs");
    let last = path.len() - 1;
    println!(
        "floodplain path share: start {:.4}, peak {:.3}, end {:.4}",
        at(&path, 0),
        at(&path, peak),
        at(&path, last)
    );
    assert!(at(&path, 0) < 1e-3, "dry at first: {:?}", path[0]);
    assert!(at(&path, peak) > 0.05, "wet in the flood: {:?}", path[peak]);
    assert!(at(&path, last) < 0.02, "dry again: {:?}", path[last]);
    // What leaves Split is what arrives less what the junction's storage
    // takes: the leaving shares add up to the whole in steady flow (start
    // and end), and fall short by the storage rate while the flood rises
    // (or exceed it by its release as it falls): 7.7 % at most here, early
    // in the rise when the through-flow is small.
    let sum = |k: usize| at(&path, k) + at(&middle, k);
    assert!((sum(0) - 1.0).abs() < 1e-3, "{}", sum(0));
    assert!((sum(last) - 1.0).abs() < 1e-3, "{}", sum(last));
    for k in 0..path.len() {
        assert!(sum(k) > 0.85 && sum(k) < 1.15, "shares at {k}: {}", sum(k));
    }
}

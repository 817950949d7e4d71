//! Reference checks for cross-section geometry, Manning and ratings against
//! sources outside this project: a textbook worked example, closed-form
//! geometry, hand calculations and published formulas. Each check names its
//! source beside it. All section names are invented.

use reachcast::engine::GRAVITY;
use reachcast::engine::manning::{critical_depth, froude, manning_discharge, normal_depth};
use reachcast::engine::props::Hydraulics;
use reachcast::engine::rating::{RatingCurve, fit_power_segment};
use reachcast::engine::section::{
    CrossSection, PropertyTable, SectionGeometry, StorageZone, build_nodes,
};

const FT: f64 = 0.3048;

fn section(name: &str, geometry: SectionGeometry) -> CrossSection {
    CrossSection {
        name: name.to_owned(),
        chainage: 0.0,
        geometry,
    }
}

/// An open trapezoid (no height given); side slope 0 is a rectangle.
fn trapezoid(bed_elevation: f64, bottom_width: f64, side_slope: f64, n: f64) -> SectionGeometry {
    SectionGeometry::Trapezoid {
        bed_elevation,
        bottom_width,
        side_slope,
        n,
        height: None,
    }
}

fn table(name: &str, geometry: SectionGeometry) -> PropertyTable {
    PropertyTable::from_section(&section(name, geometry)).expect("test geometry is valid")
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

/// Closed-form trapezoid: area, wetted perimeter, top width, conveyance.
/// Textbook geometry (common practice): A = (b + m y) y, P = b + 2 y √(1 + m²),
/// T = b + 2 m y, K = (1/n) A (A/P)^(2/3).
fn trapezoid_exact(b: f64, m: f64, n: f64, y: f64) -> (f64, f64, f64, f64) {
    let a = (b + m * y) * y;
    let p = b + 2.0 * y * (1.0 + m * m).sqrt();
    let t = b + 2.0 * m * y;
    (a, p, t, a * (a / p).powf(2.0 / 3.0) / n)
}

/// Worked example for normal depth in a trapezoidal channel: Chow (1959),
/// Open-Channel Hydraulics, b = 20 ft, side slopes 2:1, S0 = 0.0016,
/// n = 0.025, Q = 400 ft³/s, y_n ≈ 3.36 ft (value from memory).
///
/// Unit conversion: US-customary Manning is Q = (1.486/n) A R^(2/3) S^(1/2)
/// and 1.486 ≈ 3.2808^(1/3) (ft per m, to the one-third power). Writing the
/// SI equation in feet multiplies the right side by exactly 3.2808^(1/3), so
/// the same n gives the same depth in both systems. Hence in SI: b = 6.096 m,
/// Q = 400 × 0.3048³ = 11.3267 m³/s, same n and S0, y_n ≈ 3.36 × 0.3048 =
/// 1.024 m. The published depth is rounded to 0.01 ft, and 1.486 differs
/// from 3.2808^(1/3) = 1.48592 by 5 parts in 10⁵, so we allow ±0.01 ft.
#[test]
fn chow_trapezoid_normal_depth_in_si() {
    // The conversion argument itself: 1.486 is 3.2808^(1/3) to 4 digits.
    assert!(((1.0 / FT).cbrt() - 1.486).abs() < 5e-4);

    let q = 400.0 * FT * FT * FT;
    assert!((q - 11.327).abs() < 1e-3);
    let bed = 100.0;
    let geometry = trapezoid(bed, 20.0 * FT, 2.0, 0.025);
    let t = table("design-cut", geometry);
    let z = normal_depth(&t, q, 0.0016).expect("converges");
    let y_ft = (z - bed) / FT;
    assert!((y_ft - 3.36).abs() <= 0.01, "y_n = {y_ft} ft");

    // The same channel described by survey points (3 m banks) must agree.
    let top = 3.0;
    let run = 2.0 * top;
    let b = 20.0 * FT;
    let surveyed = SectionGeometry::StationElevation {
        points: vec![
            [0.0, bed + top],
            [run, bed],
            [run + b, bed],
            [2.0 * run + b, bed + top],
        ],
        left_bank: 0.0,
        right_bank: 2.0 * run + b,
        n_left: 0.025,
        n_channel: 0.025,
        n_right: 0.025,
        storage: vec![],
    };
    let z2 = normal_depth(&table("design-cut-surveyed", surveyed), q, 0.0016).expect("converges");
    assert!((z2 - z).abs() < 1e-4, "{z} vs {z2}");
}

/// Table properties of a trapezoid and a rectangle vs the closed-form
/// geometry above (common practice). Areas, perimeter and conveyance are
/// exact at grid rows and linearly interpolated between them, so we allow a
/// relative error of 1e-4. Top width is the mean over one grid interval, so
/// it may differ from the exact width by up to 2 m Δz (m = side slope).
#[test]
fn table_matches_closed_form_trapezoid_and_rectangle() {
    for (b, m) in [(6.0, 1.5), (8.0, 0.0), (0.0, 2.0)] {
        let n = 0.03;
        let t = table("shape-check", trapezoid(20.0, b, m, n));
        for y in [0.137, 0.5, 1.0, 2.345, 7.5, 14.0, 25.0] {
            let p = t.props(20.0 + y);
            let (a, per, top, k) = trapezoid_exact(b, m, n, y);
            assert!(rel(p.flow_area, a) < 1e-4, "b={b} m={m} y={y}");
            assert!(rel(p.storage_area, a) < 1e-4);
            assert!(rel(p.wetted_perimeter, per) < 1e-4);
            assert!((p.flow_top_width - top).abs() <= 2.0 * m * t.spacing() + 1e-9);
            assert!(rel(p.conveyance, k) < 1e-4, "K {} vs {k}", p.conveyance);
            // dK/dz against a centred difference of the closed form.
            let h = 1e-4;
            let dk =
                (trapezoid_exact(b, m, n, y + h).3 - trapezoid_exact(b, m, n, y - h).3) / (2.0 * h);
            assert!(
                rel(p.dconveyance_dz, dk) < 1e-2,
                "dK/dz {} vs {dk}",
                p.dconveyance_dz
            );
            assert!(!p.extrapolated);
        }
    }
}

/// A compound section: trapezoidal main channel between banks at stations 20
/// and 32 and flat overbanks rising to 104 m at the ends. Composite
/// conveyance is the sum of the sub-section conveyances with vertical
/// division lines at the bank stations that are not part of the wetted
/// perimeter (common practice). Hand calculation at z = 103 m:
///
/// * channel (stations 20–32): trapezoid 10 m bottom at 100 m, sides 1:2
///   (H:V) up to 102 m, then 12 m wide: A = (10 + 12)/2 × 2 + 12 × 1 = 34 m²,
///   P = 10 + 2 √5 = 14.4721 m (the division lines are not counted);
/// * each overbank: flat 18 m at 102 m plus the lower half of a side rising
///   2 m over 2 m to 104 m: A = 18 × 1 + ½ × 1 × 1 = 18.5 m²,
///   P = 18 + √2 = 19.4142 m.
fn compound(storage: Vec<StorageZone>) -> SectionGeometry {
    SectionGeometry::StationElevation {
        points: vec![
            [0.0, 104.0],
            [2.0, 102.0],
            [20.0, 102.0],
            [21.0, 100.0],
            [31.0, 100.0],
            [32.0, 102.0],
            [50.0, 102.0],
            [52.0, 104.0],
        ],
        left_bank: 20.0,
        right_bank: 32.0,
        n_left: 0.06,
        n_channel: 0.03,
        n_right: 0.06,
        storage,
    }
}

fn sub_k(n: f64, a: f64, p: f64) -> f64 {
    a * (a / p).powf(2.0 / 3.0) / n
}

#[test]
fn composite_conveyance_matches_hand_calculation() {
    let t = table("twin-meadow", compound(vec![]));
    let p = t.props(103.0);
    let (a_ch, p_ch) = (34.0, 10.0 + 2.0 * 5f64.sqrt());
    let (a_ob, p_ob) = (18.5, 18.0 + 2f64.sqrt());
    let k = sub_k(0.03, a_ch, p_ch) + 2.0 * sub_k(0.06, a_ob, p_ob);
    assert!(rel(p.flow_area, a_ch + 2.0 * a_ob) < 1e-6);
    assert!(rel(p.wetted_perimeter, p_ch + 2.0 * p_ob) < 1e-6);
    assert!(rel(p.conveyance, k) < 1e-6, "K {} vs {k}", p.conveyance);
    // Subdivision matters: one lumped section with the channel n would
    // report a different conveyance, so the check above can tell them apart.
    let lumped = sub_k(0.03, a_ch + 2.0 * a_ob, p_ch + 2.0 * p_ob);
    assert!(rel(lumped, k) > 0.05);

    // In-bank at 101.5 m: trapezoid with bottom 10 m and side slope 0.5.
    let p = t.props(101.5);
    let (a, per, _, k) = trapezoid_exact(10.0, 0.5, 0.03, 1.5);
    assert!(rel(p.flow_area, a) < 1e-6);
    assert!(rel(p.wetted_perimeter, per) < 1e-6);
    assert!(rel(p.conveyance, k) < 1e-4);

    // Normal depth where the hand conveyance carries the flow: Q = K √S.
    let slope: f64 = 0.0004;
    let q = (sub_k(0.03, a_ch, p_ch) + 2.0 * sub_k(0.06, a_ob, p_ob)) * slope.sqrt();
    let z = normal_depth(&t, q, slope).expect("converges");
    assert!((z - 103.0).abs() < 1e-3, "z = {z}");
}

/// The same section with the whole left overbank (stations 0–20) declared
/// storage-only: at 103 m it stores 18.5 m² more than it conveys, its width
/// counts in the storage top width only, and the conveyance loses the left
/// overbank term of the hand calculation above.
#[test]
fn storage_zone_stores_but_does_not_convey() {
    let t = table(
        "reed-pond",
        compound(vec![StorageZone {
            from: 0.0,
            to: 20.0,
        }]),
    );
    let p = t.props(103.0);
    let (a_ch, p_ch) = (34.0, 10.0 + 2.0 * 5f64.sqrt());
    let (a_ob, p_ob) = (18.5, 18.0 + 2f64.sqrt());
    assert!(rel(p.flow_area, a_ch + a_ob) < 1e-6);
    assert!(rel(p.storage_area, a_ch + 2.0 * a_ob) < 1e-6);
    assert!(rel(p.storage_top_width - p.flow_top_width, 19.0) < 1e-6);
    let k = sub_k(0.03, a_ch, p_ch) + sub_k(0.06, a_ob, p_ob);
    assert!(rel(p.conveyance, k) < 1e-6);
}

/// Critical depth in a rectangle: y_c = (q²/g)^(1/3) with q = Q/b, the
/// common textbook formula from Fr = 1.
#[test]
fn rectangle_critical_depth_matches_formula() {
    let b = 5.0;
    let t = table("flume", trapezoid(2.0, b, 0.0, 0.014));
    for q in [0.5, 20.0, 300.0] {
        let yc = ((q / b) * (q / b) / GRAVITY).cbrt();
        let z = critical_depth(&t, q).expect("converges");
        assert!(rel(z - 2.0, yc) < 1e-6, "Q={q}: {} vs {yc}", z - 2.0);
        assert!((froude(&t, z, q).expect("finite") - 1.0).abs() < 1e-5);
    }
}

/// Manning's equation itself (common practice): a 2 m deep, 10 m wide
/// rectangle has A = 20 m², P = 14 m, R = 10/7 m; with n = 0.025 and
/// S = 0.001, Q = (1/0.025) × 20 × (10/7)^(2/3) × √0.001 = 32.1 m³/s
/// (hand calculation: (10/7)^(2/3) = 1.2685, √0.001 = 0.031623).
#[test]
fn manning_discharge_hand_calculation() {
    let q = manning_discharge(0.025, 20.0, 10.0 / 7.0, 0.001).expect("valid");
    assert!((q - 40.0 * 20.0 * 1.2685 * 0.031623).abs() < 0.01, "{q}");
}

/// Power rating fitted to points on a known curve Q = C (h − e)^b
/// (the standard rating form, common practice) recovers C, e and b; with
/// ±1 % multiplicative noise it still recovers them closely.
#[test]
fn rating_fit_recovers_known_curve() {
    let (c, e, b) = (23.0, 41.2, 1.55);
    let stages: Vec<f64> = (0..25).map(|i| 41.5 + 0.15 * i as f64).collect();
    let exact: Vec<(f64, f64)> = stages.iter().map(|&h| (h, c * (h - e).powf(b))).collect();
    let fit = fit_power_segment(&exact).expect("fits");
    assert!((fit.b - b).abs() < 1e-4, "{fit:?}");
    assert!((fit.e - e).abs() < 1e-4, "{fit:?}");
    assert!(rel(fit.c, c) < 1e-3, "{fit:?}");
    assert!(fit.r_squared > 0.999_999);

    // Deterministic noise in [−1 %, +1 %] from a linear congruential generator.
    let mut state: u64 = 0x2545_f491_4f6c_dd1d;
    let noisy: Vec<(f64, f64)> = exact
        .iter()
        .map(|&(h, q)| {
            state = state
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            let u = (state >> 11) as f64 / (1u64 << 53) as f64;
            (h, q * (1.0 + 0.02 * (u - 0.5)))
        })
        .collect();
    let fit = fit_power_segment(&noisy).expect("fits");
    assert!(fit.rmse_log > 1e-3 && fit.rmse_log < 0.01, "{fit:?}");
    assert!(fit.max_relative_error < 0.03, "{fit:?}");
    assert!((fit.b - b).abs() < 0.05, "{fit:?}");
    assert!((fit.e - e).abs() < 0.05, "{fit:?}");
    // The fitted curve stays within 2 % of the true one over the data range.
    let curve = RatingCurve::Power {
        segments: vec![fit.segment()],
    };
    for &(h, _) in &exact {
        let q_true = c * (h - e).powf(b);
        assert!(rel(curve.discharge(h).expect("ok"), q_true) < 0.02);
    }
}

/// Under Manning control in a wide rectangular channel, Q = (B √S / n) y^(5/3),
/// so a rating fitted to normal-depth stages has b ≈ 5/3 and e ≈ bed
/// elevation (follows from Manning's equation; see Kennedy 1984, USGS TWRI
/// 3-A10, value from memory). With B = 1000 m the finite width (R slightly
/// below y) lowers b by well under 0.02 for depths up to 5 m.
#[test]
fn wide_rectangle_rating_exponent_is_five_thirds() {
    let (width, n, slope, bed) = (1000.0, 0.035, 0.0005, 50.0);
    let t = table("broad-flat", trapezoid(bed, width, 0.0, n));
    let points: Vec<(f64, f64)> = (1..=20)
        .map(|i| {
            let q = 50.0 * 1.3f64.powi(i);
            (normal_depth(&t, q, slope).expect("converges"), q)
        })
        .collect();
    let fit = fit_power_segment(&points).expect("fits");
    assert!((fit.b - 5.0 / 3.0).abs() < 0.02, "{fit:?}");
    assert!((fit.e - bed).abs() < 0.02, "{fit:?}");
    assert!(rel(fit.c, width * slope.sqrt() / n) < 0.03, "{fit:?}");
}

/// Above the highest surveyed point the section is closed by vertical walls
/// at its end stations: area grows by top width × Δz, the perimeter by 2 Δz,
/// and the properties are flagged as extrapolated (geometry, common
/// practice). The flag is also set between the lower and the higher end,
/// where the lower end's wall already holds water.
#[test]
fn vertical_wall_extension_is_flagged() {
    let t = table(
        "lopsided",
        SectionGeometry::StationElevation {
            points: vec![[0.0, 13.0], [5.0, 10.0], [15.0, 10.0], [20.0, 12.0]],
            left_bank: 5.0,
            right_bank: 15.0,
            n_left: 0.05,
            n_channel: 0.03,
            n_right: 0.05,
            storage: vec![],
        },
    );
    assert!(!t.props(11.99).extrapolated);
    assert!(t.props(12.5).extrapolated);
    let at_top = t.props(13.0);
    for dz in [0.5, 1.0, 30.0] {
        let p = t.props(13.0 + dz);
        assert!(p.extrapolated);
        assert!(rel(p.storage_area, at_top.storage_area + 20.0 * dz) < 1e-9);
        assert!(rel(p.wetted_perimeter, at_top.wetted_perimeter + 2.0 * dz) < 1e-9);
        assert!((p.storage_top_width - 20.0).abs() < 1e-9);
        assert!(p.conveyance > at_top.conveyance);
    }
    // Hand calculation at 12.5 m (2.5 m above the flat bed; the right wall is
    // wet 0.5 m above its 12 m end point but adds no width): flat bed
    // 10 × 2.5 = 25; left side (5 m run over 3 m rise) wet 2.5 × 5/3 m wide,
    // a triangle of ½ × 4.1667 × 2.5 = 5.2083; right side fully wet,
    // 5 × (12.5 − mean ground 11) = 7.5. Total 37.708 m².
    let p = t.props(12.5);
    let a = 25.0 + 0.5 * 2.5 * (2.5 * 5.0 / 3.0) + 5.0 * (12.5 - 11.0);
    assert!(rel(p.storage_area, a) < 1e-4, "{} vs {a}", p.storage_area);
}

/// Interpolated nodes between two rectangles carry the linearly interpolated
/// bed and, at equal depth, linearly interpolated area (for rectangles the
/// width interpolates, so A = B(w) y exactly: geometry).
#[test]
fn interpolated_nodes_between_rectangles() {
    let a = CrossSection {
        name: "upper".into(),
        chainage: 1000.0,
        geometry: trapezoid(10.0, 30.0, 0.0, 0.03),
    };
    let b = CrossSection {
        name: "lower".into(),
        chainage: 2000.0,
        geometry: trapezoid(9.0, 50.0, 0.0, 0.03),
    };
    let nodes = build_nodes(&[a, b], 300.0).expect("valid");
    assert_eq!(nodes.len(), 5);
    let mid = &nodes[2];
    assert!((mid.chainage - 1500.0).abs() < 1e-9);
    assert!((mid.bed_elevation() - 9.5).abs() < 1e-12);
    let p = mid.props(9.5 + 2.0);
    assert!(rel(p.storage_area, 40.0 * 2.0) < 1e-9);
}

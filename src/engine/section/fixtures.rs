//! Sections shared by the unit tests of the section modules.

use super::{CrossSection, GeometryError, SectionGeometry};

pub(super) fn xs(name: &str, chainage: f64, geometry: SectionGeometry) -> CrossSection {
    CrossSection {
        name: name.to_owned(),
        chainage,
        geometry,
    }
}

pub(super) fn rect(width: f64, bed: f64, n: f64) -> SectionGeometry {
    SectionGeometry::Trapezoid {
        bed_elevation: bed,
        bottom_width: width,
        side_slope: 0.0,
        n,
        height: None,
    }
}

pub(super) fn profile(points: Vec<[f64; 2]>, left: f64, right: f64) -> SectionGeometry {
    SectionGeometry::StationElevation {
        points,
        left_bank: left,
        right_bank: right,
        n_left: 0.05,
        n_channel: 0.03,
        n_right: 0.05,
        storage: vec![],
    }
}

pub(super) fn v_profile() -> SectionGeometry {
    profile(vec![[0.0, 12.0], [10.0, 10.0], [20.0, 12.0]], 5.0, 15.0)
}

pub(super) fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs().max(1e-12)
}

pub(super) fn err(geometry: SectionGeometry) -> GeometryError {
    match xs("xs-test", 0.0, geometry).validate() {
        Err(e) => e,
        Ok(()) => panic!("expected a validation error"),
    }
}

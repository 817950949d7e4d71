//! Analytic sections for the engine's unit tests: closed-form Manning
//! geometry (common practice), so solvers are tested without property
//! tables.

use crate::engine::props::{Hydraulics, Props};

/// Properties of a section whose whole wetted area conveys (flow and
/// storage areas coincide).
fn conveying(z: f64, area: f64, top_width: f64, perimeter: f64, k: (f64, f64)) -> Props {
    Props {
        z,
        flow_area: area,
        storage_area: area,
        flow_top_width: top_width,
        storage_top_width: top_width,
        wetted_perimeter: perimeter,
        conveyance: k.0,
        dconveyance_dz: k.1,
        extrapolated: false,
    }
}

/// Rectangular channel of width `b`, Manning `n`, hydraulic radius taken
/// as the true A/P (not the wide-channel approximation).
pub(crate) struct Rect {
    pub(crate) bed: f64,
    pub(crate) width: f64,
    pub(crate) n: f64,
    /// Bank height above bed: above it the section is extended with
    /// vertical walls and flagged as extrapolated.
    pub(crate) bank: f64,
}

impl Rect {
    pub(crate) fn new(bed: f64, width: f64, n: f64, bank: f64) -> Self {
        Self {
            bed,
            width,
            n,
            bank,
        }
    }
}

impl Hydraulics for Rect {
    fn bed_elevation(&self) -> f64 {
        self.bed
    }
    fn props(&self, z: f64) -> Props {
        let h = (z - self.bed).max(0.0);
        let a = self.width * h;
        let p = self.width + 2.0 * h;
        let k = if h > 0.0 {
            a.powf(5.0 / 3.0) / p.powf(2.0 / 3.0) / self.n
        } else {
            0.0
        };
        // dK/dh = K (5/3 · B/A − 2/3 · 2/P)
        let dk = if h > 0.0 {
            k * (5.0 / 3.0 * self.width / a - 4.0 / 3.0 / p)
        } else {
            0.0
        };
        Props {
            extrapolated: h > self.bank,
            ..conveying(z, a, self.width, p, (k, dk))
        }
    }
}

/// V-shaped section (zero width at the bed) to exercise drying.
pub(crate) struct Vee {
    pub(crate) bed: f64,
    pub(crate) side: f64,
    pub(crate) n: f64,
}

impl Hydraulics for Vee {
    fn bed_elevation(&self) -> f64 {
        self.bed
    }
    fn props(&self, z: f64) -> Props {
        let h = (z - self.bed).max(0.0);
        let a = self.side * h * h;
        let t = 2.0 * self.side * h;
        let p = 2.0 * h * (1.0 + self.side * self.side).sqrt();
        let (k, dk) = if h > 0.0 {
            let k = a.powf(5.0 / 3.0) / p.powf(2.0 / 3.0) / self.n;
            (k, k * (5.0 / 3.0 * 2.0 / h - 2.0 / 3.0 / h))
        } else {
            (0.0, 0.0)
        };
        conveying(z, a, t, p, (k, dk))
    }
}

/// Wide rectangle: K = B h^{5/3} / n (hydraulic radius ≈ depth).
pub(crate) struct Wide {
    pub(crate) bed: f64,
    pub(crate) width: f64,
    pub(crate) n: f64,
}

impl Hydraulics for Wide {
    fn bed_elevation(&self) -> f64 {
        self.bed
    }
    fn props(&self, z: f64) -> Props {
        let h = (z - self.bed).max(0.0);
        let k = (
            self.width * h.powf(5.0 / 3.0) / self.n,
            5.0 / 3.0 * self.width * h.powf(2.0 / 3.0) / self.n,
        );
        conveying(z, self.width * h, self.width, self.width, k)
    }
}

/// `n_nodes` rectangles `dx` apart on a uniform bed `slope`, bed 10 m at
/// the first node, Manning's n 0.035, banks 50 m high.
pub(crate) fn uniform_rect(
    n_nodes: usize,
    dx: f64,
    slope: f64,
    width: f64,
) -> (Vec<f64>, Vec<Rect>) {
    let x: Vec<f64> = (0..n_nodes).map(|i| i as f64 * dx).collect();
    let nodes = x
        .iter()
        .map(|&xi| Rect {
            bed: 10.0 - slope * xi,
            width,
            n: 0.035,
            bank: 50.0,
        })
        .collect();
    (x, nodes)
}

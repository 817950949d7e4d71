//! A section seen with every Manning's n multiplied by one factor, without
//! rebuilding its property table: Manning's conveyance is K = A R^(2/3) / n
//! for each sub-section, so multiplying every n by `f` divides K and
//! dK/dz by `f` and leaves areas, widths and perimeters as they are.
//! Ensemble members use it to vary roughness on tables built once.

use super::props::{Hydraulics, Props};

/// `inner` with all its Manning's n multiplied by a factor.
#[derive(Debug, Clone, Copy)]
pub struct Roughened<'a, H> {
    inner: &'a H,
    inv_factor: f64,
}

impl<'a, H> Roughened<'a, H> {
    /// `factor` must be finite and positive (the caller's duty; an
    /// ensemble's spreads are validated with the reach).
    pub fn new(inner: &'a H, factor: f64) -> Self {
        Self {
            inner,
            inv_factor: 1.0 / factor,
        }
    }
}

impl<H: Hydraulics> Hydraulics for Roughened<'_, H> {
    fn bed_elevation(&self) -> f64 {
        self.inner.bed_elevation()
    }

    #[inline]
    fn props(&self, z: f64) -> Props {
        let mut p = self.inner.props(z);
        p.conveyance *= self.inv_factor;
        p.dconveyance_dz *= self.inv_factor;
        p
    }

    #[inline(always)]
    fn props_into(&self, z: f64, out: &mut Props) {
        self.inner.props_into(z, out);
        out.conveyance *= self.inv_factor;
        out.dconveyance_dz *= self.inv_factor;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::section::{CrossSection, PropertyTable, SectionGeometry};

    fn rectangle(n: f64) -> PropertyTable {
        let s = CrossSection {
            name: "R".into(),
            chainage: 0.0,
            geometry: SectionGeometry::Trapezoid {
                bed_elevation: 0.0,
                bottom_width: 20.0,
                side_slope: 0.0,
                n,
                height: None,
            },
        };
        PropertyTable::from_section(&s).expect("valid section")
    }

    /// Manning (1891): K ∝ 1/n, so the table of n = 0.045 and the table of
    /// n = 0.03 seen with factor 1.5 give the same conveyance.
    #[test]
    fn scaling_n_scales_conveyance_inversely() {
        let (base, rough) = (rectangle(0.03), rectangle(0.045));
        let seen = Roughened::new(&base, 1.5);
        for z in [0.3, 1.0, 2.5, 4.0] {
            let (a, b) = (seen.props(z), rough.props(z));
            assert!((a.conveyance / b.conveyance - 1.0).abs() < 1e-9, "z = {z}");
            assert!((a.dconveyance_dz / b.dconveyance_dz - 1.0).abs() < 1e-9);
            assert_eq!(a.flow_area, base.props(z).flow_area);
        }
        let same = Roughened::new(&base, 1.0);
        assert_eq!(same.props(1.7), base.props(1.7), "factor 1 is exact");
    }
}

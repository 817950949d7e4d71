//! The contract between cross-section geometry and the routing solvers.
//!
//! A solver never looks at survey points. It asks a [`Hydraulics`] value for the
//! properties of a computational node at a trial water-surface elevation `z`
//! and gets a [`Props`] back. `section::PropertyTable` is the production
//! implementation (precomputed tables with O(1) lookup); tests may implement
//! the trait analytically (for example a wide rectangle) to check solvers
//! against closed-form solutions.
//!
//! All quantities are SI: metres, square metres, m³/s.

/// Hydraulic properties of one section at one water-surface elevation.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Props {
    /// Water-surface elevation these properties belong to (m).
    pub z: f64,
    /// Conveying flow area (m²): the part of the section that carries discharge.
    pub flow_area: f64,
    /// Total wetted area including storage-only zones (m²): what continuity counts.
    pub storage_area: f64,
    /// Top width of the conveying part (m).
    pub flow_top_width: f64,
    /// Top width including storage-only zones (m): d(storage_area)/dz.
    pub storage_top_width: f64,
    /// Wetted perimeter of the conveying part (m).
    pub wetted_perimeter: f64,
    /// Composite Manning conveyance K (m³/s): Q = K √S_f. Sum of the
    /// sub-section conveyances (left overbank, channel, right overbank).
    pub conveyance: f64,
    /// dK/dz (m²/s), for Newton Jacobians.
    pub dconveyance_dz: f64,
    /// True when `z` is above the highest surveyed point and the section was
    /// extended with vertical walls.
    pub extrapolated: bool,
}

impl Props {
    /// Mean velocity for discharge `q` (m/s); zero when the section is dry.
    pub fn velocity(&self, q: f64) -> f64 {
        if self.flow_area > 0.0 {
            q / self.flow_area
        } else {
            0.0
        }
    }

    /// Hydraulic depth A/T (m); zero when dry.
    pub fn hydraulic_depth(&self) -> f64 {
        if self.flow_top_width > 0.0 {
            self.flow_area / self.flow_top_width
        } else {
            0.0
        }
    }

    /// Froude number V / √(g D) for discharge `q`; zero when dry.
    pub fn froude(&self, q: f64) -> f64 {
        let d = self.hydraulic_depth();
        if d > 0.0 {
            self.velocity(q).abs() / (crate::engine::GRAVITY * d).sqrt()
        } else {
            0.0
        }
    }
}

/// Anything that can report [`Props`] for a water-surface elevation.
///
/// Implementations must be total: any finite `z` returns finite properties
/// (zero areas and conveyance at or below the bed), and the storage area
/// must be non-decreasing in `z` so continuity has a unique solution.
pub trait Hydraulics {
    /// Lowest bed elevation of the section (m).
    fn bed_elevation(&self) -> f64;
    /// Properties at water-surface elevation `z` (m).
    fn props(&self, z: f64) -> Props;

    /// [`Hydraulics::props`] written into `out`. The solver's inner loop
    /// uses it: an implementation that writes the fields one by one into
    /// the caller's slot spares building a `Props` on the stack and copying
    /// it, a copy whose wide reads of just-written narrow fields stall the
    /// processor (store forwarding fails).
    #[inline(always)]
    fn props_into(&self, z: f64, out: &mut Props) {
        *out = self.props(z);
    }
}

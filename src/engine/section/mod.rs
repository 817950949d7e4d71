//! Cross-sections: survey geometry, validation, and precomputed property tables.
//!
//! A routing solver evaluates section properties millions of times per run, so
//! the survey is turned once into a [`PropertyTable`]: a uniform grid in
//! water-surface elevation holding exact areas, wetted perimeter and composite
//! conveyance at every row. A lookup is then index arithmetic plus a short
//! polynomial evaluation and never allocates.
//!
//! Conventions (common practice unless stated otherwise):
//!
//! * Stations increase from the left bank to the right bank looking downstream;
//!   chainage increases downstream.
//! * Conveyance is subdivided at the bank stations into left overbank, main
//!   channel and right overbank, each with its own Manning's n. The vertical
//!   division lines carry no shear and are not part of the wetted perimeter.
//! * Storage-only zones hold water (they count in storage area and top width,
//!   which continuity uses) but convey nothing.
//! * Every part of the profile whose ground lies below the water surface is
//!   treated as wet, even a pocket cut off from the channel by higher ground.
//!   This is a common simplification; it overstates storage at low stages in
//!   sections with disconnected low areas.
//! * Where the water rises above an end point of the survey, the section is
//!   closed by a vertical frictional wall at that end. Properties that depend
//!   on such a wall are flagged
//!   [`Props::extrapolated`](crate::engine::props::Props::extrapolated).
//!
//! Files: `types` (sections and [`GeometryError`]), `validate` (the input
//! checks), `profile` (the survey as straight ground pieces and its exact
//! wet geometry), `table` ([`PropertyTable`] and its lookup) and `nodes`
//! ([`build_nodes`], blending tables between surveyed sections).

#[cfg(test)]
mod fixtures;
mod nodes;
mod profile;
mod table;
mod types;
mod validate;

pub use nodes::{MAX_NODES, Node, build_nodes, build_nodes_with};
pub use profile::UNBOUNDED_TRAPEZOID_DEPTH;
pub use table::{
    DEFAULT_HEADROOM, DEFAULT_MIN_ROWS, DEFAULT_SPACING, MAX_TABLE_ROWS, PropertyTable,
    TableOptions,
};
pub use types::{CrossSection, GeometryError, SectionGeometry, StorageZone};
pub use validate::validate_reach;

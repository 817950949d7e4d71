//! The numerical core: cross-sections, Manning, ratings and routing.
//!
//! Everything here is pure: no I/O, no async, no clocks other than the
//! caller's, no database. Times are seconds (f64) from a reference instant
//! the caller chooses; all quantities are SI. The scheduler, the offline
//! `route` command and the tests call the same functions.

pub mod props;

/// Standard gravity (m/s²).
pub const GRAVITY: f64 = 9.806_65;
pub mod diffusive;
pub mod kinematic;
pub mod manning;
pub mod rating;
pub mod section;
pub mod series;

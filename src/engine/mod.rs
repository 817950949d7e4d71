//! The numerical core: cross-sections, Manning, ratings and routing.
//!
//! Everything here is pure: no I/O, no async, no clocks other than the
//! caller's, no database. Times are seconds (f64) from a reference instant
//! the caller chooses; all quantities are SI. The scheduler, the offline
//! `route` command and the tests call the same functions.
//!
//! Geometry: [`section`] turns surveys into property tables and nodes,
//! [`props`] is the contract solvers see ([`roughness`] varies its
//! Manning's n without a rebuild), [`manning`] and [`rating`] give
//! normal and critical depth and stage–discharge relations, [`series`]
//! holds time series. Routing: [`diffusive`] (the default) and
//! [`kinematic`] (a cross-check) share [`routing`] (the reach, laterals,
//! results, errors), `budget` (the volume budget) and [`diagnostics`]
//! (what a forecaster needs to judge a run).

pub mod props;

/// Standard gravity (m/s²).
pub const GRAVITY: f64 = 9.806_65;
mod budget;
pub mod diagnostics;
pub mod diffusive;
pub mod kinematic;
pub mod manning;
pub mod network;
pub mod rating;
mod roots;
pub mod roughness;
pub mod routing;
pub mod section;
pub mod series;
#[cfg(test)]
mod test_sections;

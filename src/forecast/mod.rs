//! From a reach description and an inflow to forecasts at points of
//! interest: the reach document format, inflow parsing, one routing run and
//! the threshold analysis. Pure code; the scheduler and the offline `route`
//! command add the I/O.

pub mod assemble;
pub mod cap;
pub mod document;
pub mod exceed;
pub mod export;
pub mod hydrograph;
pub mod inflow;
pub mod level;
pub mod record;
pub mod report;
pub mod run;
pub mod spec;
pub mod view;

//! From a reach description and an inflow to forecasts at points of
//! interest: the reach document format, the validated hydrograph and its
//! readers, inflow assembly, one routing run, how a stage trace relates to
//! each level, the typed run record, the forecast document and its CSV
//! table, and CAP planning and rendering. Pure code: the service layer
//! (`crate::service`) and the offline `route` command add the I/O.

pub mod assemble;
pub mod budget;
pub mod calibrate;
pub mod cap;
pub mod channels;
pub mod digest;
pub mod document;
pub mod ensemble;
pub mod exceed;
pub mod export;
pub mod hindcast;
pub mod hydrograph;
pub mod inflow;
pub mod level;
pub mod levels;
pub mod levels_csv;
pub mod multipliers;
pub mod network;
pub mod profile;
pub mod record;
pub mod report;
pub mod run;
pub mod spec;
pub mod splits;
pub mod traces;
pub mod verify;
pub mod view;

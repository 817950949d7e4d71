//! The service layer: the forecast cycle that runs each reach on a
//! schedule and when data arrive (`forecaster`, `cycle`), the exceedance
//! board it keeps (`board`), and the CAP messages it issues after each good
//! run (`alerts`). It joins the pure forecast code to the store; HTTP
//! handlers call it and nothing below calls it.

pub mod alerts;
pub mod backups;
pub mod board;
pub mod calibration;
mod cycle;
mod ensemble;
pub mod forecaster;
pub mod hindcast;
mod laterals;
pub mod preview;
pub mod retention;
mod verification_cache;
pub mod verifier;

pub use forecaster::{CycleError, Forecaster, RunSummary};

//! The integration tests: one test binary, one module per area, so the
//! crate and its dependencies are linked once, not once per file.
//!
//! `cargo test --test it MODULE::` runs one area (e.g. `ingest::`); the
//! browser tests (`dashboard::`) are ignored by default, see `dashboard.rs`.
//! `common` holds the set-up the areas share.

mod common;

mod backup;
mod bridge_levels;
mod calibrate_command;
mod calibration;
mod cap_reference;
mod cap_service;
mod cli_keys;
mod connections;
mod dashboard;
mod dashboard_js;
mod deploy_files;
mod durability;
mod engine_routing;
mod engine_sections;
mod faults;
mod forecast_cycle;
mod foundation;
mod hindcast;
mod inflow_traces;
mod ingest;
mod metrics;
mod networks;
mod openapi;
mod panel;
mod ratings;
mod retention;
mod route_command;
mod tributaries;
pub mod verification;

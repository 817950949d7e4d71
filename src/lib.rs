//! reachcast: advisory flood-stage forecasts along a river reach.
//!
//! The binary (`main.rs`) is glue over this library. Dependencies point one
//! way: `http` → `store` (and later `forecast`) → `engine`; the engine knows
//! nothing above it. See DEVELOPERS.md for the architecture.

pub mod app;
pub mod auth;
pub mod cli;
pub mod config;
pub mod demo;
pub mod engine;
pub mod forecast;
pub mod gauge;
pub mod http;
pub mod metrics;
pub mod offline;
pub mod row_error;
pub mod service;
pub mod store;
pub mod telemetry;
pub mod text;
pub mod wire_int;
pub mod wire_time;

/// The caution every forecast output carries.
pub const CAUTION: &str = "Advisory model output only. This is not an official warning. \
Follow official warnings and the instructions of local emergency authorities.";

//! Set-up shared by the integration tests: the real application on port 0
//! with a data directory of the test's choosing and quiet logs, requests
//! and checks of its answers, the real binary, invented reaches, files of
//! the repository and an XML tree for CAP and Atom.

pub mod answers;
pub mod app;
pub mod binary;
pub mod files;
pub mod reaches;
pub mod xml;

pub use answers::{assert_success, assert_wire_time, body_of, json_of, problem};
pub use app::{Keys, TestApp, make_key, open_store, spawn_app, spawn_app_with, test_config};
pub use reaches::{
    ReachApp, bridge_reach, gauge_body, reach_gauge, steady_discharge, triangular_flood,
};

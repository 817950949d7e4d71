//! Verification: how past forecasts compared with what the gauges later
//! saw. Pure functions over pairs of forecast and observed stage, grouped
//! by lead time, with the persistence forecast (the last observed stage
//! held) scored on the same pairs as the baseline every score is shown
//! beside.
//!
//! - [`pairs`]: forecast–observation pairs of one run at one gauged point,
//!   by lead-time band;
//! - [`scores`]: bias, MAE, RMSE, Nash–Sutcliffe and Kling–Gupta
//!   efficiency, and skill against a reference;
//! - [`contingency`]: the two-by-two table of a level reached or not, and
//!   POD, FAR, CSI and frequency bias;
//! - [`ensemble`]: CRPS of an ensemble and the rank of an observation
//!   among its members, and both from stored percentiles;
//! - [`moments`]: the mergeable running statistics every continuous score
//!   follows from;
//! - [`tally`]: one verification pass of a run at a point, by lead hour;
//! - [`correction`]: the error at the issue time carried forward, its
//!   decay fitted from the history, and the switch that turns it off;
//! - [`events`]: a run's crest and level outcomes once its window is seen;
//! - [`pass`]: one verification pass over the open forecasts of a reach;
//! - [`summary`]: the scores as served, by lead-time band and per level;
//! - [`report`]: the report of a reach per point of interest, JSON and CSV.

pub mod contingency;
pub mod correction;
pub mod ensemble;
pub mod events;
pub mod moments;
pub mod pairs;
pub mod pass;
pub mod report;
pub mod scores;
pub mod summary;
pub mod tally;

pub use pairs::Pair;

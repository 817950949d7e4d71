//! The invented demonstration: the Brindlemoor River reach, its upstream
//! gauge `upper-brindle`, and a synthetic storm replayed as live readings.
//!
//! Nothing here names a real river, place or gauge, and no real data is
//! used. On first start the storm is anchored ten hours in the past: the
//! readings of the rising limb so far are back-filled, the storm hydrograph
//! is uploaded as a forecaster's revised inflow, and from then on a reading
//! for "now" is posted every `demo.replay_secs`. On later starts the anchor
//! is recovered from the first stored reading, so the storm continues.

use std::time::Duration;

use chrono::{DateTime, Utc};
use tokio::sync::watch;

use crate::{
    auth::{NewKey, Role, generate_key, hash_secret},
    engine::{manning::normal_depth, rating::RatingCurve, section::PropertyTable},
    forecast::{
        hydrograph::Hydrograph,
        inflow::{self, Inflow},
        spec::ReachSpec,
        traces::Traces,
    },
    gauge::{
        GaugeSpec, Measures,
        readings::{NewReading, Quality},
    },
    service::Forecaster,
    store::{Store, StoreError},
};

/// Reach id of the demo.
pub const REACH_ID: &str = "brindlemoor";
/// Gauge id of the demo's upstream gauge.
pub const GAUGE_ID: &str = "upper-brindle";
/// Id of the built-in key the demo writes with (its secret is random and
/// never shown, so nobody can use it).
pub const DEMO_KEY_ID: &str = "demo";

const REACH_JSON: &str = include_str!("brindlemoor-reach.json");
const STORM_CSV: &str = include_str!("brindlemoor-inflow.csv");
/// How far into the storm the demo starts.
const START_INTO_STORM_H: i64 = 10;
/// Spacing of back-filled readings.
const BACKFILL_STEP_MIN: i64 = 5;

/// Why the demo could not be set up.
#[derive(Debug, thiserror::Error)]
pub enum DemoError {
    #[error("demo data is invalid: {0}")]
    Data(String),
    #[error(transparent)]
    Store(#[from] StoreError),
}

/// The demo reach description.
pub fn reach() -> Result<ReachSpec, DemoError> {
    ReachSpec::from_json(REACH_JSON).map_err(|e| DemoError::Data(e.to_string()))
}

/// The storm as (hours from its start, discharge m³/s).
fn storm() -> Result<Vec<(f64, f64)>, DemoError> {
    let rows = inflow::parse_csv(STORM_CSV.as_bytes())
        .map_err(|e| DemoError::Data(e.to_string()))?
        .series;
    let t0 = rows.start();
    Ok(rows
        .samples()
        .iter()
        .copied()
        .map(|(t, q)| ((t - t0).num_seconds() as f64 / 3600.0, q))
        .collect())
}

/// Storm discharge `hours` after its start (linear between samples, the
/// last value after the end).
fn storm_at(storm: &[(f64, f64)], hours: f64) -> f64 {
    match storm.iter().position(|&(h, _)| h >= hours) {
        Some(0) => storm[0].1,
        Some(i) => {
            let (h0, q0) = storm[i - 1];
            let (h1, q1) = storm[i];
            q0 + (q1 - q0) * (hours - h0) / (h1 - h0)
        }
        None => storm.last().map_or(0.0, |s| s.1),
    }
}

/// A stage–discharge table for the gauge section, from Manning's normal
/// depth at the reach's bed slope: what a hydrologist would fit from
/// gaugings at a channel-controlled site (invented, consistent with the
/// model).
fn gauge_rating(spec: &ReachSpec) -> Result<RatingCurve, DemoError> {
    let section = spec
        .sections
        .first()
        .ok_or_else(|| DemoError::Data("no sections".into()))?;
    let table = PropertyTable::from_section(section).map_err(|e| DemoError::Data(e.to_string()))?;
    let slope = 0.0008;
    let mut points: Vec<[f64; 2]> = Vec::new();
    for q in [
        0.5, 2.0, 5.0, 10.0, 20.0, 30.0, 50.0, 75.0, 100.0, 150.0, 200.0, 250.0, 300.0, 400.0,
        500.0, 700.0, 1000.0,
    ] {
        let z = normal_depth(&table, q, slope).map_err(|e| DemoError::Data(e.to_string()))?;
        if points.last().is_none_or(|p| z > p[0]) {
            points.push([(z * 1000.0).round() / 1000.0, q]);
        }
    }
    points.insert(0, [table.bed(), 0.0]);
    Ok(RatingCurve::Table { points })
}

/// Seeds the demo reach, gauge, key, back-filled readings and storm upload
/// if they are not there yet.
pub async fn seed(store: &Store) -> Result<(), DemoError> {
    let spec = reach()?;
    if store.find_key(DEMO_KEY_ID).await?.is_none() {
        let random = generate_key().map_err(|e| DemoError::Data(e.to_string()))?;
        let key = NewKey {
            id: DEMO_KEY_ID.to_owned(),
            token: String::new(),
            secret_hash: hash_secret(&random.token),
        };
        store
            .create_key(&key, "built-in demo replay", Role::Forecaster, &[])
            .await?;
    }
    if store.latest_reach(REACH_ID).await?.is_none() {
        store.put_reach(REACH_ID, &spec, None).await?;
    }
    if store.gauge(GAUGE_ID).await?.is_none() {
        let rating = gauge_rating(&spec)?;
        let bed = PropertyTable::from_section(&spec.sections[0])
            .map_err(|e| DemoError::Data(e.to_string()))?
            .bed();
        store
            .put_gauge(
                GAUGE_ID,
                &GaugeSpec {
                    name: "Upper Brindle gauge (invented)".into(),
                    reach: Some(REACH_ID.into()),
                    chainage_m: Some(0.0),
                    measures: Measures::Stage,
                    rating_curve: Some(rating),
                    stage_min_m: bed - 0.5,
                    stage_max_m: bed + 12.0,
                    max_rise_m_per_h: 2.0,
                    discharge_min_m3s: None,
                    discharge_max_m3s: None,
                },
                DEMO_KEY_ID,
            )
            .await?;
    }
    let storm = storm()?;
    let now = Utc::now();
    if anchor(store).await?.is_none() {
        // Whole minutes, so replayed and uploaded times line up.
        let start = DateTime::from_timestamp((now.timestamp() / 60) * 60, 0).unwrap_or(now)
            - chrono::Duration::hours(START_INTO_STORM_H);
        let rating = gauge_rating(&spec)?;
        let mut rows = Vec::new();
        let mut t = start;
        while t < now {
            rows.push(reading(&storm, &rating, start, t)?);
            t += chrono::Duration::minutes(BACKFILL_STEP_MIN);
        }
        store
            .ingest(
                GAUGE_ID,
                &rows,
                DEMO_KEY_ID,
                serde_json::json!({"demo": "backfill"}),
                0,
            )
            .await?;
        if store.newest_upload(REACH_ID, None).await?.is_none() {
            let series = Hydrograph::parse(
                storm
                    .iter()
                    .map(|&(h, q)| (start + chrono::Duration::seconds((h * 3600.0) as i64), q))
                    .collect(),
            )
            .map_err(|e| DemoError::Data(format!("demo storm: {}", e[0])))?;
            store
                .insert_upload(
                    REACH_ID,
                    &Inflow {
                        series,
                        traces: Traces::NONE,
                    },
                    "demo: synthetic storm hydrograph issued by the built-in demo forecaster",
                    DEMO_KEY_ID,
                    None,
                )
                .await?;
        }
    }
    Ok(())
}

/// The demo storm's start: the time of the gauge's first reading.
async fn anchor(store: &Store) -> Result<Option<DateTime<Utc>>, StoreError> {
    let rows = store
        .readings_for_forecast(GAUGE_ID, i64::MIN, i64::MAX)
        .await?;
    Ok(rows
        .first()
        .and_then(|r| DateTime::from_timestamp_millis(r.time_ms)))
}

fn reading(
    storm: &[(f64, f64)],
    rating: &RatingCurve,
    start: DateTime<Utc>,
    t: DateTime<Utc>,
) -> Result<NewReading, DemoError> {
    let hours = (t - start).num_seconds() as f64 / 3600.0;
    let q = storm_at(storm, hours);
    let stage = rating
        .stage(q)
        .map_err(|e| DemoError::Data(e.to_string()))?;
    Ok(NewReading {
        time_ms: t.timestamp_millis(),
        stage_m: Some((stage * 1000.0).round() / 1000.0),
        discharge_m3s: None,
        quality: Quality::Unchecked,
    })
}

/// Posts a reading for "now" every `every`, until shutdown.
pub fn spawn_replay(
    store: Store,
    forecaster: Forecaster,
    every: Duration,
    mut shutdown: watch::Receiver<bool>,
) {
    tokio::spawn(async move {
        let (Ok(spec), Ok(storm)) = (reach(), storm()) else {
            tracing::error!("demo data invalid; replay not started");
            return;
        };
        let Ok(rating) = gauge_rating(&spec) else {
            tracing::error!("demo rating invalid; replay not started");
            return;
        };
        loop {
            tokio::select! {
                () = tokio::time::sleep(every) => {}
                _ = shutdown.changed() => break,
            }
            let start = match anchor(&store).await {
                Ok(Some(a)) => a,
                Ok(None) => continue,
                Err(e) => {
                    tracing::warn!(error = %e, "demo replay: cannot read anchor");
                    continue;
                }
            };
            let now = Utc::now();
            match reading(&storm, &rating, start, now) {
                Ok(row) => {
                    match store
                        .ingest(
                            GAUGE_ID,
                            &[row],
                            DEMO_KEY_ID,
                            serde_json::json!({"demo": "replay"}),
                            0,
                        )
                        .await
                    {
                        Ok(_) => forecaster.gauge_updated(GAUGE_ID).await,
                        Err(e) => tracing::warn!(error = %e, "demo replay: reading not stored"),
                    }
                }
                Err(e) => tracing::warn!(error = %e, "demo replay: no reading"),
            }
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn demo_data_is_valid_and_invented() {
        let spec = reach().expect("valid");
        assert_eq!(spec.service.upstream_gauge.as_deref(), Some(GAUGE_ID));
        assert!(
            spec.description
                .as_deref()
                .is_some_and(|d| d.contains("invented"))
        );
        let storm = storm().expect("storm");
        assert!(storm.len() > 24);
    }

    #[test]
    fn rating_inverts_the_storm() {
        let spec = reach().expect("valid");
        let r = gauge_rating(&spec).expect("rating");
        for q in [25.0, 120.0, 320.0] {
            let z = r.stage(q).expect("stage");
            let back = r.discharge(z).expect("discharge");
            assert!((back - q).abs() / q < 1e-6, "{q} -> {z} -> {back}");
        }
    }

    #[test]
    fn storm_interpolates_and_holds() {
        let s = [(0.0, 10.0), (1.0, 20.0)];
        assert_eq!(storm_at(&s, 0.5), 15.0);
        assert_eq!(storm_at(&s, 5.0), 20.0);
        assert_eq!(storm_at(&s, -1.0), 10.0);
    }
}

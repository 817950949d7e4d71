//! The invented demonstration: the Brindlemoor River and its tributary
//! Moss Gill, a small network of three channels joined at Moss Foot; the
//! upstream gauge `upper-brindle`, the tributary gauge `moss-gill`, and a
//! synthetic storm replayed as live readings of both.
//!
//! Nothing here names a real river, place or gauge, and no real data is
//! used. On first start the storm is anchored ten hours in the past: the
//! readings of the rising limb so far are back-filled at both gauges, the
//! storm hydrographs are uploaded as a forecaster's revised inflows (the
//! reach's, and Moss Gill's as its `boundary`), and from then on a reading
//! for "now" is posted at each gauge every `demo.replay_secs`. On later
//! starts the anchor is recovered from the first stored reading, so the
//! storm continues.
//!
//! `brindlemoor-reach.json` is the main river alone, as a reach of one
//! channel with the same sections: the offline examples of `route` and
//! `calibrate` read it.

use std::time::Duration;

use chrono::{DateTime, Utc};
use tokio::sync::watch;

use crate::{
    auth::{NewKey, Role, generate_key, hash_secret},
    engine::{
        manning::normal_depth,
        rating::RatingCurve,
        section::{CrossSection, PropertyTable},
    },
    forecast::{
        channels::ChannelStart,
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

/// Gauge id of the demo's tributary gauge, on Moss Gill.
pub const TRIBUTARY_GAUGE_ID: &str = "moss-gill";
/// The tributary boundary (channel) the gauge feeds.
pub const TRIBUTARY: &str = "Moss Gill";

const REACH_JSON: &str = include_str!("brindlemoor-network.json");
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

/// One of the demo's gauges: where it is, and how it sees the storm.
struct DemoGauge {
    id: &'static str,
    name: &'static str,
    /// The tributary it feeds (`None`: the reach's inflow).
    boundary: Option<&'static str>,
    /// Bed slope of its channel, for its rating (invented, consistent with
    /// the sections).
    slope: f64,
    /// The share of the storm's discharge it sees, and how many hours
    /// earlier (a smaller catchment answers sooner). Moss Gill's fallback
    /// hydrograph in the network file is the storm seen the same way.
    share: f64,
    lead_h: f64,
}

const GAUGES: [DemoGauge; 2] = [
    DemoGauge {
        id: GAUGE_ID,
        name: "Upper Brindle gauge (invented)",
        boundary: None,
        slope: 0.0008,
        share: 1.0,
        lead_h: 0.0,
    },
    DemoGauge {
        id: TRIBUTARY_GAUGE_ID,
        name: "Moss Gill gauge (invented)",
        boundary: Some(TRIBUTARY),
        slope: 0.0015,
        share: 0.2,
        lead_h: 2.0,
    },
];

impl DemoGauge {
    /// The gauge's section: the first of the channel it feeds.
    fn section<'a>(&self, spec: &'a ReachSpec) -> Result<&'a CrossSection, DemoError> {
        let section = match self.boundary {
            None => spec.inflow_section(),
            Some(name) => spec
                .channels
                .iter()
                .find(
                    |c| matches!(&c.upstream, ChannelStart::Tributary { name: n, .. } if n == name),
                )
                .and_then(|c| c.sections.first()),
        };
        section.ok_or_else(|| DemoError::Data(format!("no section for gauge {}", self.id)))
    }

    /// Discharge the gauge sees `hours` after the storm's start.
    fn discharge(&self, storm: &[(f64, f64)], hours: f64) -> f64 {
        self.share * storm_at(storm, hours + self.lead_h)
    }

    /// A stage–discharge table for the gauge section, from Manning's normal
    /// depth at its channel's bed slope: what a hydrologist would fit from
    /// gaugings at a channel-controlled site (invented, consistent with the
    /// model).
    fn rating(&self, spec: &ReachSpec) -> Result<RatingCurve, DemoError> {
        let table = PropertyTable::from_section(self.section(spec)?)
            .map_err(|e| DemoError::Data(e.to_string()))?;
        let mut points: Vec<[f64; 2]> = Vec::new();
        for q in [
            0.5, 2.0, 5.0, 10.0, 20.0, 30.0, 50.0, 75.0, 100.0, 150.0, 200.0, 250.0, 300.0, 400.0,
            500.0, 700.0, 1000.0,
        ] {
            let z =
                normal_depth(&table, q, self.slope).map_err(|e| DemoError::Data(e.to_string()))?;
            if points.last().is_none_or(|p| z > p[0]) {
                points.push([(z * 1000.0).round() / 1000.0, q]);
            }
        }
        points.insert(0, [table.bed(), 0.0]);
        Ok(RatingCurve::Table { points })
    }

    /// Stores the gauge if it is not there yet.
    async fn register(&self, store: &Store, spec: &ReachSpec) -> Result<(), DemoError> {
        if store.gauge(self.id).await?.is_some() {
            return Ok(());
        }
        let bed = PropertyTable::from_section(self.section(spec)?)
            .map_err(|e| DemoError::Data(e.to_string()))?
            .bed();
        let gauge = GaugeSpec {
            name: self.name.into(),
            reach: Some(REACH_ID.into()),
            chainage_m: Some(0.0),
            measures: Measures::Stage,
            rating_curve: Some(self.rating(spec)?),
            stage_min_m: bed - 0.5,
            stage_max_m: bed + 12.0,
            max_rise_m_per_h: 2.0,
            discharge_min_m3s: None,
            discharge_max_m3s: None,
        };
        store.put_gauge(self.id, &gauge, DEMO_KEY_ID).await?;
        Ok(())
    }

    /// The reading at `t` of a storm that started at `start`.
    fn reading(
        &self,
        storm: &[(f64, f64)],
        rating: &RatingCurve,
        start: DateTime<Utc>,
        t: DateTime<Utc>,
    ) -> Result<NewReading, DemoError> {
        let hours = (t - start).num_seconds() as f64 / 3600.0;
        let stage = rating
            .stage(self.discharge(storm, hours))
            .map_err(|e| DemoError::Data(e.to_string()))?;
        Ok(NewReading {
            time_ms: t.timestamp_millis(),
            stage_m: Some((stage * 1000.0).round() / 1000.0),
            discharge_m3s: None,
            quality: Quality::Unchecked,
        })
    }

    /// Back-fills the readings from `start` to `now` if the gauge has none
    /// yet (a first start, or a database from before it was added), and
    /// uploads its storm hydrograph if its boundary has no upload.
    async fn seed_storm(
        &self,
        store: &Store,
        spec: &ReachSpec,
        storm: &[(f64, f64)],
        (start, now): (DateTime<Utc>, DateTime<Utc>),
    ) -> Result<(), DemoError> {
        if first_reading(store, self.id).await?.is_none() {
            let rating = self.rating(spec)?;
            let mut rows = Vec::new();
            let mut t = start;
            while t < now {
                rows.push(self.reading(storm, &rating, start, t)?);
                t += chrono::Duration::minutes(BACKFILL_STEP_MIN);
            }
            let source = serde_json::json!({"demo": "backfill"});
            store.ingest(self.id, &rows, DEMO_KEY_ID, source, 0).await?;
        }
        if store
            .newest_upload(REACH_ID, self.boundary)
            .await?
            .is_some()
        {
            return Ok(());
        }
        let series = Hydrograph::parse(
            storm
                .iter()
                // The storm's sample at `h` reaches this gauge `lead_h`
                // earlier.
                .map(|&(h, q)| {
                    let t = start + chrono::Duration::seconds(((h - self.lead_h) * 3600.0) as i64);
                    (t, self.share * q)
                })
                .collect(),
        )
        .map_err(|e| DemoError::Data(format!("demo storm: {}", e[0])))?;
        let inflow = Inflow {
            series,
            traces: Traces::NONE,
        };
        let reason = "demo: synthetic storm hydrograph issued by the built-in demo forecaster";
        store
            .insert_upload(REACH_ID, &inflow, reason, DEMO_KEY_ID, self.boundary)
            .await?;
        Ok(())
    }
}

/// Seeds the demo reach, gauges, key, back-filled readings and storm
/// uploads if they are not there yet.
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
    for g in &GAUGES {
        g.register(store, &spec).await?;
    }
    let storm = storm()?;
    let now = Utc::now();
    let start = match anchor(store).await? {
        Some(a) => a,
        // Whole minutes, so replayed and uploaded times line up.
        None => {
            DateTime::from_timestamp((now.timestamp() / 60) * 60, 0).unwrap_or(now)
                - chrono::Duration::hours(START_INTO_STORM_H)
        }
    };
    for g in &GAUGES {
        g.seed_storm(store, &spec, &storm, (start, now)).await?;
    }
    Ok(())
}

/// The demo storm's start: the time of the upstream gauge's first reading.
async fn anchor(store: &Store) -> Result<Option<DateTime<Utc>>, StoreError> {
    first_reading(store, GAUGE_ID).await
}

async fn first_reading(store: &Store, gauge: &str) -> Result<Option<DateTime<Utc>>, StoreError> {
    let rows = store
        .readings_for_forecast(gauge, i64::MIN, i64::MAX)
        .await?;
    Ok(rows
        .first()
        .and_then(|r| DateTime::from_timestamp_millis(r.time_ms)))
}

/// Posts a reading for "now" at every demo gauge every `every`, until
/// shutdown.
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
        let Ok(ratings) = GAUGES
            .iter()
            .map(|g| g.rating(&spec))
            .collect::<Result<Vec<_>, _>>()
        else {
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
            for (g, rating) in GAUGES.iter().zip(&ratings) {
                replay_one(
                    &store,
                    &forecaster,
                    g,
                    g.reading(&storm, rating, start, now),
                )
                .await;
            }
        }
    });
}

/// Stores one replayed reading and wakes the forecasts that use the gauge.
async fn replay_one(
    store: &Store,
    forecaster: &Forecaster,
    g: &DemoGauge,
    row: Result<NewReading, DemoError>,
) {
    let row = match row {
        Ok(r) => r,
        Err(e) => {
            tracing::warn!(error = %e, gauge = g.id, "demo replay: no reading");
            return;
        }
    };
    let source = serde_json::json!({"demo": "replay"});
    match store.ingest(g.id, &[row], DEMO_KEY_ID, source, 0).await {
        Ok(_) => forecaster.gauge_updated(g.id).await,
        Err(e) => tracing::warn!(error = %e, gauge = g.id, "demo replay: reading not stored"),
    }
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
        let gauged: Vec<_> = spec.tributaries().iter().filter_map(|t| t.gauge).collect();
        assert_eq!(gauged, vec![TRIBUTARY_GAUGE_ID]);
    }

    /// The network's main river is the one-channel file's sections, split
    /// at the confluence: the two files describe one river.
    #[test]
    fn network_main_stem_is_the_one_channel_reach() {
        let net = reach().expect("network");
        let one = ReachSpec::from_json(include_str!("brindlemoor-reach.json")).expect("one");
        let stem = crate::forecast::channels::main_stem(&net.channels);
        let mut sections: Vec<&CrossSection> = stem
            .iter()
            .flat_map(|&i| net.channels[i].sections.iter())
            .collect();
        sections.dedup_by(|a, b| a == b);
        assert_eq!(sections, one.sections.iter().collect::<Vec<_>>());
        assert_eq!(net.downstream, one.downstream);
    }

    /// Moss Gill's fallback hydrograph in the file is the storm as its
    /// gauge sees it, so the offline run and the service agree.
    #[test]
    fn tributary_fallback_is_the_storm_seen_at_its_gauge() {
        let spec = reach().expect("valid");
        let t = spec
            .tributaries()
            .into_iter()
            .find(|t| t.name == TRIBUTARY)
            .expect("Moss Gill");
        let storm = storm().expect("storm");
        let g = &GAUGES[1];
        let t0 = t.inflow[0].time;
        for p in t.inflow {
            let h = (p.time - t0).num_seconds() as f64 / 3600.0 - g.lead_h;
            // The file rounds to 1 L/s.
            assert!((p.discharge - g.discharge(&storm, h)).abs() < 6e-4, "{p:?}");
        }
    }

    #[test]
    fn ratings_invert_the_storm() {
        let spec = reach().expect("valid");
        for g in &GAUGES {
            let r = g.rating(&spec).expect("rating");
            for q in [25.0, 120.0, 320.0].map(|q| q * g.share) {
                let z = r.stage(q).expect("stage");
                let back = r.discharge(z).expect("discharge");
                assert!((back - q).abs() / q < 1e-6, "{} {q} -> {z} -> {back}", g.id);
            }
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

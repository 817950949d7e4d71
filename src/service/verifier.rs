//! Verification passes: after each cycle of a reach, open the forecasts of
//! the runs finished since the last pass at every gauged point (with the
//! stage last observed at their issue time as persistence), add the
//! readings that arrived since to the running statistics, and close the
//! forecasts whose window is over. A pass is logged when it fails and
//! never fails a run; the next pass picks up where the stored state says.

use std::collections::{BTreeMap, HashMap};
use std::sync::Arc;

use chrono::{DateTime, Duration, NaiveDate, NaiveTime, Utc};

use super::{Forecaster, verification_cache::Key};
use crate::{
    config::VerificationConfig,
    forecast::{
        record::RunRecord,
        verify::{
            pass::{self, Open, PassOutcome, Stepped},
            report::{self, PointVerification, Sources},
            tally::{HourTally, StoredHour},
        },
    },
    store::{ReachVersion, Store, StoreError},
};

/// The first instant a report of `days` up to `now` counts.
pub fn window_start(days: u64, now: DateTime<Utc>) -> DateTime<Utc> {
    span(days, now).0.and_time(NaiveTime::MIN).and_utc()
}

/// The UTC days a report of `days` up to `now` spans: the tallies are per
/// issue day, and events are counted from the start of the first day too.
fn span(days: u64, now: DateTime<Utc>) -> (NaiveDate, NaiveDate) {
    let from = now - Duration::days(i64::try_from(days).unwrap_or(3_650).min(3_650));
    (from.date_naive(), now.date_naive())
}

/// The verification of every point of `reach` over the runs issued in the
/// UTC days of the `days` up to `now`, merged from the stored tallies and
/// events.
pub async fn report(
    store: &Store,
    cfg: &VerificationConfig,
    reach: &ReachVersion,
    days: u64,
    now: DateTime<Utc>,
) -> Result<Vec<PointVerification>, StoreError> {
    let (from_day, to_day) = span(days, now);
    let hours = store
        .verification_hours(&reach.reach_id, from_day, to_day)
        .await?;
    let events = store
        .verification_events(&reach.reach_id, window_start(days, now))
        .await?;
    // Validated when the configuration loaded, so never empty here.
    let edges = cfg.band_edges().unwrap_or_default();
    Ok(report::points(&Sources {
        spec: &reach.spec,
        hours: &hours,
        events: &events,
        edges_h: &edges,
        enough: cfg.enough(),
    }))
}

impl Forecaster {
    /// [`report`], merged once per verification pass and day
    /// (`verification_cache`).
    pub async fn verification_report(
        &self,
        reach: &ReachVersion,
        days: u64,
        now: DateTime<Utc>,
    ) -> Result<Arc<Vec<PointVerification>>, StoreError> {
        let cache = &self.inner.reports;
        let (from_day, to_day) = span(days, now);
        let key = Key {
            reach_id: reach.reach_id.clone(),
            version: reach.version,
            days,
            from_day,
            to_day,
            generation: cache.generation(&reach.reach_id),
        };
        if let Some(hit) = cache.get(&key) {
            return Ok(hit);
        }
        let merged = Arc::new(
            report(
                &self.inner.store,
                &self.inner.verification,
                reach,
                days,
                now,
            )
            .await?,
        );
        cache.put(key, merged.clone());
        Ok(merged)
    }

    /// One verification pass of a reach, now.
    pub(super) async fn verify(&self, reach_id: &str) {
        if let Err(e) = self.verify_at(reach_id, Utc::now()).await {
            tracing::warn!(reach = %reach_id, error = %e, "verification pass failed; the next one retries");
        }
    }

    async fn verify_at(&self, reach_id: &str, now: DateTime<Utc>) -> Result<(), StoreError> {
        let store = &self.inner.store;
        let mut outcome = PassOutcome::default();
        let cursor = store.verification_cursor(reach_id).await?;
        // A first pass (a new reach, or an upgrade) looks back one run
        // window only: older runs' windows are long over.
        let since = now - self.window();
        let runs = store
            .finished_runs_after(reach_id, cursor.unwrap_or(0), since)
            .await?;
        let mut open = store.open_verifications(reach_id).await?;
        for run in &runs {
            let opened = self.open_run(run).await?;
            open.extend(opened.iter().cloned());
            outcome.opened.extend(opened);
        }
        outcome.cursor = runs.last().map(|r| r.id);
        let grace =
            Duration::minutes(i64::try_from(self.inner.verification.grace_minutes).unwrap_or(0));
        for (gauge, forecasts) in by_gauge(&open) {
            let from = forecasts
                .iter()
                .map(|o| o.series.issued)
                .min()
                .unwrap_or(now);
            // To the latest end, not to now: a reading ahead of this
            // clock was accepted within `ingest.max_future_secs` and is
            // what the gauge reported.
            let to = forecasts
                .iter()
                .filter_map(|o| o.series.end())
                .max()
                .unwrap_or(now);
            let observed = self.stages(gauge, from, to.max(now)).await?;
            for o in forecasts {
                outcome.stepped.push(Stepped {
                    run_id: o.run_id,
                    point_id: o.point_id.clone(),
                    issued: o.series.issued,
                    step: pass::step(o, &observed, now, grace),
                });
            }
        }
        // Steps that change nothing are not written.
        outcome
            .stepped
            .retain(|s| !s.step.hours.is_empty() || s.step.closed.is_some());
        if outcome.is_empty() {
            return Ok(());
        }
        let stored = store.apply_verification(reach_id, &outcome).await;
        // Whether or not the write went through, what was merged before
        // may no longer be what is stored.
        self.inner.reports.invalidate(reach_id);
        stored
    }

    /// How far back the first pass of a reach opens runs: one run window.
    fn window(&self) -> Duration {
        let c = &self.inner.config;
        Duration::hours(
            i64::try_from(c.lookback_hours + c.horizon_hours).unwrap_or(i64::MAX / 7_200_000),
        )
    }

    /// The forecasts of a finished run at its gauged points, with
    /// persistence; a point whose gauge saw nothing in the run's look-back
    /// before the issue time has no persistence and is not verified.
    async fn open_run(&self, run: &RunRecord) -> Result<Vec<Open>, StoreError> {
        if run.results.is_none() {
            return Ok(Vec::new());
        }
        let Some(reach) = self
            .inner
            .store
            .reach_version(&run.reach_id, run.reach_version)
            .await?
        else {
            return Ok(Vec::new());
        };
        let issued = pass::issued(run);
        let lookback =
            Duration::hours(i64::try_from(run.provenance.rules.lookback_hours).unwrap_or(24));
        let cfg = &self.inner.verification;
        let window = Duration::days(i64::try_from(cfg.correction_window_days).unwrap_or(14));
        let history = self
            .inner
            .store
            // Up to the issue day: a hindcast's correction never rests on
            // runs issued on later days (runs later the same day may count).
            .verification_hours(
                &run.reach_id,
                (issued - window).date_naive(),
                issued.date_naive(),
            )
            .await?;
        let rules = cfg.correction_rules();
        let mut out = Vec::new();
        for t in pass::to_open(run, &reach.spec) {
            let before = self.stages(&t.gauge_id, issued - lookback, issued).await?;
            let Some(&last) = before.last() else {
                continue;
            };
            let mine = by_hour(&history, &t.point_id);
            out.push(pass::open(run.id, t, last, &mine, rules));
        }
        Ok(out)
    }

    /// Usable stage readings of a gauge in `[from, to]`, oldest first (what
    /// verification and calibration compare with).
    pub(super) async fn stages(
        &self,
        gauge: &str,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<(DateTime<Utc>, f64)>, StoreError> {
        let rows = self
            .inner
            .store
            .readings_for_forecast(gauge, from.timestamp_millis(), to.timestamp_millis())
            .await?;
        Ok(rows
            .into_iter()
            .filter(|r| r.for_forecast())
            .filter_map(|r| Some((DateTime::from_timestamp_millis(r.time_ms)?, r.stage_m?)))
            .collect())
    }
}

/// One point's stored tallies merged by lead hour.
fn by_hour(history: &[StoredHour], point: &str) -> BTreeMap<u32, HourTally> {
    let mut out: BTreeMap<u32, HourTally> = BTreeMap::new();
    for h in history.iter().filter(|h| h.point_id == point) {
        out.entry(h.lead_hour).or_default().merge(&h.tally);
    }
    out
}

fn by_gauge(open: &[Open]) -> HashMap<&str, Vec<&Open>> {
    let mut out: HashMap<&str, Vec<&Open>> = HashMap::new();
    for o in open {
        out.entry(o.gauge_id.as_str()).or_default().push(o);
    }
    out
}

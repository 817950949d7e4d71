//! Retention: pruning what has aged out, so that an unattended install
//! does not fill its disk, without removing what still explains a kept
//! forecast:
//!
//! - a run's full results and ensemble (the bulk: about 190 kB a demo run)
//!   become its [`ResultsDigest`]; the run row and its provenance stay, and
//!   the newest good run of each reach is always kept whole;
//! - readings and their revisions go, except those inside the look-back of
//!   any run still kept whole and of the next run;
//! - CAP messages go only with their whole chain, once the `Cancel` that
//!   closed it expired a grace period ago; an open chain is never touched;
//! - audit rows go by age.
//!
//! Each kind is pruned in its own short write transactions, so ingest
//! waits at most one batch.

use chrono::{DateTime, Duration, Utc};
use serde::Serialize;
use sqlx::Row;

use super::{Audit, Store, StoreError, audit, time};
use crate::{
    config::{ForecastConfig, RetentionConfig},
    forecast::{cap::cap_time, digest::ResultsDigest},
};

/// Runs digested per write transaction.
const RUN_BATCH: i64 = 32;

/// What a pruning pass removes: everything older than each cut-off
/// (`None`: keep that kind), seen from `now`.
#[derive(Debug, Clone, PartialEq)]
pub struct Retention {
    pub now: DateTime<Utc>,
    pub run_results_before: Option<DateTime<Utc>>,
    pub readings_before: Option<DateTime<Utc>>,
    pub cap_before: Option<DateTime<Utc>>,
    pub audit_before: Option<DateTime<Utc>>,
    /// The next run's look-back (lookback plus the largest gap bridged):
    /// readings inside it are always kept.
    pub next_lookback: Duration,
}

impl Retention {
    /// The policy of the configuration, seen from `now`.
    pub fn of(r: &RetentionConfig, f: &ForecastConfig, now: DateTime<Utc>) -> Self {
        let before = |days: u64| {
            (days > 0).then(|| now - Duration::days(i64::try_from(days).unwrap_or(36_500)))
        };
        let minutes = |m: u64| Duration::minutes(i64::try_from(m).unwrap_or(i64::MAX / 60_000));
        Self {
            now,
            run_results_before: before(r.run_results_days),
            readings_before: before(r.readings_days),
            cap_before: before(r.cap_grace_days),
            audit_before: before(r.audit_days),
            next_lookback: minutes(f.lookback_hours * 60 + f.max_gap_minutes),
        }
    }
}

/// What one pass removed.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Pruned {
    /// Runs whose results were replaced by their digest.
    pub runs_digested: u64,
    pub readings: u64,
    pub reading_revisions: u64,
    pub cap_messages: u64,
    pub audit_rows: u64,
    /// Readings from this time on were kept for the runs kept whole and
    /// the next run (when readings were pruned at all).
    #[serde(with = "crate::wire_time::option")]
    pub readings_kept_from: Option<DateTime<Utc>>,
}

impl Pruned {
    pub fn is_empty(&self) -> bool {
        self.runs_digested
            + self.readings
            + self.reading_revisions
            + self.cap_messages
            + self.audit_rows
            == 0
    }
}

impl Store {
    /// One pruning pass under `policy`, audited when it removed anything.
    pub async fn prune(&self, policy: &Retention) -> Result<Pruned, StoreError> {
        let mut out = Pruned::default();
        if let Some(before) = policy.run_results_before {
            out.runs_digested = self.digest_runs(before, policy.now).await?;
        }
        if let Some(before) = policy.readings_before {
            let keep_from = self.readings_needed_from(policy).await?.min(before);
            let (readings, revisions) = self.delete_readings(keep_from).await?;
            out.readings = readings;
            out.reading_revisions = revisions;
            out.readings_kept_from = Some(keep_from);
        }
        if let Some(before) = policy.cap_before {
            out.cap_messages = self.delete_closed_cap_chains(before).await?;
        }
        if let Some(before) = policy.audit_before {
            let (_guard, mut tx) = self.begin_write().await?;
            out.audit_rows = sqlx::query("DELETE FROM audit_log WHERE at < ?1")
                .bind(crate::wire_time::format(before))
                .execute(&mut *tx)
                .await?
                .rows_affected();
            self.commit(tx).await?;
        }
        if !out.is_empty() {
            let (_guard, mut tx) = self.begin_write().await?;
            let summary = serde_json::to_value(&out)
                .map_err(|e| StoreError::Corrupt(format!("prune summary: {e}")))?;
            let entry = Audit {
                key_id: None,
                action: "retention.prune".to_owned(),
                target: "database".to_owned(),
                summary,
            };
            audit::record_system(&mut tx, "retention", &entry).await?;
            self.commit(tx).await?;
        }
        Ok(out)
    }

    /// Replaces the results and ensemble of every run started before
    /// `before` by their digest, except the newest good run of each reach.
    async fn digest_runs(
        &self,
        before: DateTime<Utc>,
        now: DateTime<Utc>,
    ) -> Result<u64, StoreError> {
        let mut done = 0;
        loop {
            let ids: Vec<i64> = sqlx::query_scalar(
                "SELECT id FROM forecast_runs
                 WHERE results IS NOT NULL AND started_at < ?1
                   AND id NOT IN (SELECT MAX(id) FROM forecast_runs WHERE status = 'ok'
                                  AND kind = 'live' GROUP BY reach_id)
                 ORDER BY id LIMIT ?2",
            )
            .bind(crate::wire_time::format(before))
            .bind(RUN_BATCH)
            .fetch_all(&self.pool)
            .await?;
            if ids.is_empty() {
                return Ok(done);
            }
            let mut digests = Vec::with_capacity(ids.len());
            for id in ids {
                let Some(run) = self.run(id).await? else {
                    continue;
                };
                let Some(results) = &run.results else {
                    continue;
                };
                let ensemble = run.ensemble.as_ref().and_then(|e| e.summary());
                let digest = ResultsDigest::of(results, ensemble);
                let text = serde_json::to_string(&digest)
                    .map_err(|e| StoreError::Corrupt(format!("run digest: {e}")))?;
                digests.push((id, text));
            }
            let (_guard, mut tx) = self.begin_write().await?;
            for (id, text) in &digests {
                done += sqlx::query(
                    "UPDATE forecast_runs SET results = NULL, ensemble = NULL, digest = ?2,
                            pruned_at = ?3
                     WHERE id = ?1 AND results IS NOT NULL",
                )
                .bind(id)
                .bind(text)
                .bind(crate::wire_time::format(now))
                .execute(&mut *tx)
                .await?
                .rows_affected();
            }
            self.commit(tx).await?;
        }
    }

    /// The earliest reading a run kept whole, or the next run, reads: the
    /// oldest such run's start minus its look-back and largest gap.
    async fn readings_needed_from(&self, policy: &Retention) -> Result<DateTime<Utc>, StoreError> {
        let next = policy.now - policy.next_lookback;
        let row = sqlx::query(
            "SELECT started_at, provenance FROM forecast_runs
             WHERE results IS NOT NULL ORDER BY started_at LIMIT 1",
        )
        .fetch_optional(&self.pool)
        .await?;
        let Some(row) = row else { return Ok(next) };
        let started = time::read(
            "forecast_runs.started_at",
            &row.try_get::<String, _>("started_at")?,
        )?;
        let provenance: crate::forecast::record::RunProvenance =
            serde_json::from_str(&row.try_get::<String, _>("provenance")?)
                .map_err(|e| StoreError::Corrupt(format!("forecast_runs.provenance: {e}")))?;
        let r = &provenance.rules;
        let minutes =
            i64::try_from(r.lookback_hours * 60 + r.max_gap_minutes).unwrap_or(i64::MAX / 60_000);
        Ok(next.min(started - Duration::minutes(minutes)))
    }

    /// Deletes readings (and their revisions) before `keep_from`, gauge by
    /// gauge along the primary key.
    async fn delete_readings(&self, keep_from: DateTime<Utc>) -> Result<(u64, u64), StoreError> {
        let cut = keep_from.timestamp_millis();
        let gauges: Vec<String> = sqlx::query_scalar("SELECT id FROM gauges ORDER BY id")
            .fetch_all(&self.pool)
            .await?;
        let (mut readings, mut revisions) = (0, 0);
        for g in gauges {
            let (_guard, mut tx) = self.begin_write().await?;
            revisions +=
                sqlx::query("DELETE FROM reading_revisions WHERE gauge_id = ?1 AND time_ms < ?2")
                    .bind(&g)
                    .bind(cut)
                    .execute(&mut *tx)
                    .await?
                    .rows_affected();
            readings += sqlx::query("DELETE FROM readings WHERE gauge_id = ?1 AND time_ms < ?2")
                .bind(&g)
                .bind(cut)
                .execute(&mut *tx)
                .await?
                .rows_affected();
            self.commit(tx).await?;
        }
        Ok((readings, revisions))
    }

    /// Deletes every message of each chain closed by a `Cancel` that
    /// expired before `before`: the messages up to and including that
    /// `Cancel`, which it superseded. A chain with no such `Cancel` after
    /// a message (open, or closed too recently) keeps the message, so the
    /// open-chain rule (`cap_open_chains`) sees what it saw before.
    async fn delete_closed_cap_chains(&self, before: DateTime<Utc>) -> Result<u64, StoreError> {
        let (_guard, mut tx) = self.begin_write().await?;
        let n = sqlx::query(
            "DELETE FROM cap_messages AS m
             WHERE EXISTS (
                 SELECT 1 FROM cap_messages c
                 WHERE c.reach_id = m.reach_id AND c.key = m.key AND c.active = 0
                   AND c.expires < ?1
                   AND (c.sent > m.sent OR (c.sent = m.sent AND c.run_id >= m.run_id)))",
        )
        .bind(cap_time(before))
        .execute(&mut *tx)
        .await?
        .rows_affected();
        self.commit(tx).await?;
        Ok(n)
    }
}

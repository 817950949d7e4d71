//! Verification as stored: the cursor of runs looked at per reach, the
//! forecasts still open, the running statistics per point, issue day and
//! lead hour, and the events of closed forecasts (migration 0009).

use chrono::{DateTime, NaiveDate, Utc};
use sqlx::Row;

use super::{Store, StoreError};
use crate::forecast::verify::{
    correction::Correction,
    events::Event,
    moments::Moments,
    pass::{Open, PassOutcome},
    tally::{HourTally, PointSeries, QuantileTally, StoredHour},
};

fn corrupt(what: &str, e: impl std::fmt::Display) -> StoreError {
    StoreError::Corrupt(format!("{what}: {e}"))
}

fn encode<T: serde::Serialize>(what: &str, value: &T) -> Result<String, StoreError> {
    serde_json::to_string(value).map_err(|e| corrupt(what, e))
}

fn decode<T: serde::de::DeserializeOwned>(what: &str, text: &str) -> Result<T, StoreError> {
    serde_json::from_str(text).map_err(|e| corrupt(what, e))
}

fn millis(column: &str, ms: i64) -> Result<DateTime<Utc>, StoreError> {
    DateTime::from_timestamp_millis(ms).ok_or_else(|| corrupt(column, ms))
}

impl Store {
    /// The newest run of a reach already looked at by verification.
    pub async fn verification_cursor(&self, reach_id: &str) -> Result<Option<i64>, StoreError> {
        Ok(
            sqlx::query_scalar("SELECT last_run_id FROM verification_cursor WHERE reach_id = ?1")
                .bind(reach_id)
                .fetch_optional(&self.pool)
                .await?,
        )
    }

    /// The forecasts of a reach still open, oldest run first.
    pub async fn open_verifications(&self, reach_id: &str) -> Result<Vec<Open>, StoreError> {
        let rows = sqlx::query(
            "SELECT run_id, poi_id, gauge_id, series, levels, persistence_m, counted_until_ms,
                    correction
             FROM verification_open WHERE reach_id = ?1 ORDER BY run_id, poi_id",
        )
        .bind(reach_id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                let series: String = r.try_get("series")?;
                let levels: String = r.try_get("levels")?;
                let correction: String = r.try_get("correction")?;
                Ok(Open {
                    correction: decode("verification_open.correction", &correction)?,
                    run_id: r.try_get("run_id")?,
                    point_id: r.try_get("poi_id")?,
                    gauge_id: r.try_get("gauge_id")?,
                    series: decode::<PointSeries>("verification_open.series", &series)?,
                    levels: decode("verification_open.levels", &levels)?,
                    persistence: r.try_get("persistence_m")?,
                    counted_until: millis(
                        "verification_open.counted_until_ms",
                        r.try_get("counted_until_ms")?,
                    )?,
                })
            })
            .collect()
    }

    /// Writes one verification pass of a reach in one transaction: the
    /// cursor, the forecasts opened, each step's tallies merged into the
    /// stored ones, and the closed forecasts' events.
    pub async fn apply_verification(
        &self,
        reach_id: &str,
        pass: &PassOutcome,
    ) -> Result<(), StoreError> {
        let r = async {
            let (_guard, mut tx) = self.begin_write().await?;
            if let Some(cursor) = pass.cursor {
                sqlx::query(
                    "INSERT INTO verification_cursor (reach_id, last_run_id) VALUES (?1, ?2)
                     ON CONFLICT (reach_id) DO UPDATE SET last_run_id = MAX(last_run_id, ?2)",
                )
                .bind(reach_id)
                .bind(cursor)
                .execute(&mut *tx)
                .await?;
            }
            for o in &pass.opened {
                insert_open(&mut tx, reach_id, o).await?;
            }
            for s in &pass.stepped {
                for (hour, tally) in &s.step.hours {
                    let day = s.step.issue_day;
                    merge_hour(&mut tx, reach_id, &s.point_id, day, *hour, tally).await?;
                }
                match &s.step.closed {
                    None => {
                        sqlx::query(
                            "UPDATE verification_open SET counted_until_ms = ?3
                             WHERE run_id = ?1 AND poi_id = ?2",
                        )
                        .bind(s.run_id)
                        .bind(&s.point_id)
                        .bind(s.step.counted_until.timestamp_millis())
                        .execute(&mut *tx)
                        .await?;
                    }
                    Some(event) => {
                        close(&mut tx, reach_id, s, event.as_ref()).await?;
                    }
                }
            }
            self.commit(tx).await
        }
        .await;
        self.watched(r)
    }

    /// The error corrections decided for a run, by point id.
    pub async fn run_corrections(
        &self,
        run_id: i64,
    ) -> Result<Vec<(String, Correction)>, StoreError> {
        let rows = sqlx::query(
            "SELECT poi_id, correction FROM verification_corrections WHERE run_id = ?1
             ORDER BY poi_id",
        )
        .bind(run_id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                let c: String = r.try_get("correction")?;
                Ok((
                    r.try_get("poi_id")?,
                    decode("verification_corrections.correction", &c)?,
                ))
            })
            .collect()
    }

    /// Every stored lead-hour tally of a reach issued from day `from` to
    /// day `to` (both included).
    pub async fn verification_hours(
        &self,
        reach_id: &str,
        from: NaiveDate,
        to: NaiveDate,
    ) -> Result<Vec<StoredHour>, StoreError> {
        let rows = sqlx::query(
            "SELECT poi_id, issue_day, lead_hour, runs, model, persistence, corrected,
                    correction, ensemble
             FROM verification_hours
             WHERE reach_id = ?1 AND issue_day >= ?2 AND issue_day <= ?3
             ORDER BY poi_id, issue_day, lead_hour",
        )
        .bind(reach_id)
        .bind(from.to_string())
        .bind(to.to_string())
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(hour_from_row).collect()
    }

    /// The events of a reach's closed forecasts issued at or after
    /// `from`, per point, oldest first.
    pub async fn verification_events(
        &self,
        reach_id: &str,
        from: DateTime<Utc>,
    ) -> Result<Vec<(String, Event)>, StoreError> {
        let rows = sqlx::query(
            "SELECT poi_id, event FROM verification_events
             WHERE reach_id = ?1 AND issued_at >= ?2 ORDER BY poi_id, issued_at, run_id",
        )
        .bind(reach_id)
        .bind(crate::wire_time::format(from))
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                let event: String = r.try_get("event")?;
                Ok((
                    r.try_get("poi_id")?,
                    decode("verification_events.event", &event)?,
                ))
            })
            .collect()
    }
}

type Tx = sqlx::Transaction<'static, sqlx::Sqlite>;

async fn insert_open(tx: &mut Tx, reach_id: &str, o: &Open) -> Result<(), StoreError> {
    let correction = encode("verification correction", &o.correction)?;
    sqlx::query(
        "INSERT OR IGNORE INTO verification_corrections (run_id, poi_id, reach_id, correction)
         VALUES (?1, ?2, ?3, ?4)",
    )
    .bind(o.run_id)
    .bind(&o.point_id)
    .bind(reach_id)
    .bind(&correction)
    .execute(&mut **tx)
    .await?;
    sqlx::query(
        "INSERT OR IGNORE INTO verification_open
             (run_id, poi_id, reach_id, gauge_id, series, levels, persistence_m, counted_until_ms,
              correction)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
    )
    .bind(o.run_id)
    .bind(&o.point_id)
    .bind(reach_id)
    .bind(&o.gauge_id)
    .bind(encode("verification series", &o.series)?)
    .bind(encode("verification levels", &o.levels)?)
    .bind(o.persistence)
    .bind(o.counted_until.timestamp_millis())
    .bind(&correction)
    .execute(&mut **tx)
    .await?;
    Ok(())
}

async fn close(
    tx: &mut Tx,
    reach_id: &str,
    s: &crate::forecast::verify::pass::Stepped,
    event: Option<&Event>,
) -> Result<(), StoreError> {
    if let Some(event) = event {
        sqlx::query(
            "INSERT OR REPLACE INTO verification_events (run_id, poi_id, reach_id, issued_at, event)
             VALUES (?1, ?2, ?3, ?4, ?5)",
        )
        .bind(s.run_id)
        .bind(&s.point_id)
        .bind(reach_id)
        .bind(crate::wire_time::format(s.issued))
        .bind(encode("verification event", event)?)
        .execute(&mut **tx)
        .await?;
    }
    sqlx::query("DELETE FROM verification_open WHERE run_id = ?1 AND poi_id = ?2")
        .bind(s.run_id)
        .bind(&s.point_id)
        .execute(&mut **tx)
        .await?;
    Ok(())
}

async fn merge_hour(
    tx: &mut Tx,
    reach_id: &str,
    point_id: &str,
    day: NaiveDate,
    hour: u32,
    add: &HourTally,
) -> Result<(), StoreError> {
    let row = sqlx::query(
        "SELECT poi_id, issue_day, lead_hour, runs, model, persistence, corrected, correction,
                ensemble
         FROM verification_hours
         WHERE reach_id = ?1 AND poi_id = ?2 AND issue_day = ?3 AND lead_hour = ?4",
    )
    .bind(reach_id)
    .bind(point_id)
    .bind(day.to_string())
    .bind(i64::from(hour))
    .fetch_optional(&mut **tx)
    .await?;
    let mut tally = match row {
        Some(r) => hour_from_row(&r)?.tally,
        None => HourTally::default(),
    };
    tally.merge(add);
    sqlx::query(
        "INSERT OR REPLACE INTO verification_hours
             (reach_id, poi_id, issue_day, lead_hour, runs, model, persistence, corrected,
              correction, ensemble)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
    )
    .bind(reach_id)
    .bind(point_id)
    .bind(day.to_string())
    .bind(i64::from(hour))
    .bind(i64::try_from(tally.runs).unwrap_or(i64::MAX))
    .bind(encode("verification model", &tally.model)?)
    .bind(encode("verification persistence", &tally.persistence)?)
    .bind(encode("verification corrected", &tally.corrected)?)
    .bind(encode("verification correction", &tally.correction)?)
    .bind(
        tally
            .ensemble
            .as_ref()
            .map(|e| encode("verification ensemble", e))
            .transpose()?,
    )
    .execute(&mut **tx)
    .await?;
    Ok(())
}

fn hour_from_row(r: &sqlx::sqlite::SqliteRow) -> Result<StoredHour, StoreError> {
    let day: String = r.try_get("issue_day")?;
    let model: String = r.try_get("model")?;
    let persistence: String = r.try_get("persistence")?;
    let corrected: String = r.try_get("corrected")?;
    let correction: String = r.try_get("correction")?;
    let ensemble: Option<String> = r.try_get("ensemble")?;
    let hour: i64 = r.try_get("lead_hour")?;
    let runs: i64 = r.try_get("runs")?;
    Ok(StoredHour {
        point_id: r.try_get("poi_id")?,
        issue_day: day
            .parse()
            .map_err(|e| corrupt("verification_hours.issue_day", e))?,
        lead_hour: u32::try_from(hour).map_err(|e| corrupt("verification_hours.lead_hour", e))?,
        tally: HourTally {
            runs: u64::try_from(runs).map_err(|e| corrupt("verification_hours.runs", e))?,
            model: decode::<Moments>("verification_hours.model", &model)?,
            persistence: decode::<Moments>("verification_hours.persistence", &persistence)?,
            corrected: decode::<Moments>("verification_hours.corrected", &corrected)?,
            correction: decode("verification_hours.correction", &correction)?,
            ensemble: ensemble
                .map(|e| decode::<QuantileTally>("verification_hours.ensemble", &e))
                .transpose()?,
        },
    })
}

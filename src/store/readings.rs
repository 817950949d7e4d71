//! Readings: batch ingest (one transaction per request, multi-row INSERT
//! statements), paged reads, the readings a forecast reads, confirmation
//! of suspect readings.

use std::{collections::BTreeMap, sync::LazyLock};

use chrono::Utc;
use sqlx::{Row, SqliteConnection, sqlite::SqliteRow};

use super::{Audit, Store, StoreError, audit, gauges};
use crate::gauge::readings::{
    Action, NewReading, Quality, RateCheck, Revision, StoredReading, for_forecast, format_time,
    plan,
};

/// Rows per multi-row INSERT: 8 parameters each, well under SQLite's limit
/// of 32766 host parameters per statement.
const INSERT_CHUNK: usize = 500;

/// Counts for one ingested batch (rejections are counted by the caller).
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize)]
pub struct IngestOutcome {
    pub accepted: usize,
    pub duplicate: usize,
    pub revised: usize,
    /// Of accepted and revised: stored, but flagged suspect by rate.
    pub suspect_by_rate: usize,
}

/// A page request: bounds in Unix ms (inclusive), order and size.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ReadingsQuery {
    pub from_ms: i64,
    pub to_ms: i64,
    pub newest_first: bool,
    pub limit: i64,
}

fn stored_from_row(row: &SqliteRow) -> Result<StoredReading, StoreError> {
    let quality: String = row.try_get("quality")?;
    let check: String = row.try_get("rate_check")?;
    Ok(StoredReading {
        time_ms: row.try_get("time_ms")?,
        stage_m: row.try_get("stage_m")?,
        discharge_m3s: row.try_get("discharge_m3s")?,
        quality: Quality::parse(&quality)
            .ok_or_else(|| StoreError::Corrupt(format!("readings.quality = {quality}")))?,
        rate_check: RateCheck::parse(&check)
            .ok_or_else(|| StoreError::Corrupt(format!("readings.rate_check = {check}")))?,
        revision: row.try_get("revision")?,
        received_at_ms: row.try_get("received_at_ms")?,
        key_id: row.try_get("key_id")?,
    })
}

type ReadingTuple = (
    i64,
    Option<f64>,
    Option<f64>,
    String,
    String,
    i64,
    i64,
    String,
);

fn stored_from_tuple(t: ReadingTuple) -> Result<StoredReading, StoreError> {
    let (time_ms, stage_m, discharge_m3s, quality, check, revision, received_at_ms, key_id) = t;
    Ok(StoredReading {
        time_ms,
        stage_m,
        discharge_m3s,
        quality: Quality::parse(&quality)
            .ok_or_else(|| StoreError::Corrupt(format!("readings.quality = {quality}")))?,
        rate_check: RateCheck::parse(&check)
            .ok_or_else(|| StoreError::Corrupt(format!("readings.rate_check = {check}")))?,
        revision,
        received_at_ms,
        key_id,
    })
}

/// [`for_forecast`] as a SQL condition on a `readings` row, built from the
/// function itself (every quality and rate check it lets in), so the SQL
/// cannot drift from the rule the API reports.
static FOR_FORECAST: LazyLock<String> = LazyLock::new(|| {
    let pairs: Vec<String> = Quality::ALL
        .iter()
        .flat_map(|q| RateCheck::ALL.iter().map(move |c| (*q, *c)))
        .filter(|(q, c)| for_forecast(*q, *c))
        .map(|(q, c)| format!("('{}', '{}')", q.as_str(), c.as_str()))
        .collect();
    format!("(quality, rate_check) IN (VALUES {})", pairs.join(", "))
});

const READ_COLUMNS: &str =
    "time_ms, stage_m, discharge_m3s, quality, rate_check, revision, received_at_ms, key_id";

/// The nearest stage before (or after) `time_ms` that feeds forecasts:
/// what the rate check compares a batch's first (or last) stage with.
async fn anchor(
    conn: &mut SqliteConnection,
    gauge: &str,
    time_ms: i64,
    before: bool,
) -> Result<Option<(i64, f64)>, StoreError> {
    let (op, order) = if before { ("<", "DESC") } else { (">", "ASC") };
    let sql = format!(
        "SELECT time_ms, stage_m FROM readings
         WHERE gauge_id = ?1 AND time_ms {op} ?2 AND stage_m IS NOT NULL AND {}
         ORDER BY time_ms {order} LIMIT 1",
        *FOR_FORECAST
    );
    Ok(sqlx::query_as(sqlx::AssertSqlSafe(sql))
        .bind(gauge)
        .bind(time_ms)
        .fetch_optional(conn)
        .await?)
}

fn insert_sql(rows: usize) -> String {
    let mut sql = String::with_capacity(120 + rows * 36);
    sql.push_str(
        "INSERT INTO readings (gauge_id, time_ms, stage_m, discharge_m3s, quality, rate_check, \
         received_at_ms, key_id) VALUES ",
    );
    for i in 0..rows {
        if i > 0 {
            sql.push(',');
        }
        sql.push_str("(?,?,?,?,?,?,?,?)");
    }
    sql
}

impl Store {
    /// Stores a checked, de-duplicated batch (sorted by time) in one
    /// transaction with its audit entry. Identical resends count as
    /// duplicates; changed values become revisions (the old value moves to
    /// `reading_revisions`). Returns `None` when the gauge does not exist.
    pub async fn ingest(
        &self,
        gauge_id: &str,
        rows: &[NewReading],
        key_id: &str,
        audit_extra: serde_json::Value,
        in_batch_duplicates: usize,
    ) -> Result<Option<IngestOutcome>, StoreError> {
        let r = async {
            let (_writer, mut tx) = self.begin_write().await?;
            let Some(gauge) = gauges::find_in(&mut tx, gauge_id).await? else {
                return Ok(None);
            };
            let mut outcome = IngestOutcome {
                duplicate: in_batch_duplicates,
                ..IngestOutcome::default()
            };
            if let (Some(first), Some(last)) = (rows.first(), rows.last()) {
                let sql = format!(
                    "SELECT {READ_COLUMNS} FROM readings
                 WHERE gauge_id = ?1 AND time_ms BETWEEN ?2 AND ?3"
                );
                let existing_rows = sqlx::query(sqlx::AssertSqlSafe(sql))
                    .bind(gauge_id)
                    .bind(first.time_ms)
                    .bind(last.time_ms)
                    .fetch_all(&mut *tx)
                    .await?;
                let mut existing = BTreeMap::new();
                for row in &existing_rows {
                    let r = stored_from_row(row)?;
                    existing.insert(r.time_ms, r);
                }
                let before = anchor(&mut tx, gauge_id, first.time_ms, true).await?;
                let after = anchor(&mut tx, gauge_id, last.time_ms, false).await?;
                let actions = plan(&gauge, rows, &existing, before, after);

                let now_ms = Utc::now().timestamp_millis();
                let mut inserts: Vec<(NewReading, RateCheck)> = Vec::new();
                for action in actions {
                    match action {
                        Action::Duplicate => outcome.duplicate += 1,
                        Action::Insert(r, c) => {
                            outcome.accepted += 1;
                            if c == RateCheck::Suspect {
                                outcome.suspect_by_rate += 1;
                            }
                            inserts.push((r, c));
                        }
                        Action::Revise { new, check, old } => {
                            outcome.revised += 1;
                            if check == RateCheck::Suspect {
                                outcome.suspect_by_rate += 1;
                            }
                            revise(&mut tx, gauge_id, &new, check, &old, key_id, now_ms).await?;
                        }
                    }
                }
                for chunk in inserts.chunks(INSERT_CHUNK) {
                    let sql = insert_sql(chunk.len());
                    let mut q = sqlx::query(sqlx::AssertSqlSafe(sql));
                    for (r, c) in chunk {
                        q = q
                            .bind(gauge_id)
                            .bind(r.time_ms)
                            .bind(r.stage_m)
                            .bind(r.discharge_m3s)
                            .bind(r.quality.as_str())
                            .bind(c.as_str())
                            .bind(now_ms)
                            .bind(key_id);
                    }
                    q.execute(&mut *tx).await?;
                }
            }
            let mut summary = serde_json::json!({
                "accepted": outcome.accepted,
                "duplicate": outcome.duplicate,
                "revised": outcome.revised,
                "suspect_by_rate": outcome.suspect_by_rate,
            });
            if let (Some(map), serde_json::Value::Object(extra)) =
                (summary.as_object_mut(), audit_extra)
            {
                map.extend(extra);
            }
            audit::record(
                &mut tx,
                &Audit {
                    key_id: Some(key_id.to_owned()),
                    action: "readings.ingest".to_owned(),
                    target: format!("gauge:{gauge_id}"),
                    summary,
                },
            )
            .await?;
            self.commit(tx).await?;
            Ok(Some(outcome))
        }
        .await;
        self.watched(r)
    }

    /// One page of a gauge's readings. Fetches `limit + 1` rows so the
    /// caller knows whether another page follows.
    pub async fn readings(
        &self,
        gauge_id: &str,
        q: ReadingsQuery,
    ) -> Result<Vec<StoredReading>, StoreError> {
        self.range(
            gauge_id,
            q.from_ms,
            q.to_ms,
            q.newest_first,
            q.limit.saturating_add(1),
        )
        .await
    }

    /// Every reading of a gauge in `[from_ms, to_ms]` (inclusive), oldest
    /// first, whatever its flags: [`StoredReading::for_forecast`] says which
    /// ones a forecast uses.
    pub async fn readings_for_forecast(
        &self,
        gauge_id: &str,
        from_ms: i64,
        to_ms: i64,
    ) -> Result<Vec<StoredReading>, StoreError> {
        // LIMIT -1: no limit (SQLite's documented form).
        self.range(gauge_id, from_ms, to_ms, false, -1).await
    }

    /// The readings of a gauge in `[from_ms, to_ms]` as they stood at
    /// `known_ms`, oldest first: each reading received by then, at the
    /// value in force then (the current one if received by then, else the
    /// revision it replaced later); a confirmation given after then does
    /// not count, so such a reading is still suspect.
    pub async fn readings_known_at(
        &self,
        gauge_id: &str,
        from_ms: i64,
        to_ms: i64,
        known_ms: i64,
    ) -> Result<Vec<StoredReading>, StoreError> {
        let rows: Vec<ReadingTuple> = sqlx::query_as(
            "SELECT time_ms, stage_m, discharge_m3s, quality,
                    CASE WHEN rate_check = 'confirmed' AND confirmed_at_ms > ?4
                         THEN 'suspect' ELSE rate_check END AS rate_check,
                    revision, received_at_ms, key_id
             FROM readings
             WHERE gauge_id = ?1 AND time_ms >= ?2 AND time_ms <= ?3 AND received_at_ms <= ?4
             UNION ALL
             SELECT time_ms, stage_m, discharge_m3s, quality, rate_check,
                    revision, received_at_ms, key_id
             FROM reading_revisions
             WHERE gauge_id = ?1 AND time_ms >= ?2 AND time_ms <= ?3
               AND received_at_ms <= ?4 AND replaced_at_ms > ?4
             ORDER BY time_ms",
        )
        .bind(gauge_id)
        .bind(from_ms)
        .bind(to_ms)
        .bind(known_ms)
        .fetch_all(&self.pool)
        .await?;
        rows.into_iter().map(stored_from_tuple).collect()
    }

    async fn range(
        &self,
        gauge_id: &str,
        from_ms: i64,
        to_ms: i64,
        newest_first: bool,
        limit: i64,
    ) -> Result<Vec<StoredReading>, StoreError> {
        let sql = if newest_first {
            "SELECT time_ms, stage_m, discharge_m3s, quality, rate_check, revision, received_at_ms, key_id
             FROM readings WHERE gauge_id = ?1 AND time_ms >= ?2 AND time_ms <= ?3
             ORDER BY time_ms DESC LIMIT ?4"
        } else {
            "SELECT time_ms, stage_m, discharge_m3s, quality, rate_check, revision, received_at_ms, key_id
             FROM readings WHERE gauge_id = ?1 AND time_ms >= ?2 AND time_ms <= ?3
             ORDER BY time_ms ASC LIMIT ?4"
        };
        // Decoded by position into tuples: the by-name lookups of
        // `Row::try_get` cost more than the query for a page of 500.
        let rows: Vec<ReadingTuple> = sqlx::query_as(sql)
            .bind(gauge_id)
            .bind(from_ms)
            .bind(to_ms)
            .bind(limit)
            .fetch_all(&self.pool)
            .await?;
        rows.into_iter().map(stored_from_tuple).collect()
    }

    /// Time of the newest reading of a gauge that feeds forecasts (Unix ms).
    pub async fn last_usable_reading_ms(&self, gauge_id: &str) -> Result<Option<i64>, StoreError> {
        let sql = format!(
            "SELECT MAX(time_ms) FROM readings WHERE gauge_id = ?1 AND {}",
            *FOR_FORECAST
        );
        let (t,): (Option<i64>,) = sqlx::query_as(sqlx::AssertSqlSafe(sql))
            .bind(gauge_id)
            .fetch_one(&self.pool)
            .await?;
        Ok(t)
    }

    /// The earlier values of one reading, oldest first.
    pub async fn reading_revisions(
        &self,
        gauge_id: &str,
        time_ms: i64,
    ) -> Result<Vec<Revision>, StoreError> {
        let rows = sqlx::query(
            "SELECT time_ms, stage_m, discharge_m3s, quality, rate_check, revision,
                    received_at_ms, key_id, replaced_at_ms, replaced_by
             FROM reading_revisions WHERE gauge_id = ?1 AND time_ms = ?2 ORDER BY revision",
        )
        .bind(gauge_id)
        .bind(time_ms)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|row| {
                Ok(Revision {
                    reading: stored_from_row(row)?,
                    replaced_at_ms: row.try_get("replaced_at_ms")?,
                    replaced_by: row.try_get("replaced_by")?,
                })
            })
            .collect()
    }

    /// Confirms a reading held back from forecasts (flagged suspect by its
    /// sender or by the rate check): its `rate_check` becomes `confirmed`.
    /// `Ok(None)` when there is no such reading; the reading as it is
    /// otherwise (one that was never held back is returned unchanged, still
    /// `ok`, for the caller to refuse).
    pub async fn confirm_reading(
        &self,
        gauge_id: &str,
        time_ms: i64,
        key_id: &str,
    ) -> Result<Option<StoredReading>, StoreError> {
        let (_writer, mut tx) = self.begin_write().await?;
        let sql = format!(
            "UPDATE readings SET rate_check = 'confirmed', confirmed_by = ?3, confirmed_at_ms = ?4
             WHERE gauge_id = ?1 AND time_ms = ?2 AND NOT {}",
            *FOR_FORECAST
        );
        let changed = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(gauge_id)
            .bind(time_ms)
            .bind(key_id)
            .bind(Utc::now().timestamp_millis())
            .execute(&mut *tx)
            .await?
            .rows_affected();
        let sql =
            format!("SELECT {READ_COLUMNS} FROM readings WHERE gauge_id = ?1 AND time_ms = ?2");
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(gauge_id)
            .bind(time_ms)
            .fetch_optional(&mut *tx)
            .await?;
        let reading = row.as_ref().map(stored_from_row).transpose()?;
        if changed == 1 {
            audit::record(
                &mut tx,
                &Audit {
                    key_id: Some(key_id.to_owned()),
                    action: "readings.confirm".to_owned(),
                    target: format!("gauge:{gauge_id}@{}", format_time(time_ms)),
                    summary: serde_json::json!({"confirmed": 1}),
                },
            )
            .await?;
        }
        self.commit(tx).await?;
        Ok(reading)
    }
}

async fn revise(
    conn: &mut SqliteConnection,
    gauge_id: &str,
    new: &NewReading,
    check: RateCheck,
    old: &StoredReading,
    key_id: &str,
    now_ms: i64,
) -> Result<(), StoreError> {
    sqlx::query(
        "INSERT INTO reading_revisions (gauge_id, time_ms, revision, stage_m, discharge_m3s,
             quality, rate_check, received_at_ms, key_id, replaced_at_ms, replaced_by)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11)",
    )
    .bind(gauge_id)
    .bind(old.time_ms)
    .bind(old.revision)
    .bind(old.stage_m)
    .bind(old.discharge_m3s)
    .bind(old.quality.as_str())
    .bind(old.rate_check.as_str())
    .bind(old.received_at_ms)
    .bind(&old.key_id)
    .bind(now_ms)
    .bind(key_id)
    .execute(&mut *conn)
    .await?;
    sqlx::query(
        "UPDATE readings SET stage_m = ?3, discharge_m3s = ?4, quality = ?5, rate_check = ?6,
             confirmed_by = NULL, confirmed_at_ms = NULL, revision = revision + 1,
             received_at_ms = ?7, key_id = ?8
         WHERE gauge_id = ?1 AND time_ms = ?2",
    )
    .bind(gauge_id)
    .bind(new.time_ms)
    .bind(new.stage_m)
    .bind(new.discharge_m3s)
    .bind(new.quality.as_str())
    .bind(check.as_str())
    .bind(now_ms)
    .bind(key_id)
    .execute(&mut *conn)
    .await?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{
        config::StorageConfig,
        gauge::{GaugeSpec, Measures},
    };

    /// Pages come back bit-for-bit and in order: every stored double,
    /// including ones whose shortest decimal form needs 17 digits,
    /// subnormals and the extremes of IEEE 754 binary64.
    #[tokio::test]
    async fn pages_return_values_bit_for_bit_in_order() {
        let dir = tempfile::tempdir().expect("temp dir");
        let store = Store::open(&StorageConfig {
            data_dir: dir.path().to_owned(),
            ..StorageConfig::default()
        })
        .await
        .expect("open");
        let gauge = GaugeSpec {
            name: "Test".into(),
            reach: None,
            chainage_m: None,
            measures: Measures::Both,
            rating_curve: None,
            stage_min_m: -1e300,
            stage_max_m: 1e300,
            max_rise_m_per_h: f64::MAX,
            discharge_min_m3s: None,
            discharge_max_m3s: None,
        };
        store.put_gauge("g", &gauge, "k").await.expect("gauge");
        let mut x: u64 = 0x9E37_79B9_7F4A_7C15;
        let mut values: Vec<f64> = vec![
            0.1 + 0.2,
            1.0 / 3.0,
            f64::MAX,
            f64::MIN_POSITIVE,
            5e-324,
            // (-0.0 is left out: SQLite stores an integral REAL as an
            // integer on disk, so it reads back as 0.0 on any path.)
            123_456_789.123_456_78,
            2.0,
        ];
        for _ in 0..2000 {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let v = f64::from_bits(x >> 2);
            values.push(if v.is_finite() { v } else { 1.5 });
        }
        let rows: Vec<NewReading> = values
            .iter()
            .enumerate()
            .map(|(i, v)| NewReading {
                time_ms: i as i64 * 1000,
                stage_m: if i % 7 == 3 { None } else { Some(*v) },
                discharge_m3s: Some(v.abs()),
                quality: Quality::Good,
            })
            .collect();
        store
            .ingest("g", &rows, "k", serde_json::json!({}), 0)
            .await
            .expect("ingest");
        for newest_first in [false, true] {
            let got = store
                .readings(
                    "g",
                    ReadingsQuery {
                        from_ms: i64::MIN,
                        to_ms: i64::MAX,
                        newest_first,
                        limit: 100_000,
                    },
                )
                .await
                .expect("page");
            assert_eq!(got.len(), rows.len());
            let mut got = got;
            if newest_first {
                assert!(got.windows(2).all(|w| w[0].time_ms > w[1].time_ms));
                got.reverse();
            }
            for (r, g) in rows.iter().zip(&got) {
                assert_eq!(r.time_ms, g.time_ms);
                assert_eq!(
                    r.stage_m.map(f64::to_bits),
                    g.stage_m.map(f64::to_bits),
                    "{r:?}"
                );
                assert_eq!(
                    r.discharge_m3s.map(f64::to_bits),
                    g.discharge_m3s.map(f64::to_bits)
                );
                assert_eq!(g.key_id, "k");
            }
        }
        let none = store
            .readings(
                "nothing",
                ReadingsQuery {
                    from_ms: 0,
                    to_ms: 1,
                    newest_first: true,
                    limit: 10,
                },
            )
            .await
            .expect("empty page");
        assert!(none.is_empty());
    }
}

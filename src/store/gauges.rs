//! Gauges: create or replace, look up, list.

use sqlx::sqlite::SqliteRow;
use sqlx::{Row, SqliteConnection};

use super::{Audit, Store, StoreError, audit, time};
use crate::gauge::{Gauge, GaugeSpec, Measures};

/// What [`Store::put_gauge`] did.
#[derive(Debug, Clone, PartialEq)]
pub struct SavedGauge {
    /// The gauge as stored now.
    pub gauge: Gauge,
    /// Whether it is new (else it replaced an existing one).
    pub created: bool,
}

const COLUMNS: &str = "id, name, reach_id, chainage_m, measures, rating_curve, stage_min_m, \
stage_max_m, max_rise_m_per_h, discharge_min_m3s, discharge_max_m3s, created_at, updated_at";

fn gauge_from_row(row: &SqliteRow) -> Result<Gauge, StoreError> {
    let measures: String = row.try_get("measures")?;
    let curve: Option<String> = row.try_get("rating_curve")?;
    let spec = GaugeSpec {
        name: row.try_get("name")?,
        reach: row.try_get("reach_id")?,
        chainage_m: row.try_get("chainage_m")?,
        measures: Measures::parse(&measures)
            .ok_or_else(|| StoreError::Corrupt(format!("gauges.measures = {measures}")))?,
        rating_curve: curve
            .map(|c| serde_json::from_str(&c))
            .transpose()
            .map_err(|e| StoreError::Corrupt(format!("gauges.rating_curve: {e}")))?,
        stage_min_m: row.try_get("stage_min_m")?,
        stage_max_m: row.try_get("stage_max_m")?,
        max_rise_m_per_h: row.try_get("max_rise_m_per_h")?,
        discharge_min_m3s: row.try_get("discharge_min_m3s")?,
        discharge_max_m3s: row.try_get("discharge_max_m3s")?,
    };
    Ok(Gauge {
        id: row.try_get("id")?,
        spec,
        created_at: time::read(
            "gauges.created_at",
            &row.try_get::<String, _>("created_at")?,
        )?,
        updated_at: time::read(
            "gauges.updated_at",
            &row.try_get::<String, _>("updated_at")?,
        )?,
    })
}

pub(super) async fn find_in(
    conn: &mut SqliteConnection,
    id: &str,
) -> Result<Option<Gauge>, StoreError> {
    let sql = format!("SELECT {COLUMNS} FROM gauges WHERE id = ?1");
    let row = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(id)
        .fetch_optional(conn)
        .await?;
    row.as_ref().map(gauge_from_row).transpose()
}

impl Store {
    /// The gauge with this id.
    pub async fn gauge(&self, id: &str) -> Result<Option<Gauge>, StoreError> {
        let mut conn = self.pool.acquire().await?;
        find_in(&mut conn, id).await
    }

    /// Every gauge, by id.
    pub async fn gauges(&self) -> Result<Vec<Gauge>, StoreError> {
        let sql = format!("SELECT {COLUMNS} FROM gauges ORDER BY id");
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(gauge_from_row).collect()
    }

    /// Whether a reach with this id exists.
    pub async fn reach_exists(&self, id: &str) -> Result<bool, StoreError> {
        let found: Option<(i64,)> = sqlx::query_as("SELECT 1 FROM reaches WHERE id = ?1")
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        Ok(found.is_some())
    }

    /// Creates or replaces a gauge (checked by the caller) with its audit
    /// entry, in one transaction.
    pub async fn put_gauge(
        &self,
        id: &str,
        g: &GaugeSpec,
        key_id: &str,
    ) -> Result<SavedGauge, StoreError> {
        let now = time::now_text();
        let (_writer, mut tx) = self.begin_write().await?;
        let existed = find_in(&mut tx, id).await?.is_some();
        sqlx::query(
            "INSERT INTO gauges (id, name, reach_id, chainage_m, measures, rating_curve,
                 stage_min_m, stage_max_m, max_rise_m_per_h, discharge_min_m3s,
                 discharge_max_m3s, created_at, updated_at)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?12)
             ON CONFLICT (id) DO UPDATE SET
                 name = excluded.name, reach_id = excluded.reach_id,
                 chainage_m = excluded.chainage_m, measures = excluded.measures,
                 rating_curve = excluded.rating_curve, stage_min_m = excluded.stage_min_m,
                 stage_max_m = excluded.stage_max_m,
                 max_rise_m_per_h = excluded.max_rise_m_per_h,
                 discharge_min_m3s = excluded.discharge_min_m3s,
                 discharge_max_m3s = excluded.discharge_max_m3s,
                 updated_at = excluded.updated_at",
        )
        .bind(id)
        .bind(&g.name)
        .bind(&g.reach)
        .bind(g.chainage_m)
        .bind(g.measures.as_str())
        .bind(
            g.rating_curve
                .as_ref()
                .map(serde_json::to_string)
                .transpose()
                .map_err(|e| StoreError::Corrupt(format!("rating curve to JSON: {e}")))?,
        )
        .bind(g.stage_min_m)
        .bind(g.stage_max_m)
        .bind(g.max_rise_m_per_h)
        .bind(g.discharge_min_m3s)
        .bind(g.discharge_max_m3s)
        .bind(&now)
        .execute(&mut *tx)
        .await?;
        audit::record(
            &mut tx,
            &Audit {
                key_id: Some(key_id.to_owned()),
                action: if existed {
                    "gauge.update"
                } else {
                    "gauge.create"
                }
                .to_owned(),
                target: format!("gauge:{id}"),
                summary: serde_json::json!({"name": g.name, "measures": g.measures.as_str()}),
            },
        )
        .await?;
        let gauge = find_in(&mut tx, id)
            .await?
            .ok_or_else(|| StoreError::Corrupt(format!("gauge {id} vanished")))?;
        self.commit(tx).await?;
        Ok(SavedGauge {
            gauge,
            created: !existed,
        })
    }
}

//! Gaugings, rating versions and shifts of a gauge (migration 0011).

use sqlx::Row;

use super::{Audit, Store, StoreError, audit, time};
use crate::{
    engine::rating::RatingCurve,
    gauge::ratings::{Gauging, GaugingQuality, RatingVersion, Ratings, Shift},
};

fn corrupt(what: &str, e: impl std::fmt::Display) -> StoreError {
    StoreError::Corrupt(format!("{what}: {e}"))
}

fn quality_str(q: GaugingQuality) -> &'static str {
    match q {
        GaugingQuality::Excellent => "excellent",
        GaugingQuality::Good => "good",
        GaugingQuality::Fair => "fair",
        GaugingQuality::Poor => "poor",
    }
}

fn quality_of(s: &str) -> Result<GaugingQuality, StoreError> {
    serde_json::from_value(serde_json::Value::String(s.to_owned()))
        .map_err(|e| corrupt("gaugings.quality", e))
}

impl Store {
    /// Stores gaugings (a gauging at a time already stored replaces it: a
    /// corrected measurement), audited; returns how many were new.
    pub async fn put_gaugings(
        &self,
        gauge_id: &str,
        gaugings: &[Gauging],
        key_id: &str,
    ) -> Result<usize, StoreError> {
        let r = async {
            let now = time::now_text();
            let (_guard, mut tx) = self.begin_write().await?;
            let mut new = 0;
            for g in gaugings {
                let t = crate::wire_time::format(g.time);
                let existed: Option<i64> =
                    sqlx::query_scalar("SELECT 1 FROM gaugings WHERE gauge_id = ?1 AND time = ?2")
                        .bind(gauge_id)
                        .bind(&t)
                        .fetch_optional(&mut *tx)
                        .await?;
                new += usize::from(existed.is_none());
                sqlx::query(
                    "INSERT OR REPLACE INTO gaugings
                         (gauge_id, time, stage_m, discharge_m3s, method, quality, received_at, key_id)
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
                )
                .bind(gauge_id)
                .bind(&t)
                .bind(g.stage_m)
                .bind(g.discharge_m3s)
                .bind(&g.method)
                .bind(quality_str(g.quality))
                .bind(&now)
                .bind(key_id)
                .execute(&mut *tx)
                .await?;
            }
            audit::record(
                &mut tx,
                &Audit {
                    key_id: Some(key_id.to_owned()),
                    action: "gaugings.put".to_owned(),
                    target: format!("gauge:{gauge_id}"),
                    summary: serde_json::json!({"received": gaugings.len(), "new": new}),
                },
            )
            .await?;
            self.commit(tx).await?;
            Ok(new)
        }
        .await;
        self.watched(r)
    }

    /// The gaugings of a gauge, oldest first.
    pub async fn gaugings(&self, gauge_id: &str) -> Result<Vec<Gauging>, StoreError> {
        let rows = sqlx::query(
            "SELECT time, stage_m, discharge_m3s, method, quality FROM gaugings
             WHERE gauge_id = ?1 ORDER BY time",
        )
        .bind(gauge_id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                let t: String = r.try_get("time")?;
                let q: String = r.try_get("quality")?;
                Ok(Gauging {
                    time: time::read("gaugings.time", &t)?,
                    stage_m: r.try_get("stage_m")?,
                    discharge_m3s: r.try_get("discharge_m3s")?,
                    method: r.try_get("method")?,
                    quality: quality_of(&q)?,
                })
            })
            .collect()
    }

    /// Adds a rating version (the next number), audited; returns it.
    pub async fn add_rating_version(
        &self,
        gauge_id: &str,
        valid_from: chrono::DateTime<chrono::Utc>,
        curve: &RatingCurve,
        note: &str,
        key_id: &str,
    ) -> Result<i64, StoreError> {
        let r = async {
            let json = serde_json::to_string(curve).map_err(|e| corrupt("rating curve", e))?;
            let (_guard, mut tx) = self.begin_write().await?;
            let (version,): (i64,) = sqlx::query_as(
                "SELECT COALESCE(MAX(version), 0) + 1 FROM rating_versions WHERE gauge_id = ?1",
            )
            .bind(gauge_id)
            .fetch_one(&mut *tx)
            .await?;
            sqlx::query(
                "INSERT INTO rating_versions (gauge_id, version, valid_from, curve, note,
                     created_at, created_by)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
            )
            .bind(gauge_id)
            .bind(version)
            .bind(crate::wire_time::format(valid_from))
            .bind(json)
            .bind(note)
            .bind(time::now_text())
            .bind(key_id)
            .execute(&mut *tx)
            .await?;
            audit::record(
                &mut tx,
                &Audit {
                    key_id: Some(key_id.to_owned()),
                    action: "rating.version".to_owned(),
                    target: format!("gauge:{gauge_id}"),
                    summary: serde_json::json!({"version": version,
                        "valid_from": crate::wire_time::format(valid_from)}),
                },
            )
            .await?;
            self.commit(tx).await?;
            Ok(version)
        }
        .await;
        self.watched(r)
    }

    /// Adds a shift, audited.
    pub async fn add_rating_shift(
        &self,
        gauge_id: &str,
        shift: &Shift,
        key_id: &str,
    ) -> Result<(), StoreError> {
        let r = async {
            let (_guard, mut tx) = self.begin_write().await?;
            sqlx::query(
                "INSERT INTO rating_shifts (gauge_id, from_time, to_time, offset_m, reason,
                     created_at, created_by)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
            )
            .bind(gauge_id)
            .bind(crate::wire_time::format(shift.from))
            .bind(shift.to.map(crate::wire_time::format))
            .bind(shift.offset_m)
            .bind(&shift.reason)
            .bind(time::now_text())
            .bind(key_id)
            .execute(&mut *tx)
            .await?;
            audit::record(
                &mut tx,
                &Audit {
                    key_id: Some(key_id.to_owned()),
                    action: "rating.shift".to_owned(),
                    target: format!("gauge:{gauge_id}"),
                    summary: serde_json::json!({"offset_m": shift.offset_m}),
                },
            )
            .await?;
            self.commit(tx).await?;
            Ok(())
        }
        .await;
        self.watched(r)
    }

    /// Everything that converts the gauge's stages: its own curve, its
    /// versions (oldest `valid_from` first) and shifts.
    pub async fn ratings(
        &self,
        gauge_id: &str,
        base: Option<RatingCurve>,
    ) -> Result<Ratings, StoreError> {
        let rows = sqlx::query(
            "SELECT version, valid_from, curve, note FROM rating_versions
             WHERE gauge_id = ?1 ORDER BY valid_from, version",
        )
        .bind(gauge_id)
        .fetch_all(&self.pool)
        .await?;
        let versions = rows
            .iter()
            .map(|r| {
                let from: String = r.try_get("valid_from")?;
                let curve: String = r.try_get("curve")?;
                Ok(RatingVersion {
                    version: r.try_get("version")?,
                    valid_from: time::read("rating_versions.valid_from", &from)?,
                    curve: serde_json::from_str(&curve)
                        .map_err(|e| corrupt("rating_versions.curve", e))?,
                    note: r.try_get("note")?,
                })
            })
            .collect::<Result<Vec<_>, StoreError>>()?;
        let rows = sqlx::query(
            "SELECT from_time, to_time, offset_m, reason FROM rating_shifts
             WHERE gauge_id = ?1 ORDER BY from_time, id",
        )
        .bind(gauge_id)
        .fetch_all(&self.pool)
        .await?;
        let shifts = rows
            .iter()
            .map(|r| {
                let from: String = r.try_get("from_time")?;
                Ok(Shift {
                    from: time::read("rating_shifts.from_time", &from)?,
                    to: time::read_opt("rating_shifts.to_time", r.try_get("to_time")?)?,
                    offset_m: r.try_get("offset_m")?,
                    reason: r.try_get("reason")?,
                })
            })
            .collect::<Result<Vec<_>, StoreError>>()?;
        Ok(Ratings {
            base,
            versions,
            shifts,
        })
    }
}

//! Reaches (versioned descriptions), uploaded inflow forecasts and forecast
//! runs with their results.

use chrono::{DateTime, Utc};
use sqlx::Row;

use super::{Audit, Store, StoreError, audit};
use crate::forecast::spec::ReachSpec;

/// One stored version of a reach description.
#[derive(Debug, Clone, PartialEq)]
pub struct ReachVersion {
    pub reach_id: String,
    pub version: i64,
    pub spec: ReachSpec,
    pub created_at: String,
    pub created_by: Option<String>,
}

/// An uploaded inflow forecast.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct InflowUpload {
    #[serde(skip)]
    pub id: i64,
    pub version: i64,
    pub uploaded_at: String,
    pub uploaded_by: String,
    pub reason: String,
    pub withdrawn: bool,
    pub withdrawn_at: Option<String>,
    pub points: usize,
    #[serde(skip)]
    pub series: Vec<(DateTime<Utc>, f64)>,
}

/// A forecast run as stored.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredRun {
    pub id: i64,
    pub reach_id: String,
    pub reach_version: i64,
    pub inflow_forecast_id: Option<i64>,
    pub started_at: String,
    pub finished_at: Option<String>,
    pub status: String,
    pub error: Option<String>,
    pub provenance: serde_json::Value,
    pub results: Option<serde_json::Value>,
}

#[derive(serde::Serialize, serde::Deserialize)]
struct SeriesPoint {
    time: DateTime<Utc>,
    discharge: f64,
}

fn corrupt(what: &str, e: impl std::fmt::Display) -> StoreError {
    StoreError::Corrupt(format!("{what}: {e}"))
}

const RUN_COLUMNS: &str = "id, reach_id, reach_version, inflow_forecast_id, started_at, \
finished_at, status, error, provenance, results";

fn run_from_row(row: &sqlx::sqlite::SqliteRow) -> Result<StoredRun, StoreError> {
    let provenance: String = row.try_get("provenance")?;
    let results: Option<String> = row.try_get("results")?;
    Ok(StoredRun {
        id: row.try_get("id")?,
        reach_id: row.try_get("reach_id")?,
        reach_version: row.try_get("reach_version")?,
        inflow_forecast_id: row.try_get("inflow_forecast_id")?,
        started_at: row.try_get("started_at")?,
        finished_at: row.try_get("finished_at")?,
        status: row.try_get("status")?,
        error: row.try_get("error")?,
        provenance: serde_json::from_str(&provenance)
            .map_err(|e| corrupt("forecast_runs.provenance", e))?,
        results: results
            .map(|r| serde_json::from_str(&r))
            .transpose()
            .map_err(|e| corrupt("forecast_runs.results", e))?,
    })
}

impl Store {
    /// Stores a new version of a reach description (creating the reach on
    /// its first version) with its points of interest and thresholds, and
    /// returns the version number. Earlier versions stay as they were.
    pub async fn put_reach(
        &self,
        id: &str,
        spec: &ReachSpec,
        key_id: Option<&str>,
    ) -> Result<i64, StoreError> {
        let document = serde_json::to_string(spec).map_err(|e| corrupt("reach document", e))?;
        let now = Utc::now().to_rfc3339();
        let (_guard, mut tx) = self.begin_write().await?;
        sqlx::query(
            "INSERT INTO reaches (id, name, created_at) VALUES (?1, ?2, ?3)
             ON CONFLICT (id) DO UPDATE SET name = excluded.name",
        )
        .bind(id)
        .bind(&spec.name)
        .bind(&now)
        .execute(&mut *tx)
        .await?;
        let (version,): (i64,) = sqlx::query_as(
            "SELECT COALESCE(MAX(version), 0) + 1 FROM reach_versions WHERE reach_id = ?1",
        )
        .bind(id)
        .fetch_one(&mut *tx)
        .await?;
        sqlx::query(
            "INSERT INTO reach_versions (reach_id, version, document, created_at, created_by)
             VALUES (?1, ?2, ?3, ?4, ?5)",
        )
        .bind(id)
        .bind(version)
        .bind(&document)
        .bind(&now)
        .bind(key_id)
        .execute(&mut *tx)
        .await?;
        let nodes = crate::forecast::run::nodes_for(spec).ok();
        for (i, p) in spec.points.iter().enumerate() {
            let poi_id = format!("p{i}");
            // Bed elevation at the point, from the computational nodes.
            let bed = nodes
                .as_ref()
                .and_then(|n| crate::forecast::run::bed_at(n, p.chainage))
                .unwrap_or(f64::NAN);
            sqlx::query(
                "INSERT INTO points_of_interest (reach_id, reach_version, poi_id, name, kind,
                     chainage_m, bed_elevation_m, low_chord_m, deck_elevation_m)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
            )
            .bind(id)
            .bind(version)
            .bind(&poi_id)
            .bind(&p.name)
            .bind(
                serde_json::to_value(p.kind)
                    .ok()
                    .and_then(|v| v.as_str().map(str::to_owned)),
            )
            .bind(p.chainage)
            .bind(if bed.is_finite() { bed } else { 0.0 })
            .bind(p.low_chord)
            .bind(p.deck)
            .execute(&mut *tx)
            .await?;
            for t in &p.thresholds {
                sqlx::query(
                    "INSERT INTO poi_thresholds (reach_id, reach_version, poi_id, name, elevation_m)
                     VALUES (?1, ?2, ?3, ?4, ?5)",
                )
                .bind(id)
                .bind(version)
                .bind(&poi_id)
                .bind(&t.name)
                .bind(t.elevation)
                .execute(&mut *tx)
                .await?;
            }
        }
        audit::record(
            &mut tx,
            &Audit {
                key_id: key_id.map(str::to_owned),
                action: "reach.put".to_owned(),
                target: id.to_owned(),
                summary: serde_json::json!({"version": version, "points": spec.points.len()}),
            },
        )
        .await?;
        tx.commit().await?;
        Ok(version)
    }

    /// The newest version of a reach.
    pub async fn latest_reach(&self, id: &str) -> Result<Option<ReachVersion>, StoreError> {
        let row = sqlx::query(
            "SELECT reach_id, version, document, created_at, created_by FROM reach_versions
             WHERE reach_id = ?1 ORDER BY version DESC LIMIT 1",
        )
        .bind(id)
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| reach_from_row(&r)).transpose()
    }

    /// The newest version of every reach, ordered by id.
    pub async fn reaches(&self) -> Result<Vec<ReachVersion>, StoreError> {
        let rows = sqlx::query(
            "SELECT v.reach_id, v.version, v.document, v.created_at, v.created_by
             FROM reach_versions v
             WHERE v.version = (SELECT MAX(version) FROM reach_versions WHERE reach_id = v.reach_id)
             ORDER BY v.reach_id",
        )
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(reach_from_row).collect()
    }

    /// Stores a revised inflow forecast as the next version for the reach.
    pub async fn insert_upload(
        &self,
        reach_id: &str,
        series: &[(DateTime<Utc>, f64)],
        reason: &str,
        key_id: &str,
    ) -> Result<i64, StoreError> {
        let json = serde_json::to_string(
            &series
                .iter()
                .map(|&(time, discharge)| SeriesPoint { time, discharge })
                .collect::<Vec<_>>(),
        )
        .map_err(|e| corrupt("inflow series", e))?;
        let (_guard, mut tx) = self.begin_write().await?;
        let (version,): (i64,) = sqlx::query_as(
            "SELECT COALESCE(MAX(version), 0) + 1 FROM inflow_forecasts WHERE reach_id = ?1",
        )
        .bind(reach_id)
        .fetch_one(&mut *tx)
        .await?;
        sqlx::query(
            "INSERT INTO inflow_forecasts (reach_id, version, uploaded_at, uploaded_by, reason, series)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
        )
        .bind(reach_id)
        .bind(version)
        .bind(Utc::now().to_rfc3339())
        .bind(key_id)
        .bind(reason)
        .bind(&json)
        .execute(&mut *tx)
        .await?;
        audit::record(
            &mut tx,
            &Audit {
                key_id: Some(key_id.to_owned()),
                action: "inflow.upload".to_owned(),
                target: reach_id.to_owned(),
                summary: serde_json::json!({"version": version, "points": series.len(), "reason": reason}),
            },
        )
        .await?;
        tx.commit().await?;
        Ok(version)
    }

    /// Marks an upload withdrawn (it is kept for audit). `Ok(false)` when
    /// there is no such upload or it was already withdrawn.
    pub async fn withdraw_upload(
        &self,
        reach_id: &str,
        version: i64,
        key_id: &str,
    ) -> Result<bool, StoreError> {
        let (_guard, mut tx) = self.begin_write().await?;
        let done = sqlx::query(
            "UPDATE inflow_forecasts SET withdrawn = 1, withdrawn_at = ?3, withdrawn_by = ?4
             WHERE reach_id = ?1 AND version = ?2 AND withdrawn = 0",
        )
        .bind(reach_id)
        .bind(version)
        .bind(Utc::now().to_rfc3339())
        .bind(key_id)
        .execute(&mut *tx)
        .await?
        .rows_affected()
            == 1;
        if done {
            audit::record(
                &mut tx,
                &Audit {
                    key_id: Some(key_id.to_owned()),
                    action: "inflow.withdraw".to_owned(),
                    target: reach_id.to_owned(),
                    summary: serde_json::json!({"version": version}),
                },
            )
            .await?;
        }
        tx.commit().await?;
        Ok(done)
    }

    /// Every upload of a reach, newest first.
    pub async fn uploads(&self, reach_id: &str) -> Result<Vec<InflowUpload>, StoreError> {
        let rows = sqlx::query(
            "SELECT id, version, uploaded_at, uploaded_by, reason, withdrawn, withdrawn_at, series
             FROM inflow_forecasts WHERE reach_id = ?1 ORDER BY version DESC",
        )
        .bind(reach_id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(upload_from_row).collect()
    }

    /// The newest upload that has not been withdrawn.
    pub async fn newest_upload(&self, reach_id: &str) -> Result<Option<InflowUpload>, StoreError> {
        let row = sqlx::query(
            "SELECT id, version, uploaded_at, uploaded_by, reason, withdrawn, withdrawn_at, series
             FROM inflow_forecasts WHERE reach_id = ?1 AND withdrawn = 0
             ORDER BY version DESC LIMIT 1",
        )
        .bind(reach_id)
        .fetch_optional(&self.pool)
        .await?;
        row.as_ref().map(upload_from_row).transpose()
    }

    /// Records the start of a run; returns its id.
    pub async fn start_run(
        &self,
        reach_id: &str,
        reach_version: i64,
        inflow_forecast_id: Option<i64>,
        provenance: &serde_json::Value,
    ) -> Result<i64, StoreError> {
        let (_guard, mut tx) = self.begin_write().await?;
        let id = sqlx::query(
            "INSERT INTO forecast_runs (reach_id, reach_version, inflow_forecast_id, started_at,
                 status, provenance)
             VALUES (?1, ?2, ?3, ?4, 'running', ?5)",
        )
        .bind(reach_id)
        .bind(reach_version)
        .bind(inflow_forecast_id)
        .bind(Utc::now().to_rfc3339())
        .bind(provenance.to_string())
        .execute(&mut *tx)
        .await?
        .last_insert_rowid();
        tx.commit().await?;
        Ok(id)
    }

    /// Records how a run ended: results on success, the error otherwise.
    pub async fn finish_run(
        &self,
        run_id: i64,
        outcome: Result<&serde_json::Value, &str>,
        provenance: &serde_json::Value,
    ) -> Result<(), StoreError> {
        let (_guard, mut tx) = self.begin_write().await?;
        let (status, results, error) = match outcome {
            Ok(r) => ("ok", Some(r.to_string()), None),
            Err(e) => ("failed", None, Some(e.to_owned())),
        };
        sqlx::query(
            "UPDATE forecast_runs SET finished_at = ?2, status = ?3, results = ?4, error = ?5,
                 provenance = ?6
             WHERE id = ?1",
        )
        .bind(run_id)
        .bind(Utc::now().to_rfc3339())
        .bind(status)
        .bind(results)
        .bind(error)
        .bind(provenance.to_string())
        .execute(&mut *tx)
        .await?;
        tx.commit().await?;
        Ok(())
    }

    /// A run by id.
    pub async fn run(&self, id: i64) -> Result<Option<StoredRun>, StoreError> {
        let sql = format!("SELECT {RUN_COLUMNS} FROM forecast_runs WHERE id = ?1");
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        row.as_ref().map(run_from_row).transpose()
    }

    /// The newest run of a reach with the given status (`None`: any).
    pub async fn latest_run(
        &self,
        reach_id: &str,
        status: Option<&str>,
    ) -> Result<Option<StoredRun>, StoreError> {
        let sql = format!(
            "SELECT {RUN_COLUMNS} FROM forecast_runs
             WHERE reach_id = ?1 AND (?2 IS NULL OR status = ?2)
             ORDER BY id DESC LIMIT 1"
        );
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(reach_id)
            .bind(status)
            .fetch_optional(&self.pool)
            .await?;
        row.as_ref().map(run_from_row).transpose()
    }

    /// Runs of a reach, newest first, without their results.
    pub async fn runs(&self, reach_id: &str, limit: i64) -> Result<Vec<StoredRun>, StoreError> {
        let rows = sqlx::query(
            "SELECT id, reach_id, reach_version, inflow_forecast_id, started_at, finished_at,
                    status, error, provenance, NULL AS results
             FROM forecast_runs WHERE reach_id = ?1 ORDER BY id DESC LIMIT ?2",
        )
        .bind(reach_id)
        .bind(limit)
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(run_from_row).collect()
    }
}

fn reach_from_row(row: &sqlx::sqlite::SqliteRow) -> Result<ReachVersion, StoreError> {
    let document: String = row.try_get("document")?;
    Ok(ReachVersion {
        reach_id: row.try_get("reach_id")?,
        version: row.try_get("version")?,
        spec: serde_json::from_str(&document).map_err(|e| corrupt("reach_versions.document", e))?,
        created_at: row.try_get("created_at")?,
        created_by: row.try_get("created_by")?,
    })
}

fn upload_from_row(row: &sqlx::sqlite::SqliteRow) -> Result<InflowUpload, StoreError> {
    let series: String = row.try_get("series")?;
    let points: Vec<SeriesPoint> =
        serde_json::from_str(&series).map_err(|e| corrupt("inflow_forecasts.series", e))?;
    Ok(InflowUpload {
        id: row.try_get("id")?,
        version: row.try_get("version")?,
        uploaded_at: row.try_get("uploaded_at")?,
        uploaded_by: row.try_get("uploaded_by")?,
        reason: row.try_get("reason")?,
        withdrawn: row.try_get::<i64, _>("withdrawn")? != 0,
        withdrawn_at: row.try_get("withdrawn_at")?,
        points: points.len(),
        series: points.into_iter().map(|p| (p.time, p.discharge)).collect(),
    })
}

//! Reaches (versioned descriptions), uploaded inflow forecasts and forecast
//! runs with their results.

use chrono::{DateTime, Utc};
use sqlx::Row;

use super::{Audit, Store, StoreError, audit, time};
use crate::forecast::{
    hydrograph::Hydrograph,
    inflow::Inflow,
    record::{EnsembleRecord, RunProvenance, RunRecord, RunStatus, StoredResults},
    spec::ReachSpec,
    traces::Traces,
};

/// One stored version of a reach description.
#[derive(Debug, Clone, PartialEq)]
pub struct ReachVersion {
    pub reach_id: String,
    pub version: i64,
    pub spec: ReachSpec,
    pub created_at: DateTime<Utc>,
    pub created_by: Option<String>,
}

/// An uploaded inflow forecast.
#[derive(Debug, Clone, PartialEq)]
pub struct InflowUpload {
    pub id: i64,
    pub version: i64,
    pub uploaded_at: DateTime<Utc>,
    pub uploaded_by: String,
    pub reason: String,
    pub withdrawn: bool,
    pub withdrawn_at: Option<DateTime<Utc>>,
    pub series: Hydrograph,
    /// Its extra traces (none for a single-series upload).
    pub traces: Traces,
    /// The name of the key that uploaded it (`None` if the key is gone).
    pub uploaded_by_name: Option<String>,
    /// Whether this is the upload in force: the one the next run uses.
    pub in_force: bool,
    /// The tributary it is for (`laterals[].name`); `None`: the upstream
    /// inflow.
    pub boundary: Option<String>,
}

/// `SELECT` of uploads as `upload_from_row` reads them, from
/// `inflow_forecasts f` with the reach bound as `?1`, then `$tail`. The
/// upload in force is the newest one not withdrawn: the `in_force` column
/// is the one home of that rule, used by the list and by `newest_upload`
/// (which the forecast cycle reads).
macro_rules! select_uploads {
    ($tail:literal) => {
        concat!(
            "SELECT f.id, f.version, f.uploaded_at, f.uploaded_by, f.reason, f.withdrawn,
                    f.withdrawn_at, f.series, f.traces, f.boundary, k.name AS uploaded_by_name,
                    f.version IS (SELECT MAX(version) FROM inflow_forecasts
                                  WHERE reach_id = ?1 AND withdrawn = 0
                                    AND boundary IS f.boundary) AS in_force
             FROM inflow_forecasts f LEFT JOIN api_keys k ON k.id = f.uploaded_by ",
            $tail
        )
    };
}

fn corrupt(what: &str, e: impl std::fmt::Display) -> StoreError {
    StoreError::Corrupt(format!("{what}: {e}"))
}

fn encode<T: serde::Serialize>(what: &str, value: &T) -> Result<String, StoreError> {
    serde_json::to_string(value).map_err(|e| corrupt(what, e))
}

const RUN_COLUMNS: &str = "id, reach_id, reach_version, inflow_forecast_id, started_at, \
finished_at, status, error, provenance, results, ensemble, pruned_at, digest";

fn run_from_row(row: &sqlx::sqlite::SqliteRow) -> Result<RunRecord, StoreError> {
    let provenance: String = row.try_get("provenance")?;
    let results: Option<String> = row.try_get("results")?;
    let status: String = row.try_get("status")?;
    Ok(RunRecord {
        id: row.try_get("id")?,
        reach_id: row.try_get("reach_id")?,
        reach_version: row.try_get("reach_version")?,
        inflow_forecast_id: row.try_get("inflow_forecast_id")?,
        started_at: time::read(
            "forecast_runs.started_at",
            &row.try_get::<String, _>("started_at")?,
        )?,
        finished_at: time::read_opt("forecast_runs.finished_at", row.try_get("finished_at")?)?,
        status: status
            .parse::<RunStatus>()
            .map_err(|e| corrupt("forecast_runs.status", e))?,
        error: row.try_get("error")?,
        provenance: serde_json::from_str(&provenance)
            .map_err(|e| corrupt("forecast_runs.provenance", e))?,
        results: results
            .map(|r| {
                serde_json::from_str(&r).map(|mut r: StoredResults| {
                    r.fill_legacy_ids();
                    r
                })
            })
            .transpose()
            .map_err(|e| corrupt("forecast_runs.results", e))?,
        ensemble: row
            .try_get::<Option<String>, _>("ensemble")?
            .map(|e| serde_json::from_str(&e))
            .transpose()
            .map_err(|e| corrupt("forecast_runs.ensemble", e))?,
        pruned_at: time::read_opt("forecast_runs.pruned_at", row.try_get("pruned_at")?)?,
        digest: row
            .try_get::<Option<String>, _>("digest")?
            .map(|d| serde_json::from_str(&d))
            .transpose()
            .map_err(|e| corrupt("forecast_runs.digest", e))?,
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
        let document = encode("reach document", spec)?;
        let now = time::now_text();
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
        self.commit(tx).await?;
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

    /// One version of a reach.
    pub async fn reach_version(
        &self,
        id: &str,
        version: i64,
    ) -> Result<Option<ReachVersion>, StoreError> {
        let row = sqlx::query(
            "SELECT reach_id, version, document, created_at, created_by FROM reach_versions
             WHERE reach_id = ?1 AND version = ?2",
        )
        .bind(id)
        .bind(version)
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| reach_from_row(&r)).transpose()
    }

    /// The version of a reach in force at `at`: the newest created by
    /// then, else (a period before the reach was described) its first;
    /// `true` with the first.
    pub async fn reach_as_of(
        &self,
        id: &str,
        at: DateTime<Utc>,
    ) -> Result<Option<(ReachVersion, bool)>, StoreError> {
        let row = sqlx::query(
            "SELECT reach_id, version, document, created_at, created_by FROM reach_versions
             WHERE reach_id = ?1 AND created_at <= ?2 ORDER BY version DESC LIMIT 1",
        )
        .bind(id)
        .bind(crate::wire_time::format(at))
        .fetch_optional(&self.pool)
        .await?;
        if let Some(r) = row {
            return Ok(Some((reach_from_row(&r)?, false)));
        }
        Ok(self.reach_version(id, 1).await?.map(|v| (v, true)))
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

    /// Stores a revised inflow forecast as the next version for the reach,
    /// for `boundary` (a tributary's name; `None`: the upstream inflow).
    pub async fn insert_upload(
        &self,
        reach_id: &str,
        inflow: &Inflow,
        reason: &str,
        key_id: &str,
        boundary: Option<&str>,
    ) -> Result<i64, StoreError> {
        let r = async {
        let series = &inflow.series;
        let json = encode("inflow series", series)?;
        let traces = if inflow.traces.is_empty() {
            None
        } else {
            Some(encode("inflow traces", &inflow.traces)?)
        };
        let (_guard, mut tx) = self.begin_write().await?;
        let (version,): (i64,) = sqlx::query_as(
            "SELECT COALESCE(MAX(version), 0) + 1 FROM inflow_forecasts WHERE reach_id = ?1",
        )
        .bind(reach_id)
        .fetch_one(&mut *tx)
        .await?;
        sqlx::query(
            "INSERT INTO inflow_forecasts (reach_id, version, uploaded_at, uploaded_by, reason, series, traces,
                 boundary)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
        )
        .bind(reach_id)
        .bind(version)
        .bind(time::now_text())
        .bind(key_id)
        .bind(reason)
        .bind(&json)
        .bind(&traces)
        .bind(boundary)
        .execute(&mut *tx)
        .await?;
        audit::record(
            &mut tx,
            &Audit {
                key_id: Some(key_id.to_owned()),
                action: "inflow.upload".to_owned(),
                target: reach_id.to_owned(),
                summary: serde_json::json!({
                    "version": version, "points": series.len(), "reason": reason,
                    "traces": inflow.traces.names(), "boundary": boundary,
                }),
            },
        )
        .await?;
        self.commit(tx).await?;
        Ok(version)
    }
        .await;
        self.watched(r)
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
        .bind(time::now_text())
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
        self.commit(tx).await?;
        Ok(done)
    }

    /// Every upload of a reach, newest first.
    pub async fn uploads(&self, reach_id: &str) -> Result<Vec<InflowUpload>, StoreError> {
        let rows = sqlx::query(select_uploads!(
            "WHERE f.reach_id = ?1 ORDER BY f.version DESC"
        ))
        .bind(reach_id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(upload_from_row).collect()
    }

    /// The upload in force: the newest one that has not been withdrawn.
    pub async fn newest_upload(
        &self,
        reach_id: &str,
        boundary: Option<&str>,
    ) -> Result<Option<InflowUpload>, StoreError> {
        let row = sqlx::query(select_uploads!(
            "WHERE f.reach_id = ?1 AND in_force AND f.boundary IS ?2"
        ))
        .bind(reach_id)
        .bind(boundary)
        .fetch_optional(&self.pool)
        .await?;
        row.as_ref().map(upload_from_row).transpose()
    }

    /// One upload of a reach by version, withdrawn or not.
    pub async fn upload(
        &self,
        reach_id: &str,
        version: i64,
    ) -> Result<Option<InflowUpload>, StoreError> {
        let row = sqlx::query(select_uploads!("WHERE f.reach_id = ?1 AND f.version = ?2"))
            .bind(reach_id)
            .bind(version)
            .fetch_optional(&self.pool)
            .await?;
        row.as_ref().map(upload_from_row).transpose()
    }

    /// The upload in force at `at`: the newest uploaded by then and not
    /// withdrawn by then.
    pub async fn upload_as_of(
        &self,
        reach_id: &str,
        at: DateTime<Utc>,
        boundary: Option<&str>,
    ) -> Result<Option<InflowUpload>, StoreError> {
        let row = sqlx::query(select_uploads!(
            "WHERE f.reach_id = ?1 AND f.uploaded_at <= ?2
               AND (f.withdrawn = 0 OR f.withdrawn_at > ?2) AND f.boundary IS ?3
             ORDER BY f.version DESC LIMIT 1"
        ))
        .bind(reach_id)
        .bind(crate::wire_time::format(at))
        .bind(boundary)
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
        provenance: &RunProvenance,
    ) -> Result<i64, StoreError> {
        // The kind column is the one the serving queries filter on; the
        // provenance says how a hindcast was made.
        let kind = if provenance.hindcast.is_some() {
            "hindcast"
        } else {
            "live"
        };
        let r = async {
            let provenance = encode("run provenance", provenance)?;
            let (_guard, mut tx) = self.begin_write().await?;
            let id = sqlx::query(
            "INSERT INTO forecast_runs (reach_id, reach_version, inflow_forecast_id, started_at,
                 status, provenance, kind)
             VALUES (?1, ?2, ?3, ?4, 'running', ?5, ?6)",
        )
        .bind(reach_id)
        .bind(reach_version)
        .bind(inflow_forecast_id)
        .bind(time::now_text())
        .bind(provenance)
        .bind(kind)
        .execute(&mut *tx)
        .await?
        .last_insert_rowid();
            self.commit(tx).await?;
            Ok(id)
        }
        .await;
        self.watched(r)
    }

    /// Records how a run ended: results on success, the error otherwise,
    /// and an audit entry by the system actor. Returns the finish time as
    /// stored.
    pub async fn finish_run(
        &self,
        run_id: i64,
        outcome: Result<&StoredResults, &str>,
        provenance: &RunProvenance,
    ) -> Result<DateTime<Utc>, StoreError> {
        let r = async {
        let (status, results, error) = match outcome {
            Ok(r) => (RunStatus::Ok, Some(encode("run results", r)?), None),
            Err(e) => (RunStatus::Failed, None, Some(e.to_owned())),
        };
        let provenance = encode("run provenance", provenance)?;
        // Taken before the write lock: the stored instant, to the
        // millisecond, is the one returned.
        let finished_text = time::now_text();
        let finished = time::read("forecast_runs.finished_at", &finished_text)?;
        let (_guard, mut tx) = self.begin_write().await?;
        let (reach_id,): (String,) = sqlx::query_as(
            "UPDATE forecast_runs SET finished_at = ?2, status = ?3, results = ?4, error = ?5,
                 provenance = ?6
             WHERE id = ?1 RETURNING reach_id",
        )
        .bind(run_id)
        .bind(&finished_text)
        .bind(status.as_str())
        .bind(results)
        .bind(&error)
        .bind(provenance)
        .fetch_one(&mut *tx)
        .await?;
        audit::record_system(
            &mut tx,
            "forecast",
            &Audit {
                key_id: None,
                action: "forecast.run".to_owned(),
                target: reach_id,
                summary: serde_json::json!({"run_id": run_id, "status": status.as_str(), "error": error}),
            },
        )
        .await?;
        self.commit(tx).await?;
        Ok(finished)
    }
        .await;
        self.watched(r)
    }

    /// Attaches the ensemble of a successful run (its deterministic
    /// results are already stored and served). `false` when there is no
    /// such run with results, which is no error: the ensemble is dropped.
    pub async fn attach_ensemble(
        &self,
        run_id: i64,
        ensemble: &EnsembleRecord,
    ) -> Result<bool, StoreError> {
        let r = async {
            let json = encode("run ensemble", ensemble)?;
            let (_guard, mut tx) = self.begin_write().await?;
            let done = sqlx::query(
                "UPDATE forecast_runs SET ensemble = ?2 WHERE id = ?1 AND status = 'ok'",
            )
            .bind(run_id)
            .bind(json)
            .execute(&mut *tx)
            .await?
            .rows_affected();
            self.commit(tx).await?;
            Ok(done == 1)
        }
        .await;
        self.watched(r)
    }

    /// A run by id.
    pub async fn run(&self, id: i64) -> Result<Option<RunRecord>, StoreError> {
        let sql = format!("SELECT {RUN_COLUMNS} FROM forecast_runs WHERE id = ?1");
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        row.as_ref().map(run_from_row).transpose()
    }

    /// The newest live run of a reach with the given status (`None`:
    /// any); hindcast runs are never the current forecast.
    pub async fn latest_run(
        &self,
        reach_id: &str,
        status: Option<RunStatus>,
    ) -> Result<Option<RunRecord>, StoreError> {
        let sql = format!(
            "SELECT {RUN_COLUMNS} FROM forecast_runs
             WHERE reach_id = ?1 AND kind = 'live' AND (?2 IS NULL OR status = ?2)
             ORDER BY id DESC LIMIT 1"
        );
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(reach_id)
            .bind(status.map(RunStatus::as_str))
            .fetch_optional(&self.pool)
            .await?;
        row.as_ref().map(run_from_row).transpose()
    }

    /// When the latest successful run of a reach finished, without loading
    /// the run: readiness and metrics ask it per reach on every poll.
    pub async fn last_good_run_finished(
        &self,
        reach_id: &str,
    ) -> Result<Option<DateTime<Utc>>, StoreError> {
        let finished: Option<Option<String>> = sqlx::query_scalar(
            "SELECT finished_at FROM forecast_runs
             WHERE reach_id = ?1 AND kind = 'live' AND status = ?2
             ORDER BY id DESC LIMIT 1",
        )
        .bind(reach_id)
        .bind(RunStatus::Ok.as_str())
        .fetch_optional(&self.pool)
        .await?;
        time::read_opt("forecast_runs.finished_at", finished.flatten())
    }

    /// The finished runs of a reach after run `after_id` that started at
    /// or after `since`, oldest first, with their results (the ones
    /// verification has yet to look at).
    pub async fn finished_runs_after(
        &self,
        reach_id: &str,
        after_id: i64,
        since: DateTime<Utc>,
    ) -> Result<Vec<RunRecord>, StoreError> {
        let sql = format!(
            "SELECT {RUN_COLUMNS} FROM forecast_runs
             WHERE reach_id = ?1 AND id > ?2 AND started_at >= ?3 AND status != 'running'
             ORDER BY id"
        );
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(reach_id)
            .bind(after_id)
            .bind(crate::wire_time::format(since))
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(run_from_row).collect()
    }

    /// Runs of a reach, newest first, without their results.
    pub async fn runs(&self, reach_id: &str, limit: i64) -> Result<Vec<RunRecord>, StoreError> {
        let rows = sqlx::query(
            "SELECT id, reach_id, reach_version, inflow_forecast_id, started_at, finished_at,
                    status, error, provenance, NULL AS results, NULL AS ensemble,
                    pruned_at, NULL AS digest
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
        created_at: time::read(
            "reach_versions.created_at",
            &row.try_get::<String, _>("created_at")?,
        )?,
        created_by: row.try_get("created_by")?,
    })
}

fn upload_from_row(row: &sqlx::sqlite::SqliteRow) -> Result<InflowUpload, StoreError> {
    let series: String = row.try_get("series")?;
    Ok(InflowUpload {
        id: row.try_get("id")?,
        version: row.try_get("version")?,
        uploaded_at: time::read(
            "inflow_forecasts.uploaded_at",
            &row.try_get::<String, _>("uploaded_at")?,
        )?,
        uploaded_by: row.try_get("uploaded_by")?,
        reason: row.try_get("reason")?,
        withdrawn: row.try_get::<i64, _>("withdrawn")? != 0,
        withdrawn_at: time::read_opt(
            "inflow_forecasts.withdrawn_at",
            row.try_get("withdrawn_at")?,
        )?,
        series: serde_json::from_str(&series).map_err(|e| corrupt("inflow_forecasts.series", e))?,
        traces: match row.try_get::<Option<String>, _>("traces")? {
            None => Traces::NONE,
            Some(t) => Traces::stored(
                serde_json::from_str(&t).map_err(|e| corrupt("inflow_forecasts.traces", e))?,
            ),
        },
        uploaded_by_name: row.try_get("uploaded_by_name")?,
        in_force: row.try_get::<i64, _>("in_force")? != 0,
        boundary: row.try_get("boundary")?,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{config::StorageConfig, forecast::assemble::Source};

    /// A run row as the first release wrote it: chrono's own time forms
    /// (`+00:00`, nanoseconds), `above_at_start`, diagnostics as loose
    /// JSON. It must read back as the typed record (issue: old stored runs
    /// stay readable).
    const OLD_RESULTS: &str = r#"{"method":"diffusive","start":"2026-03-14T00:00:00Z",
        "end":"2026-03-14T00:15:00Z","nodes":41,"points":[{"name":"Test Bridge",
        "chainage":5000.0,"kind":"bridge","bed_elevation":15.0,"low_chord":19.5,"deck":20.5,
        "times":["2026-03-14T00:00:00Z","2026-03-14T00:15:00Z"],"stage":[16.0,16.2],
        "discharge":[20.0,22.0],"crest_stage":16.2,"crest_time":"2026-03-14T00:14:59.999200Z",
        "peak_discharge":22.0,"low_chord_margin":3.3,"deck_margin":4.3,"thresholds":[
        {"name":"bank full","elevation":16.1,"severity":"moderate","exceeded":true,
        "above_at_start":false,"first_above":"2026-03-14T00:07:30Z","back_below":null,
        "duration_above_s":450.0,"margin":0.1}]}],"diagnostics":{"mass_balance_error_pct":0.01,
        "max_froude":0.3,"max_froude_chainage":2500.0,"applicability_number":null,
        "applicability_threshold":30.0,"dry_nodes":0,"extrapolated_chainages":[],"steps":12,
        "rejected_steps":0,"newton_iterations_total":30,"dt_min_used":60.0,"dt_max_used":600.0,
        "wall_time_s":0.02,"warnings":[]}}"#;
    const OLD_PROVENANCE: &str = r#"{"reach_version":1,"method":"diffusive",
        "routing":{"method":"diffusive","output_interval_s":900.0,"dt_max_s":600.0,"theta":0.6,
        "kinematic_dt_s":300.0},"upstream_gauge":"test-gauge","rules":{"lookback_hours":12,
        "horizon_hours":48,"max_gap_minutes":60,"stale_after_minutes":90,
        "extrapolation":"persistence"},"engine_version":"0.1.0","inflow":{
        "observed_from":"2026-03-14T00:00:00+00:00","observed_to":"2026-03-14T00:00:00+00:00",
        "observed_count":1,"excluded_suspect":0,"excluded_unconvertible":0,"excluded_future":0,
        "duplicates_replaced":0,"gaps_interpolated":[],"gap_restart":null,"upload_join":null,
        "source_beyond_now":"persistence","upload_version":null,"upload_issued_at":null,
        "upload_issued_by":null,"extrapolated_from":"2026-03-14T00:00:00.123456789+00:00",
        "last_reading_age_s":60,"stale":true,"warnings":["w"]},"wall_time_s":0.02,
        "diagnostics":{"mass_balance_error_pct":0.01,"dry_nodes":0,"warnings":[]}}"#;

    #[tokio::test]
    async fn first_release_runs_read_as_typed_records() {
        let dir = tempfile::tempdir().expect("temp dir");
        let store = Store::open(&StorageConfig {
            data_dir: dir.path().to_owned(),
            ..StorageConfig::default()
        })
        .await
        .expect("open");
        let spec = crate::demo::reach().expect("demo reach");
        store.put_reach("old", &spec, None).await.expect("reach");
        sqlx::query(
            "INSERT INTO forecast_runs (reach_id, reach_version, started_at, finished_at, status,
                 provenance, results)
             VALUES ('old', 1, '2026-03-14T00:00:01.123456789+00:00',
                     '2026-03-14T00:00:02.5+00:00', 'ok', ?1, ?2)",
        )
        .bind(OLD_PROVENANCE)
        .bind(OLD_RESULTS)
        .execute(store.pool())
        .await
        .expect("insert");
        let run = store
            .latest_run("old", Some(RunStatus::Ok))
            .await
            .expect("read")
            .expect("a run");
        assert_eq!(
            crate::wire_time::format(run.started_at),
            "2026-03-14T00:00:01.123Z"
        );
        let inflow = run.provenance.inflow.as_ref().expect("inflow provenance");
        assert_eq!(inflow.source_beyond_now, Source::Persistence);
        assert!(run.provenance.inflow_stale());
        let results = run.results.expect("results");
        let t = &results.points[0].levels[0];
        assert_eq!(results.points[0].id, "test-bridge", "legacy ids filled");
        assert_eq!(t.id, crate::gauge::slug_of(&t.name));
        assert!(
            !t.above_now && t.exceeded,
            "above_at_start reads as above_now"
        );
        assert_eq!(results.diagnostics.steps, 12);
        assert!(results.diagnostics.applicability_number.is_none());
    }
}

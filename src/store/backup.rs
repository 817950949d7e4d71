//! Backups: a consistent online copy of the database while the service
//! runs and writes, and the checks a restore makes before it replaces the
//! database. SQLite's `VACUUM INTO` reads one snapshot (a read transaction,
//! which WAL mode lets writers go on beside) and writes it as a new,
//! compact database file; `PRAGMA integrity_check` verifies a file.

use std::{path::Path, str::FromStr};

use sqlx::{
    ConnectOptions, Connection, Row,
    sqlite::{SqliteConnectOptions, SqliteJournalMode},
};

use super::{Store, StoreError};

/// What a checked database file holds, for the operator to read.
#[derive(Debug, Clone, PartialEq)]
pub struct FileSummary {
    /// `PRAGMA integrity_check` said `ok`.
    pub intact: bool,
    /// Its first problem otherwise.
    pub problem: Option<String>,
    pub readings: i64,
    pub runs: i64,
    /// The newest migration applied to it.
    pub schema_version: i64,
}

impl Store {
    /// Writes a consistent copy of the database to `to`, which must not
    /// exist yet.
    pub async fn backup_to(&self, to: &Path) -> Result<(), StoreError> {
        if to.exists() {
            return Err(StoreError::Refused(format!(
                "{} exists already; a backup never overwrites a file",
                to.display()
            )));
        }
        let target = to
            .to_str()
            .ok_or_else(|| StoreError::Refused(format!("{} is not a UTF-8 path", to.display())))?;
        sqlx::query("VACUUM INTO ?1")
            .bind(target)
            .execute(&self.pool)
            .await?;
        Ok(())
    }
}

/// Opens the database file `path` read-only (no migrations, no writes)
/// and checks it.
pub async fn check_file(path: &Path) -> Result<FileSummary, StoreError> {
    let mut conn = SqliteConnectOptions::from_str("sqlite:")?
        .filename(path)
        .read_only(true)
        .journal_mode(SqliteJournalMode::Delete)
        .connect()
        .await?;
    let verdict: String = sqlx::query("PRAGMA integrity_check")
        .fetch_one(&mut conn)
        .await?
        .try_get(0)?;
    let readings: i64 = sqlx::query("SELECT count(*) FROM readings")
        .fetch_one(&mut conn)
        .await?
        .try_get(0)?;
    let runs: i64 = sqlx::query("SELECT count(*) FROM forecast_runs")
        .fetch_one(&mut conn)
        .await?
        .try_get(0)?;
    let schema_version: i64 =
        sqlx::query("SELECT coalesce(max(version), 0) FROM _sqlx_migrations WHERE success")
            .fetch_one(&mut conn)
            .await?
            .try_get(0)?;
    conn.close().await?;
    let intact = verdict == "ok";
    Ok(FileSummary {
        intact,
        problem: (!intact).then_some(verdict),
        readings,
        runs,
        schema_version,
    })
}

/// What a restore did.
#[derive(Debug, Clone, PartialEq)]
pub struct Restored {
    pub summary: FileSummary,
    /// Where the database it replaced was kept, if there was one.
    pub kept: Option<std::path::PathBuf>,
}

/// Replaces the database of `data_dir` with the backup `from`, after
/// checking it: intact, and of a schema this version knows. The database
/// it replaces is checkpointed and kept beside it as
/// `reachcast.sqlite3.before-restore-<unix seconds>`. Refuses while another
/// process has the database open (its WAL file stays after ours closes).
pub async fn restore(from: &Path, data_dir: &Path) -> Result<Restored, StoreError> {
    let refuse = |m: String| Err(StoreError::Refused(m));
    let summary = check_file(from).await?;
    if !summary.intact {
        return refuse(format!(
            "{} fails PRAGMA integrity_check: {}",
            from.display(),
            summary.problem.as_deref().unwrap_or("?")
        ));
    }
    let known = super::MIGRATOR.iter().map(|m| m.version).max().unwrap_or(0);
    if summary.schema_version > known {
        return refuse(format!(
            "{} has schema version {}, newer than this reachcast knows ({known})",
            from.display(),
            summary.schema_version
        ));
    }
    let db = data_dir.join("reachcast.sqlite3");
    let io = |e: std::io::Error| StoreError::DataDir {
        path: data_dir.display().to_string(),
        source: e,
    };
    let kept = if db.exists() {
        checkpoint(&db).await?;
        let wal = data_dir.join("reachcast.sqlite3-wal");
        if wal.exists() {
            return refuse(
                "the database is open in another process (is the service running?); stop it \
                 before restoring"
                    .to_owned(),
            );
        }
        let stamp = chrono::Utc::now().timestamp();
        let kept = data_dir.join(format!("reachcast.sqlite3.before-restore-{stamp}"));
        std::fs::rename(&db, &kept).map_err(io)?;
        Some(kept)
    } else {
        std::fs::create_dir_all(data_dir).map_err(io)?;
        None
    };
    // Copy beside, flush, then rename: a crash leaves the old file or the
    // new one, never half of one.
    let part = data_dir.join("reachcast.sqlite3.restoring");
    std::fs::copy(from, &part).map_err(io)?;
    std::fs::File::open(&part)
        .and_then(|f| f.sync_all())
        .map_err(io)?;
    std::fs::rename(&part, &db).map_err(io)?;
    Ok(Restored { summary, kept })
}

/// Opens the database alone and closes it, so that SQLite checkpoints its
/// WAL into the main file and removes the WAL (when no other connection
/// has it open).
async fn checkpoint(db: &Path) -> Result<(), StoreError> {
    let mut conn = SqliteConnectOptions::from_str("sqlite:")?
        .filename(db)
        .journal_mode(SqliteJournalMode::Wal)
        .connect()
        .await?;
    sqlx::query("PRAGMA wal_checkpoint(TRUNCATE)")
        .execute(&mut conn)
        .await?;
    conn.close().await?;
    Ok(())
}

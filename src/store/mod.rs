//! Every SQL statement of the service lives in this module: rows go in,
//! domain types come out. Handlers and the scheduler never write SQL.
//!
//! The database is one SQLite file in the data directory, opened with:
//! - WAL journal, so readers never block the writer;
//! - `synchronous = FULL`, so a write the API acknowledged survives a power
//!   cut or a killed process (WAL with `NORMAL` may lose the last commits);
//! - foreign keys enforced;
//! - a busy timeout, so brief lock contention waits instead of failing.
//!
//! Migrations are embedded in the binary and applied at open.

use std::{str::FromStr, time::Duration};

use chrono::{DateTime, Utc};
use sqlx::{
    Row, SqlitePool,
    migrate::Migrator,
    sqlite::{SqliteConnectOptions, SqliteJournalMode, SqlitePoolOptions, SqliteSynchronous},
};

use crate::config::StorageConfig;

mod alerts;
mod audit;
pub mod backup;
mod forecasts;
pub use forecasts::{InflowUpload, ReachVersion};
mod gauges;
mod keys;
mod ratings;
mod readings;
mod retention;
mod time;
mod verification;

pub use alerts::{CapEntry, CurrentCap, NewCapMessage, OpenMessage};
pub use audit::{Audit, AuditEntry};
pub use gauges::SavedGauge;
pub use readings::{IngestOutcome, ReadingsQuery};
pub use retention::{Pruned, Retention};

/// The schema, compiled into the binary from `migrations/`.
pub static MIGRATOR: Migrator = sqlx::migrate!("./migrations");

/// A storage failure, with enough context to log; clients see a generic text.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("cannot create data directory {path}: {source}")]
    DataDir {
        path: String,
        source: std::io::Error,
    },
    /// The database failed. The cause is kept as a boxed error so that
    /// the store's surface names no backend's types (a second backend
    /// implements the same functions).
    #[error("database error: {0}")]
    Database(#[source] Box<dyn std::error::Error + Send + Sync>),
    #[error("migration error: {0}")]
    Migrate(#[source] Box<dyn std::error::Error + Send + Sync>),
    #[error("stored value does not decode: {0}")]
    Corrupt(String),
    /// A maintenance operation (backup, restore) that would be unsafe.
    #[error("{0}")]
    Refused(String),
}

/// A database error already logged and recorded in the write health (by
/// a failed commit or begin), so the method's watch does not log it again.
#[derive(Debug)]
struct Noted(sqlx::Error);

impl std::fmt::Display for Noted {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        self.0.fmt(f)
    }
}

impl std::error::Error for Noted {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        Some(&self.0)
    }
}

impl StoreError {
    fn noted(e: sqlx::Error) -> Self {
        StoreError::Database(Box::new(Noted(e)))
    }
}

impl From<sqlx::Error> for StoreError {
    fn from(e: sqlx::Error) -> Self {
        StoreError::Database(Box::new(e))
    }
}

impl From<sqlx::migrate::MigrateError> for StoreError {
    fn from(e: sqlx::migrate::MigrateError) -> Self {
        StoreError::Migrate(Box::new(e))
    }
}

/// Identity of the database, kept across restarts.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ServiceMeta {
    pub instance_id: String,
    pub created_at: DateTime<Utc>,
    pub last_start: DateTime<Utc>,
    pub start_count: i64,
}

/// Whether the schema in the file matches the one in the binary.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct MigrationStatus {
    /// Migrations embedded in this binary.
    pub known: usize,
    /// Of those, applied successfully to the database.
    pub applied: usize,
    /// Highest applied version.
    pub latest_version: Option<i64>,
}

impl MigrationStatus {
    pub fn complete(&self) -> bool {
        self.applied == self.known
    }
}

/// Handle to the database. Cheap to clone (the pool is reference-counted).
#[derive(Clone)]
pub struct Store {
    pool: SqlitePool,
    /// Serialises this process's write transactions. SQLite admits one
    /// writer at a time anyway; waiting here is a wake-up when the lock
    /// frees, where waiting in SQLite is its busy handler's sleep-and-retry.
    write_lock: std::sync::Arc<tokio::sync::Mutex<()>>,
    /// Told how long each write waited for the lock and a connection
    /// (the metrics' histogram); set once by the application.
    write_waits: std::sync::Arc<std::sync::OnceLock<WaitObserver>>,
    /// How the latest write transactions went, for `/ready`.
    write_health: std::sync::Arc<std::sync::Mutex<WriteHealth>>,
}

/// How this process's writes have gone: the latest that committed and the
/// latest that failed to begin or commit (a lock held too long by another
/// process, a full disk). Writing is failing while the failure is the
/// newer of the two.
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize)]
pub struct WriteHealth {
    #[serde(with = "crate::wire_time::option")]
    pub last_ok: Option<DateTime<Utc>>,
    pub last_failure: Option<WriteFailure>,
}

#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct WriteFailure {
    #[serde(with = "crate::wire_time")]
    pub at: DateTime<Utc>,
    pub error: String,
}

impl WriteHealth {
    pub fn failing(&self) -> bool {
        match (&self.last_failure, self.last_ok) {
            (None, _) => false,
            (Some(_), None) => true,
            (Some(f), Some(ok)) => f.at >= ok,
        }
    }
}

impl std::fmt::Debug for Store {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Store")
            .field("pool", &self.pool)
            .finish_non_exhaustive()
    }
}

/// Receives the wait of each write transaction before it began.
pub type WaitObserver = std::sync::Arc<dyn Fn(Duration) + Send + Sync>;

impl Store {
    /// Opens (creating if needed) the database in `cfg.data_dir`, applies
    /// migrations and records this start.
    pub async fn open(cfg: &StorageConfig) -> Result<Self, StoreError> {
        let store = Self::open_for_maintenance(cfg).await?;
        store.record_start().await?;
        Ok(store)
    }

    /// Opens and migrates the database without counting a service start
    /// (the `keys` command line uses this).
    pub async fn open_for_maintenance(cfg: &StorageConfig) -> Result<Self, StoreError> {
        std::fs::create_dir_all(&cfg.data_dir).map_err(|source| StoreError::DataDir {
            path: cfg.data_dir.display().to_string(),
            source,
        })?;
        let path = cfg.data_dir.join("reachcast.sqlite3");
        let mut options = SqliteConnectOptions::from_str("sqlite:")?
            .filename(&path)
            .create_if_missing(true)
            .journal_mode(SqliteJournalMode::Wal)
            .synchronous(SqliteSynchronous::Full)
            .foreign_keys(true)
            .busy_timeout(Duration::from_millis(cfg.busy_timeout_ms));
        if cfg.max_size_mib > 0 {
            // Pages of SQLite's default 4 KiB, the size this file is made with.
            options = options.pragma("max_page_count", (cfg.max_size_mib * 256).to_string());
        }
        let pool = SqlitePoolOptions::new()
            .max_connections(cfg.max_connections)
            .connect_with(options)
            .await?;
        MIGRATOR.run(&pool).await?;
        Ok(Self {
            pool,
            write_lock: std::sync::Arc::default(),
            write_waits: std::sync::Arc::default(),
            write_health: std::sync::Arc::default(),
        })
    }

    /// Begins a write transaction (`BEGIN IMMEDIATE`, so the write lock is
    /// taken at the start and a read-then-write never fails midway), after
    /// taking this process's writer lock. Keep the guard until commit.
    /// Commits a write transaction and notes how it went.
    async fn commit(&self, tx: sqlx::Transaction<'static, sqlx::Sqlite>) -> Result<(), StoreError> {
        let done = tx.commit().await;
        self.note_write(done.as_ref().map(|_| ()));
        done.map_err(StoreError::noted)
    }

    /// Notes a database failure of a write method's body (a statement
    /// refused for a full database fails before the commit).
    fn watched<T>(&self, r: Result<T, StoreError>) -> Result<T, StoreError> {
        if let Err(StoreError::Database(e)) = &r
            && !e.is::<Noted>()
        {
            self.note_failure(e.to_string());
        }
        r
    }

    fn note_failure(&self, error: String) {
        if let Ok(mut h) = self.write_health.lock() {
            tracing::error!(error = %error, "a database write failed; nothing of it was stored");
            h.last_failure = Some(WriteFailure {
                at: Utc::now(),
                error,
            });
        }
    }

    fn note_write(&self, outcome: Result<(), &sqlx::Error>) {
        let Ok(mut h) = self.write_health.lock() else {
            return;
        };
        match outcome {
            Ok(()) => h.last_ok = Some(Utc::now()),
            Err(e) => {
                tracing::error!(error = %e, "a database write failed; nothing of it was stored");
                h.last_failure = Some(WriteFailure {
                    at: Utc::now(),
                    error: e.to_string(),
                });
            }
        }
    }

    /// How this process's writes have gone.
    pub fn write_health(&self) -> WriteHealth {
        self.write_health
            .lock()
            .map(|h| h.clone())
            .unwrap_or_default()
    }

    /// Reports every write's wait to `observe` from now on (the first
    /// observer set stays).
    pub fn observe_write_waits(&self, observe: WaitObserver) {
        let _ = self.write_waits.set(observe);
    }

    async fn begin_write(
        &self,
    ) -> Result<
        (
            tokio::sync::OwnedMutexGuard<()>,
            sqlx::Transaction<'static, sqlx::Sqlite>,
        ),
        StoreError,
    > {
        let asked = std::time::Instant::now();
        let guard = self.write_lock.clone().lock_owned().await;
        let tx = match self.pool.begin_with("BEGIN IMMEDIATE").await {
            Ok(tx) => tx,
            Err(e) => {
                self.note_write(Err(&e));
                return Err(StoreError::noted(e));
            }
        };
        if let Some(observe) = self.write_waits.get() {
            observe(asked.elapsed());
        }
        Ok((guard, tx))
    }

    /// The pool, for the store's own tests.
    #[cfg(test)]
    pub(crate) fn pool(&self) -> &SqlitePool {
        &self.pool
    }

    /// Open and idle connections of the pool (for `/metrics`).
    pub fn pool_stats(&self) -> (u32, usize) {
        (self.pool.size(), self.pool.num_idle())
    }

    /// Closes every connection, checkpointing the WAL.
    pub async fn close(&self) {
        self.pool.close().await;
    }

    async fn record_start(&self) -> Result<(), StoreError> {
        let now = time::now_text();
        sqlx::query(
            "INSERT INTO service_meta (id, instance_id, created_at, last_start, start_count)
             VALUES (1, lower(hex(randomblob(16))), ?1, ?1, 1)
             ON CONFLICT (id) DO UPDATE
               SET last_start = excluded.last_start, start_count = start_count + 1",
        )
        .bind(&now)
        .execute(&self.pool)
        .await?;
        Ok(())
    }

    /// Identity and start history of this database.
    pub async fn service_meta(&self) -> Result<ServiceMeta, StoreError> {
        let row = sqlx::query(
            "SELECT instance_id, created_at, last_start, start_count FROM service_meta WHERE id = 1",
        )
        .fetch_one(&self.pool)
        .await?;
        Ok(ServiceMeta {
            instance_id: row.try_get("instance_id")?,
            created_at: time::read(
                "service_meta.created_at",
                &row.try_get::<String, _>("created_at")?,
            )?,
            last_start: time::read(
                "service_meta.last_start",
                &row.try_get::<String, _>("last_start")?,
            )?,
            start_count: row.try_get("start_count")?,
        })
    }

    /// Round trip to the database; fails when the file is unreachable.
    pub async fn ping(&self) -> Result<(), StoreError> {
        sqlx::query("SELECT 1").execute(&self.pool).await?;
        Ok(())
    }

    /// Compares the applied migrations with the embedded ones.
    pub async fn migration_status(&self) -> Result<MigrationStatus, StoreError> {
        let applied: Vec<(i64, bool)> =
            sqlx::query_as("SELECT version, success FROM _sqlx_migrations ORDER BY version")
                .fetch_all(&self.pool)
                .await?;
        let known: Vec<i64> = MIGRATOR
            .iter()
            .filter(|m| !m.migration_type.is_down_migration())
            .map(|m| m.version)
            .collect();
        let ok = known
            .iter()
            .filter(|v| applied.iter().any(|(a, s)| a == *v && *s))
            .count();
        Ok(MigrationStatus {
            known: known.len(),
            applied: ok,
            latest_version: applied.iter().filter(|(_, s)| *s).map(|(v, _)| *v).max(),
        })
    }

    /// `PRAGMA integrity_check`; `true` when SQLite answers `ok`.
    pub async fn integrity_ok(&self) -> Result<bool, StoreError> {
        let (answer,): (String,) = sqlx::query_as("PRAGMA integrity_check")
            .fetch_one(&self.pool)
            .await?;
        Ok(answer == "ok")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cfg(dir: &std::path::Path) -> StorageConfig {
        StorageConfig {
            data_dir: dir.to_owned(),
            ..StorageConfig::default()
        }
    }

    #[tokio::test]
    async fn opens_with_durable_pragmas() {
        let dir = tempfile::tempdir().expect("temp dir");
        let store = Store::open(&cfg(dir.path())).await.expect("open");
        let (mode,): (String,) = sqlx::query_as("PRAGMA journal_mode")
            .fetch_one(store.pool())
            .await
            .expect("journal_mode");
        assert_eq!(mode.to_lowercase(), "wal");
        // 2 = FULL (SQLite documentation, PRAGMA synchronous).
        let (sync,): (i64,) = sqlx::query_as("PRAGMA synchronous")
            .fetch_one(store.pool())
            .await
            .expect("synchronous");
        assert_eq!(sync, 2);
        let (fk,): (i64,) = sqlx::query_as("PRAGMA foreign_keys")
            .fetch_one(store.pool())
            .await
            .expect("foreign_keys");
        assert_eq!(fk, 1);
        let status = store.migration_status().await.expect("status");
        assert!(status.complete(), "{status:?}");
        assert!(status.known >= 1);
        assert!(store.integrity_ok().await.expect("integrity"));
    }

    #[tokio::test]
    async fn reopening_keeps_identity_and_counts_starts() {
        let dir = tempfile::tempdir().expect("temp dir");
        let first = Store::open(&cfg(dir.path())).await.expect("open");
        let a = first.service_meta().await.expect("meta");
        first.close().await;
        let second = Store::open(&cfg(dir.path())).await.expect("reopen");
        let b = second.service_meta().await.expect("meta");
        assert_eq!(a.instance_id, b.instance_id);
        assert_eq!(a.created_at, b.created_at);
        assert_eq!(b.start_count, a.start_count + 1);
        assert_eq!(a.instance_id.len(), 32);
    }
}

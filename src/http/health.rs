//! Liveness and readiness probes.
//!
//! `/health` answers as long as the process can serve HTTP: a supervisor
//! restarts the service when it stops answering. `/ready` also checks that
//! the database answers and that its schema matches this binary, so a load
//! balancer sends traffic only to an instance that can do its job.

use axum::{Json, Router, extract::State, http::StatusCode, routing::get};
use chrono::{DateTime, Utc};
use serde::Serialize;

use super::{AppState, error::Problem};
use crate::store::{MigrationStatus, ServiceMeta};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/health", get(health))
        .route("/ready", get(ready))
}

#[derive(Serialize)]
struct Health {
    status: &'static str,
    version: &'static str,
}

async fn health() -> Json<Health> {
    Json(Health {
        status: "ok",
        version: env!("CARGO_PKG_VERSION"),
    })
}

#[derive(Serialize)]
struct Ready {
    status: &'static str,
    database: &'static str,
    migrations: MigrationStatus,
    instance: Instance,
    disk: Disk,
    /// The latest write that committed and the latest that failed.
    writes: crate::store::WriteHealth,
    /// Per reach: whether its scheduler runs, and its last good run's age.
    reaches: Vec<ReachReady>,
}

#[derive(Serialize)]
struct Disk {
    free_bytes: u64,
    floor_bytes: u64,
}

#[derive(Serialize)]
struct ReachReady {
    reach: String,
    scheduler: &'static str,
    last_good_run_age_s: Option<i64>,
}

/// Bytes free to this user on the file system that holds `dir`
/// (`statvfs`: available blocks × fragment size).
fn free_bytes(dir: &std::path::Path) -> std::io::Result<u64> {
    let s = rustix::fs::statvfs(dir)?;
    Ok(s.f_bavail.saturating_mul(s.f_frsize))
}

/// The database's identity on the wire, times in the one wire form.
#[derive(Serialize)]
struct Instance {
    instance_id: String,
    #[serde(with = "crate::wire_time")]
    created_at: DateTime<Utc>,
    #[serde(with = "crate::wire_time")]
    last_start: DateTime<Utc>,
    start_count: i64,
}

impl From<ServiceMeta> for Instance {
    fn from(m: ServiceMeta) -> Self {
        Self {
            instance_id: m.instance_id,
            created_at: m.created_at,
            last_start: m.last_start,
            start_count: m.start_count,
        }
    }
}

async fn ready(State(state): State<AppState>) -> Result<Json<Ready>, Problem> {
    let unavailable = |detail: String| {
        Problem::new(
            StatusCode::SERVICE_UNAVAILABLE,
            "not-ready",
            "Service not ready",
        )
        .detail(detail)
    };
    state.store.ping().await.map_err(|e| {
        tracing::warn!(error = %e, "readiness: database unreachable");
        unavailable("database unreachable".to_owned())
    })?;
    let migrations = state.store.migration_status().await.map_err(|e| {
        tracing::warn!(error = %e, "readiness: cannot read migrations");
        unavailable("cannot read schema version".to_owned())
    })?;
    if !migrations.complete() {
        return Err(unavailable(format!(
            "{} of {} migrations applied",
            migrations.applied, migrations.known
        )));
    }
    let instance = state.store.service_meta().await.map_err(|e| {
        tracing::warn!(error = %e, "readiness: cannot read service identity");
        unavailable("cannot read service identity".to_owned())
    })?;
    let disk = disk_check(&state).map_err(unavailable)?;
    let writes = state.store.write_health();
    if let Some(f) = writes.last_failure.as_ref().filter(|_| writes.failing()) {
        return Err(unavailable(format!(
            "database writes are failing since {}: {}; new data is refused, nothing acknowledged is lost",
            crate::wire_time::format(f.at),
            f.error
        )));
    }
    let stopped = state.forecaster.stopped_workers();
    if let Some(r) = stopped.first() {
        return Err(unavailable(format!(
            "the forecast scheduler of reach `{r}` has stopped; restart the service"
        )));
    }
    let reaches = reach_states(&state).await.map_err(|e| {
        tracing::warn!(error = %e, "readiness: cannot read the runs");
        unavailable("cannot read the forecast runs".to_owned())
    })?;
    if let Some(r) = clock_behind(&reaches) {
        return Err(unavailable(format!(
            "the system clock is {} s behind the last good run of reach `{}`: it went back, \
             so issue times, ages and staleness would be wrong; correct the clock (NTP)",
            -r.last_good_run_age_s.unwrap_or_default(),
            r.reach
        )));
    }
    Ok(Json(Ready {
        status: "ready",
        database: "ok",
        migrations,
        instance: instance.into(),
        disk,
        writes,
        reaches,
    }))
}

/// Free space under the data directory against `storage.min_free_mib`.
fn disk_check(state: &AppState) -> Result<Disk, String> {
    let dir = &state.config.storage.data_dir;
    let floor_bytes = state
        .config
        .storage
        .min_free_mib
        .saturating_mul(1024 * 1024);
    let free = free_bytes(dir).map_err(|e| {
        tracing::warn!(error = %e, "readiness: cannot read free disk space");
        format!("cannot read the free space under {}", dir.display())
    })?;
    if free < floor_bytes {
        tracing::error!(
            free_bytes = free,
            floor_bytes,
            "readiness: the disk is nearly full"
        );
        return Err(format!(
            "only {} MiB free under the data directory (storage.min_free_mib = {})",
            free / (1024 * 1024),
            state.config.storage.min_free_mib
        ));
    }
    Ok(Disk {
        free_bytes: free,
        floor_bytes,
    })
}

/// More than this behind a stored run's finish time, the clock went back
/// (a run's own timing cannot explain it).
const CLOCK_TOLERANCE_S: i64 = 60;

/// The reach whose last good run finished furthest in the future of
/// now, beyond the tolerance.
fn clock_behind(reaches: &[ReachReady]) -> Option<&ReachReady> {
    reaches
        .iter()
        .filter(|r| {
            r.last_good_run_age_s
                .is_some_and(|a| a < -CLOCK_TOLERANCE_S)
        })
        .min_by_key(|r| r.last_good_run_age_s)
}

async fn reach_states(state: &AppState) -> Result<Vec<ReachReady>, crate::store::StoreError> {
    let now = Utc::now();
    let mut out = Vec::new();
    for r in state.store.reaches().await? {
        let finished = state.store.last_good_run_finished(&r.reach_id).await?;
        out.push(ReachReady {
            last_good_run_age_s: finished.map(|t| (now - t).num_seconds()),
            scheduler: "running",
            reach: r.reach_id,
        });
    }
    Ok(out)
}

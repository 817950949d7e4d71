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
    Ok(Json(Ready {
        status: "ready",
        database: "ok",
        migrations,
        instance: instance.into(),
    }))
}

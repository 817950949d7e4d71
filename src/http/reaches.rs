//! Reach descriptions: `GET /api/reaches`, `GET|PUT /api/reaches/{reach}`
//! (PUT: admin). A PUT stores a new version; earlier versions stay.

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, State},
    http::StatusCode,
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::{DateTime, Utc};
use serde::Serialize;

use super::{
    AppState,
    auth::{Admin, ReadAccess, RequireRole},
    error::{ApiError, Problem, parse_json},
};
use crate::{
    CAUTION,
    forecast::{
        budget::Refusal,
        record::{RunRecord, RunStatus},
        spec::{ReachSpec, Units},
    },
    store::ReachVersion,
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/reaches", get(list_reaches))
        .route("/reaches/{reach}", get(get_reach).put(put_reach))
}

/// The newest version of a reach, or a 404 problem naming it.
pub(super) async fn find_reach(state: &AppState, id: &str) -> Result<ReachVersion, ApiError> {
    state
        .store
        .latest_reach(id)
        .await?
        .ok_or_else(|| Problem::missing("reach", format!("there is no reach `{id}`")).into())
}

#[derive(Serialize)]
struct ReachListItem {
    id: String,
    name: String,
    version: i64,
    time_zone: String,
    units: Units,
    upstream_gauge: Option<String>,
    latest_run: Option<RunBrief>,
}

/// A run in a list: its outcome without provenance or results.
#[derive(Serialize)]
pub(super) struct RunBrief {
    id: i64,
    status: RunStatus,
    #[serde(with = "crate::wire_time")]
    started_at: DateTime<Utc>,
    #[serde(with = "crate::wire_time::option")]
    finished_at: Option<DateTime<Utc>>,
    error: Option<String>,
}

impl From<&RunRecord> for RunBrief {
    fn from(r: &RunRecord) -> Self {
        Self {
            id: r.id,
            status: r.status,
            started_at: r.started_at,
            finished_at: r.finished_at,
            error: r.error.clone(),
        }
    }
}

async fn list_reaches(_: ReadAccess, State(state): State<AppState>) -> Result<Response, ApiError> {
    let mut out = Vec::new();
    for r in state.store.reaches().await? {
        let latest = state.store.latest_run(&r.reach_id, None).await?;
        out.push(ReachListItem {
            id: r.reach_id.clone(),
            name: r.spec.name.clone(),
            version: r.version,
            time_zone: r.spec.service.time_zone.clone(),
            units: r.spec.service.units,
            upstream_gauge: r.spec.service.upstream_gauge.clone(),
            latest_run: latest.as_ref().map(RunBrief::from),
        });
    }
    Ok(Json(serde_json::json!({"caution": CAUTION, "reaches": out})).into_response())
}

async fn get_reach(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Response, ApiError> {
    let r = find_reach(&state, &id).await?;
    Ok(Json(serde_json::json!({
        "id": r.reach_id,
        "version": r.version,
        "created_at": crate::wire_time::format(r.created_at),
        "document": r.spec,
    }))
    .into_response())
}

async fn put_reach(
    auth: RequireRole<Admin>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    if !crate::gauge::valid_slug(&id) {
        return Err(Problem::invalid("reach", "a reach id is 1 to 64 of a-z, 0-9 and -").into());
    }
    // Parse with the same strict reader as the offline command, so the
    // error names the JSON path of the bad field.
    let _: serde_json::Value = parse_json(&body)?;
    let text = std::str::from_utf8(&body)
        .map_err(|_| Problem::malformed("body", "the body is not UTF-8".to_owned()))?;
    let spec = ReachSpec::from_json(text)
        .map_err(|e| Problem::invalid(e.field.clone(), e.message.clone()))?;
    // Geometry is checked by building the computational nodes once, and
    // the cost of a run against the budgets.
    let f = &state.config.forecast;
    crate::forecast::budget::admit(&spec, &f.budget(), f.window_s()).map_err(|e| match e {
        Refusal::Invalid(s) => Problem::invalid(s.field, s.message),
        Refusal::OverBudget(o) => Problem::invalid(o.field, o.message).with("budget", o.budget),
    })?;
    let existed = state.store.latest_reach(&id).await?.is_some();
    let version = state
        .store
        .put_reach(&id, &spec, Some(auth.caller().key_id()))
        .await?;
    state.forecaster.ensure_worker(&id);
    let status = if existed {
        StatusCode::OK
    } else {
        StatusCode::CREATED
    };
    Ok((
        status,
        Json(serde_json::json!({"id": id, "version": version})),
    )
        .into_response())
}

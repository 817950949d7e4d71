//! Forecast runs: `GET /api/reaches/{reach}/runs` (newest first, `limit`),
//! `GET /api/runs/{id}` (with results), and `POST /api/reaches/{reach}/runs`
//! (forecaster; `wait=true` answers when the run has finished).

use axum::{
    Json, Router,
    extract::{Path, State},
    http::StatusCode,
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    AppState,
    auth::{Forecasting, ReadAccess, RequireRole},
    error::{ApiError, Problem},
    query::Params,
    reaches::find_reach,
};
use crate::{
    CAUTION,
    forecast::{
        digest::ResultsDigest,
        record::{RunProvenance, RunRecord, RunStatus, StoredResults},
    },
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/reaches/{reach}/runs", get(list_runs).post(trigger))
        .route("/runs/{id}", get(run_by_id))
}

/// A run as the API shows it.
#[derive(Serialize)]
struct RunView<'a> {
    id: i64,
    reach: &'a str,
    reach_version: i64,
    status: RunStatus,
    #[serde(with = "crate::wire_time")]
    started_at: DateTime<Utc>,
    #[serde(with = "crate::wire_time::option")]
    finished_at: Option<DateTime<Utc>>,
    error: Option<&'a str>,
    provenance: &'a RunProvenance,
    /// When retention replaced the results by their digest; null for a
    /// run kept whole.
    #[serde(with = "crate::wire_time::option")]
    pruned_at: Option<DateTime<Utc>>,
    /// Only for a single run.
    #[serde(skip_serializing_if = "Option::is_none")]
    results: Option<&'a StoredResults>,
    /// Only for a single run whose results were pruned.
    #[serde(skip_serializing_if = "Option::is_none")]
    digest: Option<&'a ResultsDigest>,
}

impl<'a> RunView<'a> {
    fn of(r: &'a RunRecord) -> Self {
        Self {
            id: r.id,
            reach: &r.reach_id,
            reach_version: r.reach_version,
            status: r.status,
            started_at: r.started_at,
            finished_at: r.finished_at,
            error: r.error.as_deref(),
            provenance: &r.provenance,
            pruned_at: r.pruned_at,
            results: None,
            digest: None,
        }
    }
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ListParams {
    limit: Option<i64>,
}

async fn list_runs(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
    Params(params): Params<ListParams>,
) -> Result<Response, ApiError> {
    find_reach(&state, &id).await?;
    let limit = params.limit.unwrap_or(50);
    if !(1..=1000).contains(&limit) {
        return Err(Problem::invalid("limit", "must be between 1 and 1000").into());
    }
    let runs = state.store.runs(&id, limit).await?;
    Ok(Json(serde_json::json!({
        "caution": CAUTION,
        "runs": runs.iter().map(RunView::of).collect::<Vec<_>>(),
    }))
    .into_response())
}

#[derive(Serialize)]
struct RunDoc<'a> {
    caution: &'static str,
    #[serde(flatten)]
    run: RunView<'a>,
}

async fn run_by_id(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Response, ApiError> {
    let n: i64 = id
        .parse()
        .map_err(|_| Problem::invalid("id", format!("`{id}` is not a run id")))?;
    let run = state
        .store
        .run(n)
        .await?
        .ok_or_else(|| Problem::missing("id", format!("there is no run {n}")))?;
    let mut view = RunView::of(&run);
    view.results = run.results.as_ref();
    view.digest = run.digest.as_ref();
    Ok(Json(RunDoc {
        caution: CAUTION,
        run: view,
    })
    .into_response())
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct TriggerParams {
    #[serde(default)]
    wait: bool,
}

async fn trigger(
    _: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    Params(params): Params<TriggerParams>,
) -> Result<Response, ApiError> {
    find_reach(&state, &id).await?;
    if params.wait {
        let summary = state
            .forecaster
            .run_now(&id)
            .await
            .map_err(|e| ApiError::Internal(anyhow::anyhow!(e)))?;
        return Ok(Json(summary).into_response());
    }
    let f = state.forecaster.clone();
    let reach = id.clone();
    tokio::spawn(async move {
        if let Err(e) = f.run_now(&reach).await {
            tracing::error!(reach, error = %e, "triggered run could not start");
        }
    });
    Ok((
        StatusCode::ACCEPTED,
        Json(serde_json::json!({"reach": id, "queued": true})),
    )
        .into_response())
}

//! `POST /api/reaches/{reach}/hindcasts` (forecaster): replays a past
//! period as if live, each issue time from what counted as known then,
//! stores the runs as hindcast runs (never the current forecast, never
//! alerting) and verifies them; answers when done with every run made.

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, State},
    response::{IntoResponse, Response},
    routing::post,
};
use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    AppState,
    auth::{Forecasting, RequireRole},
    error::{ApiError, Problem, parse_json},
    reaches::find_reach,
};
use crate::{
    forecast::{hindcast, record::Knowledge},
    service::hindcast::HindcastRun,
};

pub fn router() -> Router<AppState> {
    Router::new().route("/reaches/{reach}/hindcasts", post(start))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct HindcastBody {
    #[serde(with = "crate::wire_time")]
    from: DateTime<Utc>,
    #[serde(with = "crate::wire_time")]
    to: DateTime<Utc>,
    #[serde(deserialize_with = "crate::wire_int::whole")]
    every_minutes: u64,
    #[serde(default)]
    knowledge: Knowledge,
}

#[derive(Debug, Serialize)]
struct HindcastAnswer {
    caution: &'static str,
    reach: String,
    knowledge: Knowledge,
    runs: Vec<HindcastRun>,
}

async fn start(
    _: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    let b: HindcastBody = parse_json(&body)?;
    find_reach(&state, &id).await?;
    let max = state.config.forecast.max_hindcast_runs;
    let plan = hindcast::plan(b.from, b.to, b.every_minutes, b.knowledge, max, Utc::now())
        .map_err(|e| Problem::invalid(e.field, e.detail))?;
    let runs = state
        .forecaster
        .hindcast(&id, &plan)
        .await
        .map_err(|e| ApiError::Internal(anyhow::anyhow!(e)))?;
    Ok(Json(HindcastAnswer {
        caution: crate::CAUTION,
        reach: id,
        knowledge: plan.knowledge,
        runs,
    })
    .into_response())
}

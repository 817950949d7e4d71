//! `/api/gauges`: describe gauges (admin) and read them (public by default).
//!
//! The fields are the domain's [`GaugeSpec`], checked by the domain
//! ([`GaugeSpec::check`]); this file adds only the wire form of a stored
//! gauge (its id and its times) and the reach lookup.

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, State},
    http::StatusCode,
    response::IntoResponse,
    routing::get,
};
use chrono::{DateTime, Utc};
use serde::Serialize;

use super::{
    AppState,
    auth::{Admin, ReadAccess, RequireRole},
    error::{ApiError, Problem, parse_json},
};
use crate::gauge::{FieldError, Gauge, GaugeSpec, check_id};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/gauges", get(list))
        .route("/gauges/{gauge}", get(one).put(put))
}

/// A stored gauge on the wire: its id, the fields of its description
/// under their own names, and its times in the one wire form.
#[derive(Debug, Serialize)]
pub struct GaugeOut<'a> {
    id: &'a str,
    #[serde(flatten)]
    spec: &'a GaugeSpec,
    #[serde(with = "crate::wire_time")]
    created_at: DateTime<Utc>,
    #[serde(with = "crate::wire_time")]
    updated_at: DateTime<Utc>,
}

impl<'a> From<&'a Gauge> for GaugeOut<'a> {
    fn from(g: &'a Gauge) -> Self {
        Self {
            id: &g.id,
            spec: &g.spec,
            created_at: g.created_at,
            updated_at: g.updated_at,
        }
    }
}

/// The gauge with this id, or a 404 problem naming it.
pub async fn find_gauge(state: &AppState, id: &str) -> Result<Gauge, ApiError> {
    state.store.gauge(id).await?.ok_or_else(|| {
        Problem::new(StatusCode::NOT_FOUND, "unknown-gauge", "Unknown gauge")
            .detail(format!("there is no gauge `{id}`"))
            .field("gauge")
            .into()
    })
}

fn invalid(e: FieldError) -> Problem {
    Problem::invalid(e.field, e.message)
}

/// serde reads a rating curve sent as an array (which has no `kind`)
/// element by element, so the path would say `rating_curve[0]`; the curve
/// as a whole is what is wrong.
fn whole_curve(mut p: Problem) -> Problem {
    if p.field
        .as_deref()
        .is_some_and(|f| f.starts_with("rating_curve["))
    {
        p.field = Some("rating_curve".to_owned());
    }
    p
}

async fn list(_: ReadAccess, State(state): State<AppState>) -> Result<impl IntoResponse, ApiError> {
    let gauges = state.store.gauges().await?;
    Ok(Json(gauges.iter().map(GaugeOut::from).collect::<Vec<_>>()).into_response())
}

async fn one(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<impl IntoResponse, ApiError> {
    let gauge = find_gauge(&state, &id).await?;
    Ok(Json(GaugeOut::from(&gauge)).into_response())
}

async fn put(
    auth: RequireRole<Admin>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<impl IntoResponse, ApiError> {
    check_id(&id).map_err(invalid)?;
    let spec = parse_json::<GaugeSpec>(&body)
        .map_err(whole_curve)?
        .check()
        .map_err(invalid)?;
    if let Some(reach) = &spec.reach
        && !state.store.reach_exists(reach).await?
    {
        return Err(Problem::conflict("reach", format!("there is no reach `{reach}`")).into());
    }
    let saved = state
        .store
        .put_gauge(&id, &spec, auth.caller().key_id())
        .await?;
    let status = if saved.created {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    Ok((status, Json(GaugeOut::from(&saved.gauge))).into_response())
}

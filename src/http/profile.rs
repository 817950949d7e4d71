//! `GET /api/reaches/{reach}/profile`: the longitudinal profile of the
//! latest good run seen now — per node the bed, the water surface now and
//! the highest forecast water surface (the envelope); the bank tops of the
//! surveyed sections; the points of interest with their levels. Read like
//! the forecast (same access, units and validator rules).

use axum::{
    Json, Router,
    extract::{Path, State},
    http::{HeaderMap, StatusCode},
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    AppState,
    auth::ReadAccess,
    conditional::{not_modified, with_etag},
    error::{ApiError, Problem},
    forecast::{forecast_etag, freshness_of, load_latest},
    query::Params,
};
use crate::forecast::{
    ensemble::summary::PercentileTrace,
    profile::{Banks, ProfileNode, ProfilePoint, profile},
    record::EnsembleRecord,
    spec::Units,
    view::{Freshness, UnitNames},
};

pub fn router() -> Router<AppState> {
    Router::new().route("/reaches/{reach}/profile", get(get_profile))
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct ProfileParams {
    units: Option<Units>,
}

/// The answer, lengths (chainage included) in the unit system asked for.
#[derive(Debug, Serialize)]
struct ProfileDoc {
    caution: &'static str,
    reach: String,
    reach_name: String,
    run_id: i64,
    #[serde(with = "crate::wire_time")]
    issued_at: DateTime<Utc>,
    #[serde(with = "crate::wire_time")]
    now: DateTime<Utc>,
    units: UnitNames,
    freshness: Freshness,
    nodes: Vec<ProfileNode>,
    banks: Vec<Banks>,
    points: Vec<ProfilePoint>,
    /// Per ensemble percentile, the members' highest water surface at each
    /// node (empty without an ensemble).
    highest_percentiles: Vec<PercentileTrace>,
}

async fn get_profile(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
    Params(params): Params<ProfileParams>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let loaded = load_latest(&state, &id).await?;
    let now = Utc::now();
    let fresh = freshness_of(&state, &loaded, now).await?;
    let units = params.units.unwrap_or(loaded.reach.spec.service.units);
    let etag = forecast_etag(&loaded.run, &fresh, units, "profile");
    if not_modified(&headers, &etag) {
        return Ok(with_etag(StatusCode::NOT_MODIFIED.into_response(), &etag));
    }
    let Some(stored) = loaded.results()?.profile.clone() else {
        return Err(Problem::missing(
            "reach",
            format!(
                "run {} of reach `{id}` was made before profiles were stored; \
                 the next run will have one",
                loaded.run.id
            ),
        )
        .into());
    };
    let ensemble = loaded
        .run
        .ensemble
        .as_ref()
        .and_then(EnsembleRecord::summary);
    let p = profile(
        &stored,
        &loaded.reach.spec,
        loaded.results()?,
        ensemble,
        units,
        now,
    );
    let body = ProfileDoc {
        caution: crate::CAUTION,
        reach: loaded.reach.reach_id.clone(),
        reach_name: loaded.reach.spec.name.clone(),
        run_id: loaded.run.id,
        issued_at: stored.issued,
        now,
        units: UnitNames::of(units),
        freshness: fresh,
        nodes: p.nodes,
        banks: p.banks,
        points: p.points,
        highest_percentiles: p.highest_percentiles,
    };
    Ok(with_etag(Json(&body).into_response(), &etag))
}

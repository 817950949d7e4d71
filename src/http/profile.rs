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
    profile::{Banks, ProfileChannel, ProfileNode, ProfilePoint, profile, resolve_channel},
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
    /// A network's channel to draw; absent: its main stem.
    channel: Option<String>,
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
    #[serde(skip_serializing_if = "Option::is_none")]
    channel: Option<String>,
    channels: Vec<ProfileChannel>,
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
    // An unknown name is refused before any tag is compared; a channel's
    // name is free text, so the tag names it by its index.
    let channel = resolve_channel(&loaded.reach.spec, params.channel.as_deref())
        .map_err(|e| Problem::missing("channel", e.to_string()))?;
    let repr = channel.map_or("profile".to_owned(), |i| format!("profile-c{i}"));
    let etag = forecast_etag(&loaded.run, &fresh, units, &repr);
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
        (units, now),
        channel,
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
        channel: p.channel,
        channels: p.channels,
        nodes: p.nodes,
        banks: p.banks,
        points: p.points,
        highest_percentiles: p.highest_percentiles,
    };
    Ok(with_etag(Json(&body).into_response(), &etag))
}

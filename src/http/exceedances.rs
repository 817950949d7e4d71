//! `GET /api/exceedances`: every (point, level) situation at the latest
//! good run of each reach, for alerting clients that poll. The answer
//! changes only when a run lands, so it is serialized once per board
//! version, unit system and filter (`reach=`, `exceeded=`,
//! `min_severity=`), and served with a weak `ETag` that changes only when
//! the meaning does (`If-None-Match` → 304).

use std::sync::RwLock;

use axum::{
    Router,
    body::{Body, Bytes},
    extract::State,
    http::{HeaderMap, HeaderValue, StatusCode, header},
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    AppState,
    auth::ReadAccess,
    conditional::{fnv, not_modified, with_etag},
    error::ApiError,
    query::Params,
};
use crate::{
    CAUTION,
    forecast::{
        cap::Situation,
        levels::LevelKind,
        spec::{Severity, Units},
        view::{FT_PER_M, UnitNames},
    },
};

pub fn router() -> Router<AppState> {
    Router::new().route("/exceedances", get(exceedances))
}

/// Serialized answers, keyed by board version, units and filter (a
/// filter's reach must exist, so the entries of one version are bounded).
#[derive(Default)]
pub struct ExceedanceCache {
    entries: RwLock<Vec<CachedBoard>>,
}

/// One cached answer: board version, units, filter, body, `ETag`.
type CachedBoard = (u64, Units, Filter, Bytes, String);

/// Which items an alerting client asks for; every part optional.
#[derive(Debug, Clone, Default, PartialEq, Deserialize)]
struct Filter {
    /// Only this reach (its id).
    reach: Option<String>,
    /// Only items that are (or are not) exceeded from now on.
    exceeded: Option<bool>,
    /// Only levels of at least this CAP severity.
    min_severity: Option<Severity>,
}

impl Filter {
    fn keeps(&self, s: &Situation) -> bool {
        self.reach.as_ref().is_none_or(|r| *r == s.reach_id)
            && self.exceeded.is_none_or(|e| e == s.exceeded)
            && self.min_severity.is_none_or(|m| s.severity >= m)
    }
}

/// One situation as this endpoint names its fields (lengths in the unit
/// system asked for).
#[derive(Debug, Clone, Serialize)]
struct Item<'a> {
    /// `{reach}/{point_id}/{level_id}`: stable across display renames.
    id: String,
    reach: &'a str,
    reach_name: &'a str,
    point_id: &'a str,
    point: &'a str,
    level_id: &'a str,
    level_kind: LevelKind,
    /// The level's display name.
    level: &'a str,
    /// Deprecated copy of `level`, kept for clients of the first release.
    threshold: &'a str,
    elevation: f64,
    severity: Severity,
    exceeded: bool,
    above_now: bool,
    #[serde(with = "crate::wire_time::option")]
    above_since: Option<DateTime<Utc>>,
    above_since_start: bool,
    #[serde(with = "crate::wire_time::option")]
    first_above: Option<DateTime<Utc>>,
    #[serde(with = "crate::wire_time::option")]
    back_below: Option<DateTime<Utc>>,
    crest_stage: f64,
    #[serde(with = "crate::wire_time")]
    crest_time: DateTime<Utc>,
    margin: f64,
    run_id: i64,
    #[serde(with = "crate::wire_time")]
    run_finished: DateTime<Utc>,
    stale: bool,
    /// Share of ensemble members reaching the level (0–1), seen from the
    /// run's issue time; `null` without an ensemble.
    probability: Option<f64>,
    /// Members that share is of.
    members: Option<usize>,
    members_reaching: Option<usize>,
    #[serde(with = "crate::wire_time::option")]
    earliest_first_above: Option<DateTime<Utc>>,
    #[serde(with = "crate::wire_time::option")]
    median_first_above: Option<DateTime<Utc>>,
    /// Active only because enough members reach the level.
    members_only: bool,
    /// CAP certainty of the situation (`Likely`, `Possible`).
    certainty: &'static str,
}

impl<'a> Item<'a> {
    fn of(s: &'a Situation, units: Units) -> Self {
        let l = if units == Units::Us { FT_PER_M } else { 1.0 };
        Item {
            id: s.key().to_string(),
            reach: &s.reach_id,
            reach_name: &s.reach_name,
            point_id: &s.point_id,
            point: &s.point_name,
            level_id: &s.level_id,
            level_kind: s.level_kind,
            level: &s.threshold_name,
            threshold: &s.threshold_name,
            elevation: s.elevation * l,
            severity: s.severity,
            exceeded: s.exceeded,
            above_now: s.above_now,
            above_since: s.above_since,
            above_since_start: s.above_since_start,
            first_above: s.first_above,
            back_below: s.back_below,
            crest_stage: s.crest_stage * l,
            crest_time: s.crest_time,
            margin: s.margin * l,
            run_id: s.run_id,
            run_finished: s.run_finished,
            stale: s.stale,
            probability: s.chance.map(|c| c.probability),
            members: s.chance.map(|c| c.members),
            members_reaching: s.chance.map(|c| c.members_reaching),
            earliest_first_above: s.chance.and_then(|c| c.earliest_first_above),
            median_first_above: s.chance.and_then(|c| c.median_first_above),
            members_only: s.members_only(),
            certainty: s.certainty().cap_value(),
        }
    }
}

impl Item<'_> {
    /// What the item means, for the validator: everything but which run
    /// said it and when. While a level is above now its "first above" is
    /// the instant the run finished, and a crest at that instant is "now":
    /// both move with every run without news, so they are blanked too.
    fn meaning(&self) -> Self {
        let mut m = self.clone();
        let now = m.run_finished;
        if m.above_now {
            m.first_above = None;
        }
        // "Above since the start of the trace" moves with each run's
        // look-back without news.
        if m.above_since_start {
            m.above_since = None;
        }
        if m.crest_time == now {
            m.crest_time = DateTime::<Utc>::UNIX_EPOCH;
        }
        m.run_id = 0;
        m.run_finished = DateTime::<Utc>::UNIX_EPOCH;
        // Each run draws its own members (seeded by its id), so the
        // ensemble figures wobble without news: the meaning keeps the
        // probability to the nearest 5 % and drops the member timings.
        m.probability = m.probability.map(|p| (p * 20.0).round() / 20.0);
        m.members_reaching = None;
        m.earliest_first_above = None;
        m.median_first_above = None;
        m
    }
}

/// A weak validator (RFC 9110 §8.8.1) over the meaning of the board: a new
/// run that says the same keeps it, so a poller's `If-None-Match` gets a
/// 304 until something an alerting system acts on has changed.
fn meaning_etag(items: &[Item<'_>], units: Units) -> Result<String, ApiError> {
    let meaning: Vec<Item<'_>> = items.iter().map(Item::meaning).collect();
    let bytes = serde_json::to_vec(&meaning).map_err(|e| ApiError::Internal(e.into()))?;
    Ok(format!(
        "W/\"{}-{:016x}\"",
        if units == Units::Us { "us" } else { "si" },
        fnv(&bytes)
    ))
}

#[derive(Serialize)]
struct Doc<'a> {
    caution: &'static str,
    #[serde(with = "crate::wire_time::option")]
    generated_at: Option<DateTime<Utc>>,
    units: UnitNames,
    items: Vec<Item<'a>>,
}

/// The board is JSON only.
#[derive(Debug, Deserialize)]
#[serde(rename_all = "lowercase")]
enum JsonOnly {
    Json,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct BoardParams {
    units: Option<Units>,
    /// Accepted for clients that send it everywhere; the board is JSON.
    #[serde(rename = "format")]
    _format: Option<JsonOnly>,
    reach: Option<String>,
    exceeded: Option<bool>,
    min_severity: Option<Severity>,
}

/// The serialized answer and its validator.
fn render(state: &AppState, units: Units, filter: Filter) -> Result<(Bytes, String), ApiError> {
    let (mut situations, version) = state.forecaster.board();
    situations.retain(|s| filter.keeps(s));
    let doc = Doc {
        caution: CAUTION,
        generated_at: situations.iter().map(|s| s.run_finished).max(),
        units: UnitNames::of(units),
        items: situations.iter().map(|s| Item::of(s, units)).collect(),
    };
    let body = Bytes::from(serde_json::to_vec(&doc).map_err(|e| ApiError::Internal(e.into()))?);
    let etag = meaning_etag(&doc.items, units)?;
    if let Ok(mut e) = state.exceedance_cache.entries.write() {
        e.retain(|(v, _, _, _, _)| *v == version);
        e.push((version, units, filter, body.clone(), etag.clone()));
    }
    Ok((body, etag))
}

async fn exceedances(
    _: ReadAccess,
    State(state): State<AppState>,
    Params(params): Params<BoardParams>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let units = params.units.unwrap_or_default();
    let filter = Filter {
        reach: params.reach,
        exceeded: params.exceeded,
        min_severity: params.min_severity,
    };
    let version = state.forecaster.board_version();
    let cached = state.exceedance_cache.entries.read().ok().and_then(|e| {
        e.iter()
            .find(|(v, u, f, _, _)| *v == version && *u == units && *f == filter)
            .map(|(_, _, _, b, t)| (b.clone(), t.clone()))
    });
    // Only a miss needs the store: an answer is cached only after its
    // reach filter was found to exist, and reaches are never removed.
    let (body, etag) = match cached {
        Some(hit) => hit,
        None => {
            if let Some(r) = &filter.reach {
                super::reaches::find_reach(&state, r).await?;
            }
            render(&state, units, filter)?
        }
    };
    if not_modified(&headers, &etag) {
        return Ok(with_etag(StatusCode::NOT_MODIFIED.into_response(), &etag));
    }
    let mut r = Response::new(Body::from(body));
    r.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/json"),
    );
    Ok(with_etag(r, &etag))
}

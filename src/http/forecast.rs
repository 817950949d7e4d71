//! The forecast of a reach: `GET /api/reaches/{reach}/forecast` and
//! `GET /api/reaches/{reach}/forecast/points/{point}`, as JSON or CSV
//! (`format=`, else the `Accept` header), in SI or US customary units
//! (`units=`), with a weak `ETag` that holds while the meaning does.

use std::collections::HashMap;

use axum::{
    Json, Router,
    extract::{Path, State},
    http::{HeaderMap, HeaderValue, StatusCode, header},
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::{DateTime, Utc};
use serde::Deserialize;

use super::{
    AppState,
    auth::ReadAccess,
    conditional::{fnv, not_modified, with_etag},
    error::{ApiError, Problem},
    query::{Format, Params, vary_accept},
    reaches::find_reach,
};
use crate::{
    forecast::{
        document::{self, ForecastDoc, Inputs},
        record::{RunRecord, RunStatus, StoredResults},
        spec::Units,
        view::{self, Freshness, FreshnessInput, ObservedStage},
    },
    store::ReachVersion,
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/reaches/{reach}/forecast", get(forecast))
        .route(
            "/reaches/{reach}/forecast/points/{point}",
            get(point_forecast),
        )
}

/// Query parameters of the forecast reads.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct ForecastParams {
    units: Option<Units>,
    format: Option<Format>,
    /// Which CSV table: the hydrographs (default) or the levels.
    table: Option<Table>,
}

/// The CSV tables of a forecast.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
enum Table {
    /// One row per (point, output time): stage and discharge.
    #[default]
    Hydrographs,
    /// One row per (point, level): crossing facts seen from now.
    Levels,
}

/// The latest good run of a reach and everything the document needs.
pub(super) struct Loaded {
    pub(super) reach: ReachVersion,
    pub(super) run: RunRecord,
    last_failure: Option<RunRecord>,
}

impl Loaded {
    pub(super) fn results(&self) -> Result<&StoredResults, ApiError> {
        self.run.results.as_ref().ok_or_else(|| {
            ApiError::Internal(anyhow::anyhow!("run {} has no results", self.run.id))
        })
    }
}

pub(super) async fn load_latest(state: &AppState, id: &str) -> Result<Loaded, ApiError> {
    let reach = find_reach(state, id).await?;
    let run = state
        .store
        .latest_run(id, Some(RunStatus::Ok))
        .await?
        .ok_or_else(|| {
            Problem::missing(
                "reach",
                format!("reach `{id}` has no successful forecast run yet"),
            )
        })?;
    let latest_any = state.store.latest_run(id, None).await?;
    let last_failure = latest_any.filter(|r| r.status == RunStatus::Failed && r.id > run.id);
    Ok(Loaded {
        reach,
        run,
        last_failure,
    })
}

/// The freshness verdict of a loaded run: cheap (one indexed query), so it
/// is computed before the validator and a 304 costs no more than this.
pub(super) async fn freshness_of(
    state: &AppState,
    l: &Loaded,
    now: DateTime<Utc>,
) -> Result<Freshness, ApiError> {
    let gauge = l.reach.spec.service.upstream_gauge.as_deref();
    let last_reading_at = match gauge {
        Some(g) => state
            .store
            .last_usable_reading_ms(g)
            .await?
            .and_then(DateTime::from_timestamp_millis),
        None => None,
    };
    let cfg = state.forecaster.config();
    Ok(view::freshness(&FreshnessInput {
        now,
        run_finished: l.run.finished_at.unwrap_or(now),
        inflow_stale: l.run.provenance.inflow_stale(),
        last_reading_at,
        has_gauge: gauge.is_some(),
        stale_after_s: i64::try_from(cfg.stale_after_minutes * 60).unwrap_or(i64::MAX),
        run_overdue_s: i64::try_from(cfg.interval_minutes * 120 + 300).unwrap_or(i64::MAX),
        stale_tributaries: l
            .run
            .provenance
            .laterals
            .iter()
            .filter(|t| t.stale())
            .map(|t| format!("{} ({})", t.name, t.gauge.as_deref().unwrap_or("-")))
            .collect(),
    }))
}

/// Usable stage readings of every point gauge over the run's window.
async fn observations(
    state: &AppState,
    l: &Loaded,
    from: DateTime<Utc>,
    now: DateTime<Utc>,
) -> Result<HashMap<String, Vec<ObservedStage>>, ApiError> {
    let mut observed = HashMap::new();
    for g in l.reach.spec.points.iter().filter_map(|p| p.gauge.as_ref()) {
        let rows = state
            .store
            .readings_for_forecast(g, from.timestamp_millis(), now.timestamp_millis())
            .await?;
        let stages = rows
            .into_iter()
            .filter(|r| r.for_forecast())
            .filter_map(|r| {
                Some(ObservedStage {
                    time: DateTime::from_timestamp_millis(r.time_ms)?,
                    stage: r.stage_m?,
                })
            })
            .collect();
        observed.insert(g.clone(), stages);
    }
    Ok(observed)
}

async fn build_doc(
    state: &AppState,
    l: &Loaded,
    units: Units,
    now: DateTime<Utc>,
    fresh: Freshness,
) -> Result<ForecastDoc, ApiError> {
    let results = l.results()?;
    let observed = observations(state, l, results.start, now).await?;
    let days = state.config.verification.window_days;
    let verified = state
        .forecaster
        .verification_report(&l.reach, days, now)
        .await?;
    let corrections = state.store.run_corrections(l.run.id).await?;
    let inputs = Inputs {
        reach_id: &l.reach.reach_id,
        reach_version: l.reach.version,
        spec: &l.reach.spec,
        run: &l.run,
        results,
        last_failure: l.last_failure.as_ref(),
        observed: &observed,
        units,
        now,
        verification: (&verified, days),
        corrections: &corrections,
    };
    Ok(document::build(&inputs, fresh))
}

/// A weak validator: the representation changes with every request (ages,
/// `now`) but means the same until the run, the stale verdict or the
/// newest reading changes (RFC 9110 §8.8.1).
pub(super) fn forecast_etag(
    run: &RunRecord,
    fresh: &Freshness,
    units: Units,
    repr: &str,
) -> String {
    // The ensemble is attached to a run after its deterministic results:
    // the same run id then says more.
    let run_id = run.id;
    let ens = match &run.ensemble {
        None => "",
        Some(r) if r.summary().is_some() => "e",
        Some(_) => "x",
    };
    // The stale reasons quote ages in whole minutes, so they are part of
    // the validator: a page polling with If-None-Match sees them change.
    let reasons = fnv(fresh.reasons.join("|").as_bytes());
    format!(
        "W/\"run{run_id}{ens}-{}-{}-{}-{}-{reasons:x}\"",
        if units == Units::Us { "us" } else { "si" },
        repr,
        u8::from(fresh.stale),
        fresh.last_reading_at.map_or(0, |t| t.timestamp_millis())
    )
}

fn csv_response(body: Result<String, csv::Error>) -> Result<Response, ApiError> {
    let body = body.map_err(|e| ApiError::Internal(anyhow::anyhow!("writing CSV: {e}")))?;
    Ok((
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("text/csv; charset=utf-8; header=present"),
        )],
        body,
    )
        .into_response())
}

/// What both reads decide before building anything: the run, the
/// representation asked for, and the freshness verdict at `now`.
struct Request {
    loaded: Loaded,
    units: Units,
    /// The CSV table asked for; `None` for JSON.
    csv: Option<Table>,
    now: DateTime<Utc>,
    fresh: Freshness,
}

async fn prepare(
    state: &AppState,
    id: &str,
    params: &ForecastParams,
    headers: &HeaderMap,
) -> Result<Request, ApiError> {
    let loaded = load_latest(state, id).await?;
    let now = Utc::now();
    let fresh = freshness_of(state, &loaded, now).await?;
    Ok(Request {
        units: params.units.unwrap_or(loaded.reach.spec.service.units),
        csv: (Format::choose(params.format, headers) == Format::Csv)
            .then(|| params.table.unwrap_or_default()),
        loaded,
        now,
        fresh,
    })
}

async fn forecast(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
    Params(params): Params<ForecastParams>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let r = prepare(&state, &id, &params, &headers).await?;
    let repr = match r.csv {
        None => "json",
        Some(Table::Hydrographs) => "csv",
        Some(Table::Levels) => "levels-csv",
    };
    let etag = forecast_etag(&r.loaded.run, &r.fresh, r.units, repr);
    if not_modified(&headers, &etag) {
        let mut r = with_etag(StatusCode::NOT_MODIFIED.into_response(), &etag);
        vary_accept(r.headers_mut());
        return Ok(r);
    }
    let doc = build_doc(&state, &r.loaded, r.units, r.now, r.fresh).await?;
    let response = match r.csv {
        Some(Table::Hydrographs) => csv_response(doc.csv(None))?,
        Some(Table::Levels) => csv_response(doc.levels_csv(None))?,
        None => Json(&doc).into_response(),
    };
    let mut response = with_etag(response, &etag);
    vary_accept(response.headers_mut());
    Ok(response)
}

async fn point_forecast(
    _: ReadAccess,
    State(state): State<AppState>,
    Path((id, point)): Path<(String, String)>,
    Params(params): Params<ForecastParams>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let r = prepare(&state, &id, &params, &headers).await?;
    let doc = build_doc(&state, &r.loaded, r.units, r.now, r.fresh).await?;
    let Some(p) = doc.point(&point) else {
        return Err(Problem::missing(
            "point",
            format!("reach `{id}` has no point of interest with id or name `{point}`"),
        )
        .into());
    };
    let response = match r.csv {
        Some(Table::Hydrographs) => csv_response(doc.csv(Some(&point)))?,
        Some(Table::Levels) => csv_response(doc.levels_csv(Some(&point)))?,
        None => Json(&p).into_response(),
    };
    let mut response = response;
    vary_accept(response.headers_mut());
    Ok(response)
}

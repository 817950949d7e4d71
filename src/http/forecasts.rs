//! Reaches, forecasts, runs and the exceedance board:
//!
//! - `GET /api/reaches`, `GET|PUT /api/reaches/{reach}` (PUT: admin)
//! - `GET /api/reaches/{reach}/forecast` (JSON or CSV, `units=us`)
//! - `GET /api/reaches/{reach}/forecast/points/{point}`
//! - `GET /api/reaches/{reach}/runs`, `GET /api/runs/{id}`
//! - `POST /api/reaches/{reach}/runs` (forecaster; `wait=true` answers
//!   when the run has finished)
//! - `GET /api/exceedances` (`ETag`, `If-None-Match` → 304)

use std::sync::RwLock;

use axum::{
    Json, Router,
    body::{Body, Bytes},
    extract::{Path, State},
    http::{HeaderMap, HeaderValue, StatusCode, header},
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::{DateTime, Utc};
use serde::Serialize;

use super::{
    AppState,
    auth::{Admin, Forecasting, ReadAccess, RequireRole},
    error::{ApiError, Problem, parse_json},
};
use crate::{
    CAUTION,
    forecast::{
        spec::{ReachSpec, Units},
        view::{self, FreshnessInput, ObservedStage, PointView, StoredResults, UnitNames},
    },
    store::{ReachVersion, StoredRun},
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/reaches", get(list_reaches))
        .route("/reaches/{reach}", get(get_reach).put(put_reach))
        .route("/reaches/{reach}/forecast", get(forecast))
        .route(
            "/reaches/{reach}/forecast/points/{point}",
            get(point_forecast),
        )
        .route("/reaches/{reach}/runs", get(list_runs).post(trigger))
        .route("/runs/{id}", get(run_by_id))
        .route("/exceedances", get(exceedances))
}

/// Cached serialized exceedance answers, keyed by board version and units.
#[derive(Default)]
pub struct ExceedanceCache {
    entries: RwLock<Vec<(u64, Units, Bytes, String)>>,
}

fn not_found(what: &str, detail: String, field: &str) -> ApiError {
    Problem::new(StatusCode::NOT_FOUND, "not-found", what)
        .detail(detail)
        .field(field)
        .into()
}

/// The newest version of a reach, or a 404 problem naming it.
pub(super) async fn find_reach(state: &AppState, id: &str) -> Result<ReachVersion, ApiError> {
    state.store.latest_reach(id).await?.ok_or_else(|| {
        not_found(
            "Unknown reach",
            format!("there is no reach `{id}`"),
            "reach",
        )
    })
}

#[derive(Debug, Default)]
struct ReadParams {
    units: Option<String>,
    format: Option<String>,
    limit: Option<i64>,
}

fn units_of(p: &ReadParams, reach: Option<&ReachSpec>) -> Result<Units, ApiError> {
    match p.units.as_deref() {
        None => Ok(reach.map_or(Units::Si, |r| r.service.units)),
        Some("si") => Ok(Units::Si),
        Some("us") => Ok(Units::Us),
        Some(other) => Err(Problem::invalid(
            "units",
            format!("`{other}` is not a unit system; use si or us"),
        )
        .into()),
    }
}

fn wants_csv(p: &ReadParams, headers: &HeaderMap) -> Result<bool, ApiError> {
    match p.format.as_deref() {
        Some("csv") => Ok(true),
        Some("json") => Ok(false),
        Some(other) => {
            Err(Problem::invalid("format", format!("`{other}`: use json or csv")).into())
        }
        None => Ok(headers
            .get(header::ACCEPT)
            .and_then(|v| v.to_str().ok())
            .is_some_and(|a| a.contains("text/csv"))),
    }
}

fn parse_query(raw: Option<&str>) -> Result<ReadParams, ApiError> {
    // Parses `a=b&c=d`, naming an unknown parameter. The values accepted
    // here never need percent-decoding.
    let mut p = ReadParams::default();
    for pair in raw.unwrap_or_default().split('&').filter(|s| !s.is_empty()) {
        let (k, v) = pair.split_once('=').unwrap_or((pair, ""));
        let v = v.to_owned();
        match k {
            "units" => p.units = Some(v),
            "format" => p.format = Some(v),
            "limit" => {
                p.limit = Some(v.parse().map_err(|_| {
                    ApiError::from(Problem::invalid(
                        "limit",
                        format!("`{v}` is not an integer"),
                    ))
                })?)
            }
            other => {
                return Err(Problem::invalid(other, "unknown query parameter").into());
            }
        }
    }
    Ok(p)
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

#[derive(Serialize)]
struct RunBrief {
    id: i64,
    status: String,
    started_at: String,
    finished_at: Option<String>,
    error: Option<String>,
}

impl From<&StoredRun> for RunBrief {
    fn from(r: &StoredRun) -> Self {
        Self {
            id: r.id,
            status: r.status.clone(),
            started_at: r.started_at.clone(),
            finished_at: r.finished_at.clone(),
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
        "created_at": r.created_at,
        "document": r.spec,
    }))
    .into_response())
}

fn valid_reach_id(id: &str) -> bool {
    crate::gauge::valid_slug(id)
}

async fn put_reach(
    auth: RequireRole<Admin>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    if !valid_reach_id(&id) {
        return Err(Problem::invalid("reach", "a reach id is 1 to 64 of a-z, 0-9 and -").into());
    }
    // Parse with the same strict reader as the offline command, so the
    // error names the JSON path of the bad field.
    let _: serde_json::Value = parse_json(&body)?;
    let text = std::str::from_utf8(&body)
        .map_err(|_| Problem::malformed("body", "the body is not UTF-8".to_owned()))?;
    let spec = ReachSpec::from_json(text)
        .map_err(|e| Problem::invalid(e.field.clone(), e.message.clone()))?;
    // Geometry is checked by building the computational nodes once.
    crate::forecast::run::nodes_for(&spec)
        .map_err(|e| Problem::invalid("sections", e.to_string()))?;
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

/// The latest good run of a reach and everything the view needs.
struct Loaded {
    reach: ReachVersion,
    run: StoredRun,
    results: StoredResults,
    last_failure: Option<StoredRun>,
}

async fn load_latest(state: &AppState, id: &str) -> Result<Loaded, ApiError> {
    let reach = find_reach(state, id).await?;
    let run = state
        .store
        .latest_run(id, Some("ok"))
        .await?
        .ok_or_else(|| {
            not_found(
                "No forecast yet",
                format!("reach `{id}` has no successful forecast run yet"),
                "reach",
            )
        })?;
    let results: StoredResults = run
        .results
        .clone()
        .and_then(|r| serde_json::from_value(r).ok())
        .ok_or_else(|| {
            ApiError::Internal(anyhow::anyhow!("run {} has unreadable results", run.id))
        })?;
    let latest_any = state.store.latest_run(id, None).await?;
    let last_failure = latest_any.filter(|r| r.status == "failed" && r.id > run.id);
    Ok(Loaded {
        reach,
        run,
        results,
        last_failure,
    })
}

fn parse_utc(t: &str) -> Option<DateTime<Utc>> {
    DateTime::parse_from_rfc3339(t)
        .ok()
        .map(|t| t.with_timezone(&Utc))
}

#[derive(Serialize)]
struct ForecastDoc {
    caution: &'static str,
    reach: serde_json::Value,
    units: UnitNames,
    run: serde_json::Value,
    freshness: view::Freshness,
    last_failure: Option<serde_json::Value>,
    now: DateTime<Utc>,
    points: Vec<PointView>,
}

/// The freshness verdict of a loaded run: cheap (one indexed query), so it
/// is computed before the validator and a 304 costs no more than this.
async fn freshness_of(
    state: &AppState,
    l: &Loaded,
    now: DateTime<Utc>,
) -> Result<view::Freshness, ApiError> {
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
    let finished = l
        .run
        .finished_at
        .as_deref()
        .and_then(parse_utc)
        .unwrap_or(now);
    Ok(view::freshness(&FreshnessInput {
        now,
        run_finished: finished,
        inflow_stale: l
            .run
            .provenance
            .pointer("/inflow/stale")
            .and_then(serde_json::Value::as_bool)
            .unwrap_or(false),
        last_reading_at,
        has_gauge: gauge.is_some(),
        stale_after_s: i64::try_from(cfg.stale_after_minutes * 60).unwrap_or(i64::MAX),
        run_overdue_s: i64::try_from(cfg.interval_minutes * 120 + 300).unwrap_or(i64::MAX),
    }))
}

async fn build_doc(
    state: &AppState,
    l: &Loaded,
    units: Units,
    now: DateTime<Utc>,
    fresh: view::Freshness,
) -> Result<ForecastDoc, ApiError> {
    let spec = &l.reach.spec;
    // Observations of point gauges over the run's window.
    let mut observed: std::collections::HashMap<String, Vec<ObservedStage>> = Default::default();
    for p in &spec.points {
        if let Some(g) = &p.gauge {
            let rows = state
                .store
                .readings_for_forecast(
                    g,
                    l.results.start.timestamp_millis(),
                    now.timestamp_millis(),
                )
                .await?;
            observed.insert(
                g.clone(),
                rows.into_iter()
                    .filter(|r| r.for_forecast())
                    .filter_map(|r| {
                        Some(ObservedStage {
                            time: DateTime::from_timestamp_millis(r.time_ms)?,
                            stage: r.stage_m?,
                        })
                    })
                    .collect(),
            );
        }
    }
    let lookup = |g: &str| observed.get(g).cloned().unwrap_or_default();
    let mut points = view::points(
        spec,
        &l.reach.reach_id,
        l.run.id,
        &l.results,
        &lookup,
        now,
        fresh.stale,
    );
    if units == Units::Us {
        points.iter_mut().for_each(PointView::to_us);
    }
    let inflow = l.run.provenance.get("inflow").cloned().unwrap_or_default();
    Ok(ForecastDoc {
        caution: CAUTION,
        reach: serde_json::json!({
            "id": l.reach.reach_id,
            "name": spec.name,
            "version": l.reach.version,
            "time_zone": spec.service.time_zone,
            "units": spec.service.units,
        }),
        units: UnitNames::of(units),
        run: serde_json::json!({
            "id": l.run.id,
            "started_at": l.run.started_at,
            "finished_at": l.run.finished_at,
            "method": l.results.method,
            "reach_version": l.run.reach_version,
            "inflow": {
                "source_beyond_now": inflow.get("source_beyond_now"),
                "upload_version": inflow.get("upload_version"),
                "observed_to": inflow.get("observed_to"),
                "last_reading_age_s": inflow.get("last_reading_age_s"),
                "warnings": inflow.get("warnings"),
            },
            "diagnostics": l.results.diagnostics,
        }),
        freshness: fresh,
        last_failure: l
            .last_failure
            .as_ref()
            .map(|f| serde_json::json!({"run_id": f.id, "at": f.finished_at, "error": f.error})),
        now,
        points,
    })
}

/// A weak validator: the representation changes with every request (ages,
/// `now`) but means the same until the run, the stale verdict or the
/// newest reading changes (RFC 9110 §8.8.1).
fn forecast_etag(run_id: i64, fresh: &view::Freshness, units: Units, csv: bool) -> String {
    // The stale reasons quote ages in whole minutes, so they are part of
    // the validator: a page polling with If-None-Match sees them change.
    let reasons = fnv(fresh.reasons.join("|").as_bytes());
    format!(
        "W/\"run{run_id}-{}-{}-{}-{}-{reasons:x}\"",
        if units == Units::Us { "us" } else { "si" },
        if csv { "csv" } else { "json" },
        u8::from(fresh.stale),
        fresh.last_reading_at.map_or(0, |t| t.timestamp_millis())
    )
}

pub(super) fn not_modified(headers: &HeaderMap, etag: &str) -> bool {
    headers
        .get(header::IF_NONE_MATCH)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| {
            v.split(',').any(|t| {
                let t = t.trim();
                t == "*" || t.trim_start_matches("W/") == etag.trim_start_matches("W/")
            })
        })
}

pub(super) fn with_etag(mut r: Response, etag: &str) -> Response {
    if let Ok(v) = HeaderValue::from_str(etag) {
        r.headers_mut().insert(header::ETAG, v);
    }
    r.headers_mut()
        .insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    r
}

fn forecast_csv(doc: &ForecastDoc, points: &[&PointView]) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let _ = writeln!(s, "# {CAUTION}");
    let _ = writeln!(
        s,
        "# reach: {}; run: {}; stale: {}; units: stage {}, discharge {}",
        doc.reach["name"]
            .as_str()
            .unwrap_or("")
            .replace(['\n', '\r'], " "),
        doc.run["id"],
        doc.freshness.stale,
        doc.units.stage,
        doc.units.discharge
    );
    let _ = writeln!(
        s,
        "point,chainage,time,stage_{},discharge_{}",
        doc.units.stage,
        doc.units.discharge.replace('/', "_per_")
    );
    for p in points {
        let name = if p.name.contains([',', '"', '\n']) {
            format!("\"{}\"", p.name.replace('"', "\"\""))
        } else {
            p.name.clone()
        };
        for ((t, z), q) in p.times.iter().zip(&p.stage).zip(&p.discharge) {
            let _ = writeln!(
                s,
                "{name},{},{},{z:.4},{q:.4}",
                p.chainage,
                t.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
            );
        }
    }
    s
}

fn csv_response(body: String) -> Response {
    (
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("text/csv; charset=utf-8; header=present"),
        )],
        body,
    )
        .into_response()
}

async fn forecast(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
    headers: HeaderMap,
    uri: axum::http::Uri,
) -> Result<Response, ApiError> {
    let params = parse_query(uri.query())?;
    let l = load_latest(&state, &id).await?;
    let units = units_of(&params, Some(&l.reach.spec))?;
    let csv = wants_csv(&params, &headers)?;
    let now = Utc::now();
    let fresh = freshness_of(&state, &l, now).await?;
    let etag = forecast_etag(l.run.id, &fresh, units, csv);
    if not_modified(&headers, &etag) {
        return Ok(with_etag(StatusCode::NOT_MODIFIED.into_response(), &etag));
    }
    let doc = build_doc(&state, &l, units, now, fresh).await?;
    let response = if csv {
        let pts: Vec<&PointView> = doc.points.iter().collect();
        csv_response(forecast_csv(&doc, &pts))
    } else {
        Json(&doc).into_response()
    };
    Ok(with_etag(response, &etag))
}

async fn point_forecast(
    _: ReadAccess,
    State(state): State<AppState>,
    Path((id, point)): Path<(String, String)>,
    headers: HeaderMap,
    uri: axum::http::Uri,
) -> Result<Response, ApiError> {
    let params = parse_query(uri.query())?;
    let l = load_latest(&state, &id).await?;
    let units = units_of(&params, Some(&l.reach.spec))?;
    let csv = wants_csv(&params, &headers)?;
    let now = Utc::now();
    let fresh = freshness_of(&state, &l, now).await?;
    let doc = build_doc(&state, &l, units, now, fresh).await?;
    let Some(p) = doc.points.iter().find(|p| p.name == point) else {
        return Err(not_found(
            "Unknown point",
            format!("reach `{id}` has no point of interest named `{point}`"),
            "point",
        ));
    };
    if csv {
        return Ok(csv_response(forecast_csv(&doc, &[p])));
    }
    Ok(Json(serde_json::json!({
        "caution": CAUTION,
        "reach": doc.reach,
        "units": doc.units,
        "run": doc.run,
        "freshness": doc.freshness,
        "now": doc.now,
        "point": p,
    }))
    .into_response())
}

fn run_json(r: &StoredRun) -> serde_json::Value {
    serde_json::json!({
        "id": r.id,
        "reach": r.reach_id,
        "reach_version": r.reach_version,
        "status": r.status,
        "started_at": r.started_at,
        "finished_at": r.finished_at,
        "error": r.error,
        "provenance": r.provenance,
    })
}

async fn list_runs(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
    uri: axum::http::Uri,
) -> Result<Response, ApiError> {
    let params = parse_query(uri.query())?;
    find_reach(&state, &id).await?;
    let limit = params.limit.unwrap_or(50);
    if !(1..=1000).contains(&limit) {
        return Err(Problem::invalid("limit", "must be between 1 and 1000").into());
    }
    let runs = state.store.runs(&id, limit).await?;
    Ok(Json(serde_json::json!({
        "caution": CAUTION,
        "runs": runs.iter().map(run_json).collect::<Vec<_>>(),
    }))
    .into_response())
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
        .ok_or_else(|| not_found("Unknown run", format!("there is no run {n}"), "id"))?;
    let mut v = run_json(&run);
    v["caution"] = serde_json::json!(CAUTION);
    v["results"] = run.results.clone().unwrap_or_default();
    Ok(Json(v).into_response())
}

async fn trigger(
    _: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    uri: axum::http::Uri,
) -> Result<Response, ApiError> {
    let wait = match uri.query().unwrap_or("") {
        "" | "wait=false" => false,
        "wait=true" => true,
        other => {
            return Err(Problem::invalid(
                "wait",
                format!("`{other}`: the only parameter is wait=true|false"),
            )
            .into());
        }
    };
    find_reach(&state, &id).await?;
    if wait {
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

async fn exceedances(
    _: ReadAccess,
    State(state): State<AppState>,
    headers: HeaderMap,
    uri: axum::http::Uri,
) -> Result<Response, ApiError> {
    let params = parse_query(uri.query())?;
    let units = units_of(&params, None)?;
    let version = state.forecaster.board_version();
    let cached = state.exceedance_cache.entries.read().ok().and_then(|e| {
        e.iter()
            .find(|(v, u, _, _)| *v == version && *u == units)
            .map(|(_, _, b, t)| (b.clone(), t.clone()))
    });
    let (body, etag) = match cached {
        Some(hit) => hit,
        None => {
            let (mut items, version) = state.forecaster.board();
            if units == Units::Us {
                for i in &mut items {
                    i.elevation *= view::FT_PER_M;
                    i.crest_stage *= view::FT_PER_M;
                    i.margin *= view::FT_PER_M;
                }
            }
            let generated = items.iter().map(|i| i.run_finished).max();
            let doc = serde_json::json!({
                "caution": CAUTION,
                "generated_at": generated,
                "units": UnitNames::of(units),
                "items": items,
            });
            let body =
                Bytes::from(serde_json::to_vec(&doc).map_err(|e| ApiError::Internal(e.into()))?);
            let etag = format!(
                "\"b{version}-{}-{:016x}\"",
                if units == Units::Us { "us" } else { "si" },
                fnv(&body)
            );
            if let Ok(mut e) = state.exceedance_cache.entries.write() {
                e.retain(|(v, _, _, _)| *v == version);
                e.push((version, units, body.clone(), etag.clone()));
            }
            (body, etag)
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

/// FNV-1a 64 of the body: a content hash for the strong ETag.
pub(super) fn fnv(bytes: &[u8]) -> u64 {
    bytes.iter().fold(0xcbf2_9ce4_8422_2325, |h, b| {
        (h ^ u64::from(*b)).wrapping_mul(0x0100_0000_01b3)
    })
}

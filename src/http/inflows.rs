//! Revised inflow forecasts uploaded by a forecaster:
//!
//! - `POST /api/reaches/{reach}/inflows` (forecaster): JSON
//!   `{"reason": "...", "series": [{"time": "...", "discharge": ...}]}`, or
//!   `text/csv` with a `time,discharge` header and `?reason=...`. Either
//!   may carry extra traces on the same times (JSON `traces: [{"name",
//!   "series"}]`, CSV `discharge_<name>` columns), which the ensemble
//!   routes as scenarios beside the main series. The whole
//!   upload is accepted or refused: a forecast hydrograph with a bad row is
//!   not a forecast. A refusal lists every bad row in `errors`.
//!   With `?dry_run=true` the upload is checked and joined to the observed
//!   inflow as the next run would join it, and the join is reported;
//!   nothing is stored.
//! - `GET /api/reaches/{reach}/inflows`: every upload, newest first, the one
//!   in force marked.
//! - `GET /api/reaches/{reach}/inflows/{version}` (`current` for the one in
//!   force): its series as JSON, or as the upload's own CSV
//!   (`format=csv` or `Accept: text/csv`).
//! - `POST /api/reaches/{reach}/inflows/{version}/withdraw` (forecaster).
//!
//! Each upload is a new version; the newest one not withdrawn is used by
//! the next run, which is triggered at once.

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, State},
    http::{HeaderMap, StatusCode, header},
    response::{IntoResponse, Response},
    routing::{get, post},
};
use serde::{Deserialize, Serialize};

use super::{
    AppState,
    auth::{Forecasting, ReadAccess, RequireRole},
    error::{ApiError, Problem, parse_json},
    inflow_csv::csv_of,
    query::{Format, Params, vary_accept},
};
use crate::{
    CAUTION,
    forecast::inflow::{self, Inflow, InflowError},
    row_error::RowError,
    store::InflowUpload,
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/reaches/{reach}/inflows", get(list).post(upload))
        .route("/reaches/{reach}/inflows/{version}", get(one))
        .route(
            "/reaches/{reach}/inflows/{version}/withdraw",
            post(withdraw),
        )
}

/// The reason of a CSV upload sent without `?reason=`.
const NO_CSV_REASON: &str = "(no reason given with this CSV upload)";

/// Most samples in one upload (a 30-day hydrograph at one minute).
const MAX_POINTS: usize = 50_000;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct UploadBody {
    reason: String,
    series: Vec<serde_json::Value>,
    #[serde(default)]
    traces: Vec<TraceBody>,
}

/// One extra trace of a JSON upload.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct TraceBody {
    name: String,
    series: Vec<serde_json::Value>,
}

/// Query parameters of an upload: a CSV body carries its reason here.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct UploadParams {
    reason: Option<String>,
    dry_run: Option<bool>,
    /// The tributary the upload is for (`laterals[].name`, or a tributary
    /// channel's `upstream.name`); absent: the
    /// upstream inflow.
    boundary: Option<String>,
}

/// Query parameters of a download.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct OneParams {
    format: Option<Format>,
}

/// The one problem for an upload refused row by row: every bad row listed
/// (`row`, `field`, `message`), nothing stored.
fn rows_refused(errors: &[RowError]) -> Problem {
    let first = &errors[0];
    let mut p = Problem::invalid(first.field.clone(), first.message.clone()).detail(format!(
        "{} row(s) rejected; nothing was stored. First: row {}, {}: {}",
        errors.len(),
        first.row,
        first.field,
        first.message
    ));
    if first.row > 0 {
        p = p.row(first.row);
    }
    p.with("errors", errors)
}

/// The reason and inflow of an upload body.
fn parse_body(
    media: &str,
    body: &[u8],
    query_reason: Option<String>,
) -> Result<(String, Inflow), Problem> {
    match media {
        "application/json" => {
            let b: UploadBody = parse_json(body)?;
            let traces: Vec<_> = b.traces.into_iter().map(|t| (t.name, t.series)).collect();
            let h = inflow::parse_json(&b.series, &traces).map_err(|e| rows_refused(&e))?;
            Ok((b.reason, h))
        }
        "text/csv" => match inflow::parse_csv(body) {
            // CSV has no place of its own for a reason, and the document
            // cannot make the query's `reason` required for CSV only; the
            // upload still names its key.
            Ok(h) => Ok((query_reason.unwrap_or_else(|| NO_CSV_REASON.to_owned()), h)),
            Err(InflowError::Malformed(m)) => Err(Problem::malformed("csv", m)),
            Err(InflowError::Rows(e)) => Err(rows_refused(&e)),
        },
        other => Err(Problem::unsupported_media(other)),
    }
}

async fn upload(
    auth: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(reach): Path<String>,
    headers: HeaderMap,
    Params(params): Params<UploadParams>,
    body: Bytes,
) -> Result<Response, ApiError> {
    let version = super::reaches::find_reach(&state, &reach).await?;
    let tributaries = version.spec.tributaries();
    if let Some(b) = &params.boundary
        && !tributaries.iter().any(|t| t.name == b)
    {
        let names: Vec<&str> = tributaries.iter().map(|t| t.name).collect();
        let detail = format!(
            "`{b}` is not a tributary of this reach (its tributaries: {names:?}); leave `boundary` out for the upstream inflow"
        );
        return Err(Problem::conflict("boundary", detail).into());
    }
    let media = super::query::media_type(&headers, "application/json");
    // A `reason` in the query is checked whatever the body: the document
    // promises its length, JSON body or not.
    let check_reason = |r: &str| {
        crate::text::check(r, 500).map_err(|m| Problem::invalid("reason", format!("say why: {m}")))
    };
    if let Some(r) = &params.reason {
        check_reason(r)?;
    }
    let (reason, inflow) = parse_body(&media, &body, params.reason)?;
    let series = &inflow.series;
    check_reason(&reason)?;
    let reason = reason.trim().to_owned();
    if series.len() > MAX_POINTS {
        return Err(Problem::invalid("series", format!("at most {MAX_POINTS} samples")).into());
    }
    if params.dry_run == Some(true) && params.boundary.is_some() {
        let detail = "a dry run previews the join with the upstream gauge only";
        return Err(Problem::invalid("dry_run", detail).into());
    }
    if params.dry_run == Some(true) {
        let join = state
            .forecaster
            .preview_join(&reach, series)
            .await
            .map_err(|e| ApiError::Internal(anyhow::anyhow!(e)))?;
        return Ok(Json(serde_json::json!({
            "caution": CAUTION, "reach": reach, "dry_run": true, "stored": false,
            "points": series.len(), "series": series, "traces": inflow.traces.names(),
            "join": join,
        }))
        .into_response());
    }
    let version = state
        .store
        .insert_upload(
            &reach,
            &inflow,
            &reason,
            auth.caller().key_id(),
            params.boundary.as_deref(),
        )
        .await?;
    state.forecaster.data_arrived(&reach);
    Ok((
        StatusCode::CREATED,
        Json(serde_json::json!({
            "reach": reach, "version": version, "points": series.len(),
            "traces": inflow.traces.names(), "boundary": params.boundary,
        })),
    )
        .into_response())
}

/// An upload as the list shows it (without its series).
#[derive(Debug, Serialize)]
struct UploadView<'a> {
    version: i64,
    #[serde(with = "crate::wire_time")]
    uploaded_at: chrono::DateTime<chrono::Utc>,
    uploaded_by: &'a str,
    uploaded_by_name: Option<&'a str>,
    in_force: bool,
    reason: &'a str,
    withdrawn: bool,
    #[serde(with = "crate::wire_time::option")]
    withdrawn_at: Option<chrono::DateTime<chrono::Utc>>,
    points: usize,
    /// The names of its extra traces, in upload order.
    traces: Vec<String>,
    /// The tributary it is for; `null`: the upstream inflow.
    boundary: Option<&'a str>,
}

impl<'a> UploadView<'a> {
    fn of(u: &'a InflowUpload) -> Self {
        Self {
            version: u.version,
            uploaded_at: u.uploaded_at,
            uploaded_by: &u.uploaded_by,
            uploaded_by_name: u.uploaded_by_name.as_deref(),
            in_force: u.in_force,
            reason: &u.reason,
            withdrawn: u.withdrawn,
            withdrawn_at: u.withdrawn_at,
            points: u.series.len(),
            traces: u.traces.names(),
            boundary: u.boundary.as_deref(),
        }
    }
}

async fn list(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(reach): Path<String>,
) -> Result<Response, ApiError> {
    super::reaches::find_reach(&state, &reach).await?;
    let stored = state.store.uploads(&reach).await?;
    let uploads: Vec<UploadView> = stored.iter().map(UploadView::of).collect();
    Ok(
        Json(serde_json::json!({"caution": CAUTION, "reach": reach, "uploads": uploads}))
            .into_response(),
    )
}

/// `current` or a version number.
async fn find_upload(
    state: &AppState,
    reach: &str,
    version: &str,
) -> Result<InflowUpload, ApiError> {
    let found = if version == "current" {
        state.store.newest_upload(reach, None).await?
    } else {
        let v: i64 = version.parse().map_err(|_| {
            Problem::invalid(
                "version",
                format!("`{version}` is neither a version number nor `current`"),
            )
        })?;
        state.store.upload(reach, v).await?
    };
    found.ok_or_else(|| {
        Problem::missing(
            "version",
            format!("reach `{reach}` has no upload `{version}`"),
        )
        .into()
    })
}

async fn one(
    _: ReadAccess,
    State(state): State<AppState>,
    Path((reach, version)): Path<(String, String)>,
    headers: HeaderMap,
    Params(params): Params<OneParams>,
) -> Result<Response, ApiError> {
    super::reaches::find_reach(&state, &reach).await?;
    let u = find_upload(&state, &reach, &version).await?;
    let mut response = if Format::choose(params.format, &headers) == Format::Csv {
        let name = format!("attachment; filename=\"{reach}-inflow-v{}.csv\"", u.version);
        (
            [
                (
                    header::CONTENT_TYPE,
                    "text/csv; charset=utf-8; header=present".to_owned(),
                ),
                (header::CONTENT_DISPOSITION, name),
            ],
            csv_of(&u.series, &u.traces),
        )
            .into_response()
    } else {
        Json(serde_json::json!({
            "caution": CAUTION, "reach": reach, "upload": UploadView::of(&u), "series": u.series,
            "traces": u.traces,
        }))
        .into_response()
    };
    vary_accept(response.headers_mut());
    Ok(response)
}

async fn withdraw(
    auth: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path((reach, version)): Path<(String, String)>,
) -> Result<Response, ApiError> {
    let v: i64 = version
        .parse()
        .map_err(|_| Problem::invalid("version", format!("`{version}` is not a version number")))?;
    if !state
        .store
        .withdraw_upload(&reach, v, auth.caller().key_id())
        .await?
    {
        return Err(Problem::missing(
            "version",
            format!("reach `{reach}` has no upload {v} in force"),
        )
        .into());
    }
    state.forecaster.data_arrived(&reach);
    Ok(Json(serde_json::json!({"reach": reach, "version": v, "withdrawn": true})).into_response())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn all_bad_rows_are_listed() {
        let e = parse_body(
            "text/csv",
            b"time,discharge\n2026-03-01T00:00:00Z,1\nyesterday,2\n2026-03-01T02:00:00Z,-3\n",
            Some("storm".into()),
        )
        .unwrap_err();
        let errors = e.extensions.get("errors").expect("errors listed");
        assert_eq!(errors.as_array().map(Vec::len), Some(2));
        assert_eq!(errors[0]["row"], 2);
        assert_eq!(errors[0]["field"], "time");
        assert_eq!(errors[1]["field"], "discharge");
    }
}

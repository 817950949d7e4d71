//! Ratings over time at a gauge: gaugings (`GET`, JSON or CSV; `POST`,
//! forecaster), the rating in force over time (`GET .../ratings`: the
//! gauge's own curve, its versions and shifts), a fit of the gaugings
//! (`POST .../ratings/fit`, a proposal stored nowhere), a new version
//! (`POST .../ratings`) and a shift (`POST .../ratings/shifts`). A new
//! version or shift wakes every reach that uses the gauge, so its forecasts
//! are made again with it.

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, State},
    http::{HeaderMap, HeaderValue, StatusCode, header},
    response::{IntoResponse, Response},
    routing::{get, post},
};
use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    AppState,
    auth::{Forecasting, ReadAccess, RequireRole},
    error::{ApiError, Problem, parse_json},
    gauges::find_gauge,
    query::{Format, Params, vary_accept},
};
use crate::{
    engine::rating::RatingCurve,
    gauge::ratings::{self, FitReport, Gauging, GaugingQuality, GaugingsCsvError, Ratings, Shift},
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/gauges/{gauge}/gaugings", get(list).post(add))
        .route("/gauges/{gauge}/ratings", get(in_force).post(add_version))
        .route("/gauges/{gauge}/ratings/fit", post(fit))
        .route("/gauges/{gauge}/ratings/shifts", post(add_shift))
}

/// Gaugings one request may carry at most.
const MAX_GAUGINGS: usize = 10_000;

/// Segment breaks one fit takes at most (a rating has a few segments).
const MAX_BREAKS: usize = 8;
/// Gaugings one fit takes at most (a rating is fitted from tens).
const MAX_FITTED: usize = 2_000;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct GaugingsBody {
    gaugings: Vec<Gauging>,
}

/// Checks what the types do not, naming the field.
fn check_gaugings(g: &[Gauging]) -> Result<(), Problem> {
    if g.is_empty() || g.len() > MAX_GAUGINGS {
        let m = format!("send 1 to {MAX_GAUGINGS} gaugings, got {}", g.len());
        return Err(Problem::invalid("gaugings", m));
    }
    for (i, x) in g.iter().enumerate() {
        if !x.stage_m.is_finite() {
            return Err(Problem::invalid(
                format!("gaugings[{i}].stage_m"),
                "must be a finite number",
            ));
        }
        if !(x.discharge_m3s.is_finite() && x.discharge_m3s > 0.0) {
            return Err(Problem::invalid(
                format!("gaugings[{i}].discharge_m3s"),
                "must be a positive finite number (m³/s)",
            ));
        }
        crate::text::check(&x.method, 100)
            .map_err(|m| Problem::invalid(format!("gaugings[{i}].method"), m))?;
        if g[..i].iter().any(|y| y.time == x.time) {
            return Err(Problem::invalid(
                format!("gaugings[{i}].time"),
                "repeats an earlier gauging's time",
            ));
        }
    }
    Ok(())
}

/// The gaugings of a JSON or CSV body.
fn parse_gaugings(headers: &HeaderMap, body: &[u8]) -> Result<Vec<Gauging>, Problem> {
    let media = super::query::media_type(headers, "application/json");
    match media.as_str() {
        "application/json" => Ok(parse_json::<GaugingsBody>(body)?.gaugings),
        "text/csv" => ratings::parse_gaugings_csv(body).map_err(|e| match e {
            GaugingsCsvError::Malformed(m) => Problem::malformed("csv", m),
            GaugingsCsvError::Row(r) => {
                Problem::invalid(r.field.clone(), r.message.clone()).with("row", r.row)
            }
        }),
        other => Err(Problem::unsupported_media(other)),
    }
}

async fn add(
    auth: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    headers: HeaderMap,
    body: Bytes,
) -> Result<Response, ApiError> {
    let b = GaugingsBody {
        gaugings: parse_gaugings(&headers, &body)?,
    };
    check_gaugings(&b.gaugings)?;
    find_gauge(&state, &id).await?;
    let new = state
        .store
        .put_gaugings(&id, &b.gaugings, auth.caller().key_id())
        .await?;
    Ok((
        StatusCode::CREATED,
        Json(
            serde_json::json!({"gauge": id, "received": b.gaugings.len(), "new": new,
                                "replaced": b.gaugings.len() - new}),
        ),
    )
        .into_response())
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct ListParams {
    format: Option<Format>,
}

async fn list(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
    Params(params): Params<ListParams>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    find_gauge(&state, &id).await?;
    let gaugings = state.store.gaugings(&id).await?;
    let mut res = match Format::choose(params.format, &headers) {
        Format::Json => {
            Json(serde_json::json!({"gauge": id, "gaugings": gaugings})).into_response()
        }
        Format::Csv => {
            let body = gaugings_csv(&gaugings)
                .map_err(|e| ApiError::Internal(anyhow::anyhow!("writing CSV: {e}")))?;
            (
                [(
                    header::CONTENT_TYPE,
                    HeaderValue::from_static("text/csv; charset=utf-8; header=present"),
                )],
                body,
            )
                .into_response()
        }
    };
    if params.format.is_none() {
        vary_accept(res.headers_mut());
    }
    Ok(res)
}

fn gaugings_csv(g: &[Gauging]) -> Result<Vec<u8>, csv::Error> {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .from_writer(Vec::new());
    w.write_record(ratings::GAUGINGS_CSV_HEADER)?;
    for x in g {
        let quality = serde_json::to_value(x.quality)
            .ok()
            .and_then(|v| v.as_str().map(str::to_owned))
            .unwrap_or_default();
        w.write_record([
            crate::wire_time::format(x.time),
            x.stage_m.to_string(),
            x.discharge_m3s.to_string(),
            x.method.clone(),
            quality,
        ])?;
    }
    w.into_inner().map_err(|e| e.into_error().into())
}

async fn in_force(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Json<Ratings>, ApiError> {
    let g = find_gauge(&state, &id).await?;
    Ok(Json(state.store.ratings(&id, g.spec.rating_curve).await?))
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct FitBody {
    #[serde(default, with = "crate::wire_time::option")]
    from: Option<DateTime<Utc>>,
    #[serde(default, with = "crate::wire_time::option")]
    to: Option<DateTime<Utc>>,
    /// Leave out gaugings rated poor (default true).
    #[serde(default = "yes")]
    exclude_poor: bool,
    /// Stages where one segment ends and the next begins (increasing);
    /// empty: one segment.
    #[serde(default)]
    breaks: Vec<f64>,
}

fn yes() -> bool {
    true
}

/// A gauging fitted, with its deviation from the fitted curve.
#[derive(Debug, Serialize)]
struct Fitted {
    #[serde(flatten)]
    gauging: Gauging,
    /// 100 (Q_measured / Q_curve − 1).
    deviation_pct: f64,
}

#[derive(Debug, Serialize)]
struct FitAnswer {
    gauge: String,
    /// The gaugings fitted, each with its deviation from the curve.
    gaugings: Vec<Fitted>,
    report: FitReport,
    note: &'static str,
}

async fn fit(
    _: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    let b: FitBody = if body.is_empty() {
        FitBody {
            exclude_poor: true,
            ..FitBody::default()
        }
    } else {
        parse_json(&body)?
    };
    find_gauge(&state, &id).await?;
    let chosen: Vec<Gauging> = state
        .store
        .gaugings(&id)
        .await?
        .into_iter()
        .filter(|g| b.from.is_none_or(|f| g.time >= f) && b.to.is_none_or(|t| g.time <= t))
        .filter(|g| !(b.exclude_poor && g.quality == GaugingQuality::Poor))
        .collect();
    if chosen.len() > MAX_FITTED {
        let m = format!(
            "{} gaugings chosen; a fit takes at most {MAX_FITTED}: narrow the window",
            chosen.len()
        );
        return Err(Problem::conflict("from", m).into());
    }
    // The fit solves a least-squares problem per trial zero-flow stage:
    // off the async runtime, like routing.
    if b.breaks.len() > MAX_BREAKS {
        let m = format!("at most {MAX_BREAKS} breaks, got {}", b.breaks.len());
        return Err(Problem::invalid("breaks", m).into());
    }
    let breaks = b.breaks;
    let (report, chosen) =
        tokio::task::spawn_blocking(move || (ratings::fit(&chosen, &breaks), chosen))
            .await
            .map_err(|e| ApiError::Internal(anyhow::anyhow!("rating fit task failed: {e}")))?;
    // Bad breaks are the request's fault; too few or unfittable gaugings
    // are what is stored.
    let report = report.map_err(|e| match e {
        ratings::FitError::Breaks => Problem::invalid("breaks", e.to_string()),
        _ => Problem::conflict("gaugings", e.to_string()),
    })?;
    Ok(Json(FitAnswer {
        gauge: id,
        gaugings: chosen
            .into_iter()
            .zip(&report.deviations_pct)
            .map(|(gauging, &deviation_pct)| Fitted {
                gauging,
                deviation_pct,
            })
            .collect(),
        report,
        note: "A proposal, stored nowhere: review it, then POST its curve to /ratings with the instant it is valid from.",
    })
    .into_response())
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct VersionBody {
    #[serde(with = "crate::wire_time")]
    valid_from: DateTime<Utc>,
    curve: RatingCurve,
    note: String,
}

async fn add_version(
    auth: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    let b: VersionBody = parse_json(&body)?;
    b.curve
        .validate()
        .map_err(|e| Problem::invalid("curve", e.to_string()))?;
    crate::text::check(&b.note, 500)
        .map_err(|m| Problem::invalid("note", format!("{m}: why this version")))?;
    find_gauge(&state, &id).await?;
    let version = state
        .store
        .add_rating_version(&id, b.valid_from, &b.curve, &b.note, auth.caller().key_id())
        .await?;
    state.forecaster.gauge_updated(&id).await;
    Ok((
        StatusCode::CREATED,
        Json(serde_json::json!({"gauge": id, "version": version,
                                "valid_from": crate::wire_time::format(b.valid_from)})),
    )
        .into_response())
}

async fn add_shift(
    auth: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    let s: Shift = parse_json(&body)?;
    if !(s.offset_m.is_finite() && s.offset_m.abs() <= 5.0) {
        return Err(Problem::invalid("offset_m", "must be a number from -5 to 5 (m)").into());
    }
    if s.to.is_some_and(|to| to <= s.from) {
        return Err(Problem::invalid("to", "must be after `from`").into());
    }
    crate::text::check(&s.reason, 500).map_err(|m| Problem::invalid("reason", m))?;
    find_gauge(&state, &id).await?;
    state
        .store
        .add_rating_shift(&id, &s, auth.caller().key_id())
        .await?;
    state.forecaster.gauge_updated(&id).await;
    Ok((
        StatusCode::CREATED,
        Json(serde_json::json!({"gauge": id, "shift": s})),
    )
        .into_response())
}

//! `/api/gauges/{gauge}/readings`: post readings (JSON or CSV), read them
//! in pages (JSON or CSV), look at one reading with its revisions, and
//! confirm a reading flagged suspect by rate.
//!
//! Batch semantics: a body that is not well-formed JSON or CSV is refused
//! whole (400). Otherwise every row is checked on its own; the valid rows
//! are stored in one transaction and the answer reports accepted,
//! duplicate, revised and rejected rows, naming each rejected row's field.

use std::collections::HashMap;

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, Query, State},
    http::{HeaderMap, HeaderValue, StatusCode, header},
    response::{IntoResponse, Response},
    routing::{get, post},
};
use chrono::Utc;
use serde::Serialize;
use serde_json::Value;

use super::{
    AppState,
    auth::{Forecasting, GaugeWriter, ReadAccess, RequireRole},
    cache::{CacheKey, Cached},
    error::{ApiError, Problem},
    gauges::find_gauge,
};
use crate::{
    gauge::readings::{
        Field, Limits, RateCheck, RawReading, RowError, StoredReading, check, dedupe_batch,
        format_time, parse_time,
    },
    store::{IngestOutcome, ReadingsQuery},
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/gauges/{gauge}/readings", get(list).post(ingest))
        .route("/gauges/{gauge}/readings/{time}", get(one))
        .route("/gauges/{gauge}/readings/{time}/confirm", post(confirm))
}

/// Default page size of `GET .../readings`.
pub const DEFAULT_LIMIT: i64 = 500;

/// Columns of the CSV format, in order. On input `time` is required, the
/// others optional; `rate_check` and `revision` (output only) are ignored.
const CSV_HEADER: &str = "time,stage,discharge,quality,rate_check,revision";

#[derive(Debug, Serialize)]
struct Report {
    gauge: String,
    received: usize,
    accepted: usize,
    duplicate: usize,
    revised: usize,
    rejected: usize,
    suspect_by_rate: usize,
    errors: Vec<RowError>,
}

fn media_type(headers: &HeaderMap) -> String {
    headers
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .map(|v| {
            v.split(';')
                .next()
                .unwrap_or("")
                .trim()
                .to_ascii_lowercase()
        })
        .unwrap_or_default()
}

/// JSON body → raw rows. Syntax errors and a wrong top-level shape refuse
/// the request; a row of the wrong shape is rejected on its own.
fn parse_json_rows(body: &[u8]) -> Result<Vec<Result<RawReading, RowError>>, Problem> {
    #[derive(serde::Deserialize)]
    #[serde(deny_unknown_fields)]
    struct Batch {
        readings: Vec<Value>,
    }
    let batch: Batch = super::error::parse_json(body)?;
    Ok(batch
        .readings
        .into_iter()
        .enumerate()
        .map(|(i, v)| json_row(i + 1, v))
        .collect())
}

fn json_row(row: usize, v: Value) -> Result<RawReading, RowError> {
    let err = |field: &str, reason: &str| RowError {
        row,
        field: field.to_owned(),
        reason: reason.to_owned(),
    };
    let Value::Object(map) = v else {
        return Err(err("", "a reading must be a JSON object"));
    };
    let mut raw = RawReading {
        time: Field::Absent,
        stage: Field::Absent,
        discharge: Field::Absent,
        quality: Field::Absent,
    };
    let text = |v: Value| match v {
        Value::Null => Field::Absent,
        Value::String(s) => Field::Value(s),
        _ => Field::Invalid("must be a string".to_owned()),
    };
    let number = |v: Value| match v {
        Value::Null => Field::Absent,
        Value::Number(n) => n
            .as_f64()
            .map_or(Field::Invalid("not a number".to_owned()), Field::Value),
        _ => Field::Invalid("must be a number (or null)".to_owned()),
    };
    for (k, v) in map {
        match k.as_str() {
            "time" => raw.time = text(v),
            "stage" => raw.stage = number(v),
            "discharge" => raw.discharge = number(v),
            "quality" => raw.quality = text(v),
            other => {
                return Err(err(
                    other,
                    "unknown field (expected time, stage, discharge, quality)",
                ));
            }
        }
    }
    Ok(raw)
}

/// CSV body (RFC 4180, header row required) → raw rows. Syntax errors and
/// a bad header refuse the request.
fn parse_csv_rows(body: &[u8]) -> Result<Vec<Result<RawReading, RowError>>, Problem> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .from_reader(body);
    // The line is counted from the byte offset: the csv crate's own line
    // count lags by one after CRLF line ends.
    let syntax = |e: csv::Error| {
        let pos = e.position().cloned();
        let line = pos.as_ref().map(|p| {
            let end = usize::try_from(p.byte())
                .unwrap_or(usize::MAX)
                .saturating_add(1)
                .min(body.len());
            body[..end].iter().filter(|b| **b == b'\n').count() + 1
        });
        let mut p = Problem::malformed(
            "csv",
            match line {
                Some(l) => format!("not valid CSV (RFC 4180) at line {l}: {e}"),
                None => format!("not valid CSV (RFC 4180): {e}"),
            },
        );
        if let Some(l) = line {
            p = p.with("line", l);
        }
        if let Some(record) = pos.map(|p| p.record()).filter(|r| *r > 0) {
            p = p.row(usize::try_from(record).unwrap_or(usize::MAX));
        }
        p
    };
    let headers = reader.headers().map_err(syntax)?.clone();
    let mut columns: [Option<usize>; 4] = [None; 4];
    for (i, name) in headers.iter().enumerate() {
        let slot = match name.to_ascii_lowercase().as_str() {
            "time" => 0,
            "stage" => 1,
            "discharge" => 2,
            "quality" => 3,
            "rate_check" | "revision" => continue,
            other => {
                return Err(Problem::malformed(
                    "csv",
                    format!("unknown column `{other}` in the header row; expected {CSV_HEADER}"),
                )
                .field(other.to_owned())
                .row(0));
            }
        };
        if columns[slot].replace(i).is_some() {
            return Err(
                Problem::malformed("csv", format!("column `{name}` appears twice"))
                    .field(name.to_owned()),
            );
        }
    }
    if columns[0].is_none() {
        return Err(Problem::malformed(
            "csv",
            format!("the first line must be a header row with a `time` column, e.g. {CSV_HEADER}"),
        )
        .field("time"));
    }
    let mut rows = Vec::new();
    for record in reader.records() {
        let record = record.map_err(syntax)?;
        let get = |slot: usize| {
            columns[slot]
                .and_then(|c| record.get(c))
                .filter(|s| !s.is_empty())
        };
        let number = |slot: usize| match get(slot) {
            None => Field::Absent,
            Some(t) => t.parse::<f64>().map_or(
                Field::Invalid(format!("`{t}` is not a number")),
                Field::Value,
            ),
        };
        let text = |slot: usize| get(slot).map_or(Field::Absent, |t| Field::Value(t.to_owned()));
        rows.push(Ok(RawReading {
            time: text(0),
            stage: number(1),
            discharge: number(2),
            quality: text(3),
        }));
    }
    Ok(rows)
}

async fn ingest(
    auth: RequireRole<GaugeWriter>,
    State(state): State<AppState>,
    Path(gauge_id): Path<String>,
    headers: HeaderMap,
    body: Bytes,
) -> Result<Response, ApiError> {
    let caller = auth.caller();
    if !caller.may_post_readings(&gauge_id) {
        return Err(
            Problem::new(StatusCode::FORBIDDEN, "forbidden", "Forbidden")
                .detail(format!(
                    "key {} may not post readings for gauge `{gauge_id}`",
                    caller.key_id()
                ))
                .field("gauge")
                .into(),
        );
    }
    let gauge = find_gauge(&state, &gauge_id).await?;
    let media = media_type(&headers);
    let (format, raw_rows) = match media.as_str() {
        "application/json" => ("json", parse_json_rows(&body)?),
        "text/csv" => ("csv", parse_csv_rows(&body)?),
        other => {
            return Err(Problem::new(
                StatusCode::UNSUPPORTED_MEDIA_TYPE,
                "unsupported-media-type",
                "Unsupported media type",
            )
            .detail(format!(
                "Content-Type `{other}` is not accepted here; send application/json or text/csv"
            ))
            .field("Content-Type")
            .into());
        }
    };
    let received = raw_rows.len();
    if received > state.config.ingest.max_rows_per_request {
        return Err(Problem::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "too-many-readings",
            "Too many readings",
        )
        .detail(format!(
            "{received} readings in one request; at most {} (ingest.max_rows_per_request)",
            state.config.ingest.max_rows_per_request
        ))
        .field("readings")
        .into());
    }
    let limits = Limits {
        now_ms: Utc::now().timestamp_millis(),
        max_future_ms: i64::try_from(state.config.ingest.max_future_secs)
            .unwrap_or(i64::MAX / 1000)
            .saturating_mul(1000),
    };
    let mut errors = Vec::new();
    let mut valid = Vec::with_capacity(received);
    for (i, raw) in raw_rows.into_iter().enumerate() {
        match raw.and_then(|r| check(i + 1, &r, &gauge, limits)) {
            Ok(r) => valid.push((i + 1, r)),
            Err(e) => errors.push(e),
        }
    }
    let (rows, in_batch_dupes, mut batch_errors) = dedupe_batch(valid);
    errors.append(&mut batch_errors);
    errors.sort_by_key(|e| e.row);
    let outcome = if rows.is_empty() && in_batch_dupes == 0 {
        IngestOutcome::default()
    } else {
        let extra =
            serde_json::json!({"received": received, "rejected": errors.len(), "format": format});
        let outcome = state
            .store
            .ingest(&gauge_id, &rows, caller.key_id(), extra, in_batch_dupes)
            .await?
            .ok_or_else(|| Problem::invalid("gauge", "the gauge was removed"))?;
        if outcome.accepted + outcome.revised > 0 {
            state.cache.invalidate(&gauge_id);
            wake_forecasts(&state, &gauge_id);
        }
        outcome
    };
    let report = Report {
        gauge: gauge_id,
        received,
        accepted: outcome.accepted,
        duplicate: outcome.duplicate,
        revised: outcome.revised,
        rejected: errors.len(),
        suspect_by_rate: outcome.suspect_by_rate,
        errors,
    };
    if received > 0 && report.rejected == received {
        let first = &report.errors[0];
        let problem = Problem::new(
            StatusCode::UNPROCESSABLE_ENTITY,
            "invalid-readings",
            "No reading was accepted",
        )
        .detail(format!(
            "row {}: {}: {}",
            first.row, first.field, first.reason
        ))
        .field(first.field.clone())
        .row(first.row)
        .with("accepted", 0)
        .with("rejected", report.rejected)
        .with("errors", &report.errors);
        return Err(problem.into());
    }
    Ok((StatusCode::OK, Json(report)).into_response())
}

#[derive(Debug, Serialize)]
struct ReadingOut {
    time: String,
    stage: Option<f64>,
    discharge: Option<f64>,
    quality: &'static str,
    rate_check: &'static str,
    /// Whether the reading feeds forecasts (not suspect by rate).
    for_forecast: bool,
    revision: i64,
}

impl From<&StoredReading> for ReadingOut {
    fn from(r: &StoredReading) -> Self {
        Self {
            time: format_time(r.time_ms),
            stage: r.stage_m,
            discharge: r.discharge_m3s,
            quality: r.quality.as_str(),
            rate_check: r.rate_check.as_str(),
            for_forecast: r.for_forecast(),
            revision: r.revision,
        }
    }
}

#[derive(Debug, Serialize)]
struct Page<'a> {
    gauge: &'a str,
    order: &'static str,
    count: usize,
    readings: Vec<ReadingOut>,
    next_cursor: Option<String>,
}

fn csv_body(readings: &[StoredReading]) -> Result<Vec<u8>, ApiError> {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .from_writer(Vec::with_capacity(64 * (readings.len() + 1)));
    let fail = |e: csv::Error| ApiError::Internal(anyhow::anyhow!("writing CSV: {e}"));
    w.write_record(CSV_HEADER.split(',')).map_err(fail)?;
    let num = |v: Option<f64>| v.map(|x| x.to_string()).unwrap_or_default();
    for r in readings {
        w.write_record([
            format_time(r.time_ms),
            num(r.stage_m),
            num(r.discharge_m3s),
            r.quality.as_str().to_owned(),
            r.rate_check.as_str().to_owned(),
            r.revision.to_string(),
        ])
        .map_err(fail)?;
    }
    w.into_inner()
        .map_err(|e| ApiError::Internal(anyhow::anyhow!("writing CSV: {e}")))
}

fn bad_param(field: &str, detail: impl Into<String>) -> ApiError {
    Problem::new(
        StatusCode::BAD_REQUEST,
        "invalid-parameter",
        "Invalid query parameter",
    )
    .field(field)
    .detail(detail)
    .into()
}

fn respond(csv: bool, body: Bytes, next_cursor: Option<&str>) -> Response {
    let ctype = if csv {
        "text/csv; charset=utf-8; header=present"
    } else {
        "application/json"
    };
    let mut res = (StatusCode::OK, body).into_response();
    let h = res.headers_mut();
    h.insert(header::CONTENT_TYPE, HeaderValue::from_static(ctype));
    if let Some(c) = next_cursor.and_then(|c| HeaderValue::from_str(c).ok()) {
        h.insert("next-cursor", c);
    }
    res
}

async fn list(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(gauge_id): Path<String>,
    Query(params): Query<HashMap<String, String>>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    for k in params.keys() {
        if !["from", "to", "limit", "order", "cursor", "format"].contains(&k.as_str()) {
            return Err(bad_param(
                k,
                "unknown parameter (expected from, to, limit, order, cursor, format)",
            ));
        }
    }
    let csv = match params.get("format").map(String::as_str) {
        Some("csv") => true,
        Some("json") => false,
        Some(other) => return Err(bad_param("format", format!("`{other}` is not json or csv"))),
        None => headers
            .get(header::ACCEPT)
            .and_then(|v| v.to_str().ok())
            .is_some_and(|a| a.contains("text/csv")),
    };
    let newest_first = match params.get("order").map(String::as_str) {
        None | Some("newest") => true,
        Some("oldest") => false,
        Some(other) => {
            return Err(bad_param(
                "order",
                format!("`{other}` is not newest or oldest"),
            ));
        }
    };
    let max = i64::try_from(state.config.ingest.max_page_size).unwrap_or(i64::MAX);
    let limit = match params.get("limit") {
        None => DEFAULT_LIMIT.min(max),
        Some(t) => match t.parse::<i64>() {
            Ok(n) if (1..=max).contains(&n) => n,
            _ => {
                return Err(bad_param(
                    "limit",
                    format!("must be an integer from 1 to {max}"),
                ));
            }
        },
    };
    let time_param = |name: &str| -> Result<Option<i64>, ApiError> {
        params
            .get(name)
            .map(|t| parse_time(t).map_err(|e| bad_param(name, e)))
            .transpose()
    };
    let from = time_param("from")?;
    let to = time_param("to")?;
    let cursor = params
        .get("cursor")
        .map(|c| {
            c.parse::<i64>()
                .map_err(|_| bad_param("cursor", "not a cursor returned by this endpoint"))
        })
        .transpose()?;
    let cache_key = CacheKey {
        limit,
        newest_first,
        csv,
    };
    let cacheable = from.is_none() && to.is_none() && cursor.is_none();
    let generation = if cacheable {
        match state.cache.get(&gauge_id, cache_key) {
            Ok(hit) => return Ok(respond(csv, hit.body, hit.next_cursor.as_deref())),
            Err(g) => Some(g),
        }
    } else {
        None
    };
    find_gauge(&state, &gauge_id).await?;
    let mut q = ReadingsQuery {
        from_ms: from.unwrap_or(i64::MIN),
        to_ms: to.unwrap_or(i64::MAX),
        newest_first,
        limit,
    };
    if let Some(c) = cursor {
        if newest_first {
            q.to_ms = q.to_ms.min(c.saturating_sub(1));
        } else {
            q.from_ms = q.from_ms.max(c.saturating_add(1));
        }
    }
    let mut readings = state.store.readings(&gauge_id, q).await?;
    let more = readings.len() as i64 > limit;
    readings.truncate(usize::try_from(limit).unwrap_or(usize::MAX));
    let next_cursor = more
        .then(|| readings.last().map(|r| r.time_ms.to_string()))
        .flatten();
    let body = if csv {
        Bytes::from(csv_body(&readings)?)
    } else {
        let page = Page {
            gauge: &gauge_id,
            order: if newest_first { "newest" } else { "oldest" },
            count: readings.len(),
            readings: readings.iter().map(ReadingOut::from).collect(),
            next_cursor: next_cursor.clone(),
        };
        Bytes::from(
            serde_json::to_vec(&page)
                .map_err(|e| ApiError::Internal(anyhow::anyhow!("serialising page: {e}")))?,
        )
    };
    if let Some(g) = generation {
        state.cache.put(
            &gauge_id,
            g,
            cache_key,
            Cached {
                body: body.clone(),
                next_cursor: next_cursor.clone(),
            },
        );
    }
    Ok(respond(csv, body, next_cursor.as_deref()))
}

fn path_time(text: &str) -> Result<i64, ApiError> {
    parse_time(text).map_err(|e| Problem::invalid("time", e).into())
}

fn no_reading(gauge: &str, time_ms: i64) -> ApiError {
    Problem::new(StatusCode::NOT_FOUND, "unknown-reading", "No such reading")
        .detail(format!(
            "gauge `{gauge}` has no reading at {}",
            format_time(time_ms)
        ))
        .field("time")
        .into()
}

#[derive(Debug, Serialize)]
struct Revision {
    stage: Option<f64>,
    discharge: Option<f64>,
    quality: &'static str,
    rate_check: &'static str,
    revision: i64,
    received_at: String,
    sent_by: String,
    replaced_at: String,
    replaced_by: String,
}

async fn one(
    _: ReadAccess,
    State(state): State<AppState>,
    Path((gauge_id, time)): Path<(String, String)>,
) -> Result<Json<Value>, ApiError> {
    let time_ms = path_time(&time)?;
    find_gauge(&state, &gauge_id).await?;
    let q = ReadingsQuery {
        from_ms: time_ms,
        to_ms: time_ms,
        newest_first: true,
        limit: 1,
    };
    let found = state.store.readings(&gauge_id, q).await?;
    let reading = found
        .first()
        .ok_or_else(|| no_reading(&gauge_id, time_ms))?;
    let revisions: Vec<Revision> = state
        .store
        .reading_revisions(&gauge_id, time_ms)
        .await?
        .into_iter()
        .map(|rev| Revision {
            stage: rev.reading.stage_m,
            discharge: rev.reading.discharge_m3s,
            quality: rev.reading.quality.as_str(),
            rate_check: rev.reading.rate_check.as_str(),
            revision: rev.reading.revision,
            received_at: format_time(rev.reading.received_at_ms),
            sent_by: rev.reading.key_id,
            replaced_at: format_time(rev.replaced_at_ms),
            replaced_by: rev.replaced_by,
        })
        .collect();
    Ok(Json(serde_json::json!({
        "gauge": gauge_id,
        "reading": ReadingOut::from(reading),
        "received_at": format_time(reading.received_at_ms),
        "sent_by": reading.key_id,
        "revisions": revisions,
    })))
}

async fn confirm(
    auth: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path((gauge_id, time)): Path<(String, String)>,
) -> Result<Json<Value>, ApiError> {
    let time_ms = path_time(&time)?;
    find_gauge(&state, &gauge_id).await?;
    let reading = state
        .store
        .confirm_reading(&gauge_id, time_ms, auth.caller().key_id())
        .await?
        .ok_or_else(|| no_reading(&gauge_id, time_ms))?;
    // Still `ok`: nothing held it back, so there is nothing to confirm.
    if reading.rate_check == RateCheck::Ok {
        return Err(Problem::new(
            StatusCode::CONFLICT,
            "not-suspect",
            "Reading is not flagged",
        )
        .detail("only a reading flagged suspect (by its sender or by rate) needs confirming")
        .field("time")
        .into());
    }
    state.cache.invalidate(&gauge_id);
    wake_forecasts(&state, &gauge_id);
    Ok(Json(serde_json::json!({
        "gauge": gauge_id,
        "reading": ReadingOut::from(&reading),
    })))
}

/// New usable data: the reaches that read this gauge run again soon
/// (debounced by the scheduler). Done off the request path.
fn wake_forecasts(state: &AppState, gauge_id: &str) {
    let forecaster = state.forecaster.clone();
    let gauge = gauge_id.to_owned();
    tokio::spawn(async move { forecaster.gauge_updated(&gauge).await });
}

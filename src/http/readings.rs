//! `/api/gauges/{gauge}/readings`: post readings (JSON or CSV), read them
//! in pages (JSON or CSV), look at one reading with its revisions, and
//! confirm a reading flagged suspect by rate.
//!
//! Batch semantics: a body that is not well-formed JSON or CSV is refused
//! whole (400). Otherwise every row is checked on its own; the valid rows
//! are stored in one transaction and the answer reports accepted,
//! duplicate, revised and rejected rows, naming each rejected row's field.

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, State},
    http::{HeaderMap, HeaderValue, StatusCode, header},
    response::{IntoResponse, Response},
    routing::{get, post},
};
use chrono::{DateTime, Utc};
use serde::{Deserialize, Deserializer, Serialize};
use serde_json::Value;

use super::{
    AppState,
    auth::{Forecasting, GaugeWriter, ReadAccess, RequireRole},
    cache::{CacheKey, Cached},
    error::{ApiError, Problem},
    gauges::find_gauge,
    query::{Format, Params, Time, bad_parameter, vary_accept},
};
use crate::{
    gauge::{
        Gauge,
        readings::{
            Field, Limits, NewReading, RateCheck, RawReading, Revision, StoredReading, check,
            dedupe_batch, format_time, parse_time, utc,
        },
    },
    row_error::RowError,
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

/// The rows of a body, each raw or already rejected, in body order.
type RawRows = Vec<Result<RawReading, RowError>>;

/// JSON body → raw rows. Syntax errors and a wrong top-level shape refuse
/// the request; a row of the wrong shape is rejected on its own.
fn parse_json_rows(body: &[u8]) -> Result<RawRows, Problem> {
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
    let err = |field: &str, message: &str| RowError {
        row,
        field: field.to_owned(),
        message: message.to_owned(),
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
fn parse_csv_rows(body: &[u8]) -> Result<RawRows, Problem> {
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

/// Raw rows of a body, by its media type, and the format's name.
fn parse_rows(headers: &HeaderMap, body: &[u8]) -> Result<(&'static str, RawRows), Problem> {
    match super::query::media_type(headers, "").as_str() {
        "application/json" => Ok(("json", parse_json_rows(body)?)),
        "text/csv" => Ok(("csv", parse_csv_rows(body)?)),
        other => Err(Problem::unsupported_media(other)),
    }
}

/// The rows that pass the per-row checks, de-duplicated within the batch,
/// with the number of in-batch duplicates and every rejection by row.
fn checked_rows(
    raw_rows: RawRows,
    gauge: &Gauge,
    limits: Limits,
) -> (Vec<NewReading>, usize, Vec<RowError>) {
    let mut errors = Vec::new();
    let mut valid = Vec::with_capacity(raw_rows.len());
    for (i, raw) in raw_rows.into_iter().enumerate() {
        match raw.and_then(|r| check(i + 1, &r, gauge, limits)) {
            Ok(r) => valid.push((i + 1, r)),
            Err(e) => errors.push(e),
        }
    }
    let (rows, in_batch_dupes, mut batch_errors) = dedupe_batch(valid);
    errors.append(&mut batch_errors);
    errors.sort_by_key(|e| e.row);
    (rows, in_batch_dupes, errors)
}

/// 422 when every row of a batch was rejected: the first bad row named,
/// all of them listed.
fn nothing_accepted(report: &Report) -> Option<Problem> {
    let first = report.errors.first()?;
    (report.rejected == report.received).then(|| {
        Problem::new(
            StatusCode::UNPROCESSABLE_ENTITY,
            "invalid-readings",
            "No reading was accepted",
        )
        .detail(format!(
            "row {}: {}: {}",
            first.row, first.field, first.message
        ))
        .field(first.field.clone())
        .row(first.row)
        .with("accepted", 0)
        .with("rejected", report.rejected)
        .with("errors", &report.errors)
    })
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
    let (format, raw_rows) = parse_rows(&headers, &body)?;
    let received = raw_rows.len();
    let max_rows = state.config.ingest.max_rows_per_request;
    if received > max_rows {
        return Err(Problem::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "too-many-readings",
            "Too many readings",
        )
        .detail(format!(
            "{received} readings in one request; at most {max_rows} (ingest.max_rows_per_request)"
        ))
        .field("readings")
        .into());
    }
    let limits = Limits {
        now_ms: Utc::now().timestamp_millis(),
        max_future_ms: i64::try_from(state.config.ingest.max_future_secs)
            .unwrap_or(i64::MAX / 1000)
            .saturating_mul(1000),
        earliest_ms: crate::gauge::readings::earliest_ms(state.config.ingest.earliest_year),
    };
    let (rows, in_batch_dupes, errors) = checked_rows(raw_rows, &gauge, limits);
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
    count_readings(&state, &gauge_id, &outcome, &errors);
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
    if let Some(problem) = nothing_accepted(&report) {
        return Err(problem.into());
    }
    Ok((StatusCode::OK, Json(report)).into_response())
}

/// Counts a batch's outcome in the service's metrics.
fn count_readings(state: &AppState, gauge: &str, o: &IngestOutcome, errors: &[RowError]) {
    let m = state.forecaster.metrics();
    m.readings(gauge, "accepted", "", o.accepted as u64);
    m.readings(gauge, "duplicate", "", o.duplicate as u64);
    m.readings(gauge, "revised", "", o.revised as u64);
    for e in errors {
        m.readings(gauge, "rejected", &e.field, 1);
    }
}

#[derive(Debug, Serialize)]
struct ReadingOut {
    #[serde(with = "crate::wire_time")]
    time: DateTime<Utc>,
    stage: Option<f64>,
    discharge: Option<f64>,
    quality: &'static str,
    rate_check: &'static str,
    /// Whether the reading feeds forecasts (the domain's one rule).
    for_forecast: bool,
    revision: i64,
}

impl From<&StoredReading> for ReadingOut {
    fn from(r: &StoredReading) -> Self {
        Self {
            time: utc(r.time_ms),
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
    order: Order,
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

/// `order`: newest first (the default) or oldest first.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
enum Order {
    #[default]
    Newest,
    Oldest,
}

/// `cursor`: the `next_cursor` of the previous page (the time of its last
/// reading, in Unix ms; clients pass it back unchanged). A whole number
/// beyond the 64-bit range reads as that range's end: no reading lies
/// beyond it either way, and the document allows up to 19 digits.
#[derive(Debug, Clone, Copy)]
struct Cursor(i64);

impl<'de> Deserialize<'de> for Cursor {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        text.parse::<i128>()
            .map(|v| Cursor(v.clamp(i64::MIN.into(), i64::MAX.into()) as i64))
            .map_err(|_| serde::de::Error::custom("not a cursor returned by this endpoint"))
    }
}

/// The query of `GET …/readings`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ListParams {
    from: Option<Time>,
    to: Option<Time>,
    #[serde(default)]
    order: Order,
    limit: Option<i64>,
    cursor: Option<Cursor>,
    format: Option<Format>,
}

impl ListParams {
    /// The page size, checked against `ingest.max_page_size`.
    fn limit(&self, max_page_size: usize) -> Result<i64, Problem> {
        let max = i64::try_from(max_page_size).unwrap_or(i64::MAX);
        match self.limit {
            None => Ok(DEFAULT_LIMIT.min(max)),
            Some(n) if (1..=max).contains(&n) => Ok(n),
            Some(_) => Err(bad_parameter(
                "limit",
                format!("must be an integer from 1 to {max}"),
            )),
        }
    }

    /// The store query for one page: the bounds narrowed by the cursor.
    fn query(&self, limit: i64) -> ReadingsQuery {
        let newest_first = self.order == Order::Newest;
        let mut q = ReadingsQuery {
            from_ms: self.from.map_or(i64::MIN, |t| t.0),
            to_ms: self.to.map_or(i64::MAX, |t| t.0),
            newest_first,
            limit,
        };
        if let Some(Cursor(c)) = self.cursor {
            if newest_first {
                q.to_ms = q.to_ms.min(c.saturating_sub(1));
            } else {
                q.from_ms = q.from_ms.max(c.saturating_add(1));
            }
        }
        q
    }
}

fn respond(format: Format, body: Bytes, next_cursor: Option<&str>) -> Response {
    let ctype = match format {
        Format::Csv => "text/csv; charset=utf-8; header=present",
        Format::Json => "application/json",
    };
    let mut res = (StatusCode::OK, body).into_response();
    let h = res.headers_mut();
    h.insert(header::CONTENT_TYPE, HeaderValue::from_static(ctype));
    vary_accept(h);
    if let Some(c) = next_cursor.and_then(|c| HeaderValue::from_str(c).ok()) {
        h.insert("next-cursor", c);
    }
    res
}

/// One page of readings in `format`, and the cursor of the next page.
async fn page_body(
    state: &AppState,
    gauge_id: &str,
    params: &ListParams,
    limit: i64,
    format: Format,
) -> Result<(Bytes, Option<String>), ApiError> {
    let mut readings = state.store.readings(gauge_id, params.query(limit)).await?;
    let more = readings.len() as i64 > limit;
    readings.truncate(usize::try_from(limit).unwrap_or(usize::MAX));
    let next_cursor = more
        .then(|| readings.last().map(|r| r.time_ms.to_string()))
        .flatten();
    let body = match format {
        Format::Csv => Bytes::from(csv_body(&readings)?),
        Format::Json => {
            let page = Page {
                gauge: gauge_id,
                order: params.order,
                count: readings.len(),
                readings: readings.iter().map(ReadingOut::from).collect(),
                next_cursor: next_cursor.clone(),
            };
            Bytes::from(
                serde_json::to_vec(&page)
                    .map_err(|e| ApiError::Internal(anyhow::anyhow!("serialising page: {e}")))?,
            )
        }
    };
    Ok((body, next_cursor))
}

async fn list(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(gauge_id): Path<String>,
    Params(params): Params<ListParams>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let format = Format::choose(params.format, &headers);
    let limit = params.limit(state.config.ingest.max_page_size)?;
    let cache_key = CacheKey {
        limit,
        newest_first: params.order == Order::Newest,
        csv: format == Format::Csv,
    };
    let cacheable = params.from.is_none() && params.to.is_none() && params.cursor.is_none();
    let generation = if cacheable {
        match state.cache.get(&gauge_id, cache_key) {
            Ok(hit) => return Ok(respond(format, hit.body, hit.next_cursor.as_deref())),
            Err(g) => Some(g),
        }
    } else {
        None
    };
    find_gauge(&state, &gauge_id).await?;
    let (body, next_cursor) = page_body(&state, &gauge_id, &params, limit, format).await?;
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
    Ok(respond(format, body, next_cursor.as_deref()))
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

/// An earlier value of a reading on the wire.
#[derive(Debug, Serialize)]
struct RevisionOut {
    stage: Option<f64>,
    discharge: Option<f64>,
    quality: &'static str,
    rate_check: &'static str,
    revision: i64,
    #[serde(with = "crate::wire_time")]
    received_at: DateTime<Utc>,
    sent_by: String,
    #[serde(with = "crate::wire_time")]
    replaced_at: DateTime<Utc>,
    replaced_by: String,
}

impl From<Revision> for RevisionOut {
    fn from(rev: Revision) -> Self {
        let r = rev.reading;
        Self {
            stage: r.stage_m,
            discharge: r.discharge_m3s,
            quality: r.quality.as_str(),
            rate_check: r.rate_check.as_str(),
            revision: r.revision,
            received_at: utc(r.received_at_ms),
            sent_by: r.key_id,
            replaced_at: utc(rev.replaced_at_ms),
            replaced_by: rev.replaced_by,
        }
    }
}

/// One reading with who sent it, when, and its earlier values.
#[derive(Debug, Serialize)]
struct OneOut {
    gauge: String,
    reading: ReadingOut,
    #[serde(with = "crate::wire_time")]
    received_at: DateTime<Utc>,
    sent_by: String,
    revisions: Vec<RevisionOut>,
}

async fn one(
    _: ReadAccess,
    State(state): State<AppState>,
    Path((gauge_id, time)): Path<(String, String)>,
) -> Result<Json<OneOut>, ApiError> {
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
    let revisions = state.store.reading_revisions(&gauge_id, time_ms).await?;
    Ok(Json(OneOut {
        reading: ReadingOut::from(reading),
        received_at: utc(reading.received_at_ms),
        sent_by: reading.key_id.clone(),
        revisions: revisions.into_iter().map(RevisionOut::from).collect(),
        gauge: gauge_id,
    }))
}

async fn confirm(
    auth: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path((gauge_id, time)): Path<(String, String)>,
) -> Result<Json<ConfirmedOut>, ApiError> {
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
    Ok(Json(ConfirmedOut {
        reading: ReadingOut::from(&reading),
        gauge: gauge_id,
    }))
}

#[derive(Debug, Serialize)]
struct ConfirmedOut {
    gauge: String,
    reading: ReadingOut,
}

/// New usable data: the reaches that read this gauge run again soon
/// (debounced by the scheduler). Done off the request path.
fn wake_forecasts(state: &AppState, gauge_id: &str) {
    let forecaster = state.forecaster.clone();
    let gauge = gauge_id.to_owned();
    tokio::spawn(async move { forecaster.gauge_updated(&gauge).await });
}

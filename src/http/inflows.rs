//! Revised inflow forecasts uploaded by a forecaster:
//!
//! - `POST /api/reaches/{reach}/inflows` (forecaster): JSON
//!   `{"reason": "...", "series": [{"time": "...", "discharge": ...}]}`, or
//!   `text/csv` with a `time,discharge` header and `?reason=...`. The whole
//!   upload is accepted or refused: a forecast hydrograph with a bad row is
//!   not a forecast. A refusal lists every bad row in `errors`.
//! - `GET /api/reaches/{reach}/inflows`: every upload, newest first.
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
use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    AppState,
    auth::{Forecasting, ReadAccess, RequireRole},
    error::{ApiError, Problem, parse_json},
};
use crate::CAUTION;

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/reaches/{reach}/inflows", get(list).post(upload))
        .route(
            "/reaches/{reach}/inflows/{version}/withdraw",
            post(withdraw),
        )
}

/// Most samples in one upload (a 30-day hydrograph at one minute).
const MAX_POINTS: usize = 50_000;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct UploadBody {
    reason: String,
    series: Vec<serde_json::Value>,
}

/// One parsed row: its 1-based number and the sample or why it is bad.
type Row = (usize, Result<(DateTime<Utc>, f64), RowError>);

#[derive(Debug, Serialize)]
struct RowError {
    row: usize,
    field: String,
    message: String,
}

fn check_rows(rows: Vec<Row>) -> Result<Vec<(DateTime<Utc>, f64)>, Vec<RowError>> {
    let mut errors = Vec::new();
    let mut out: Vec<(DateTime<Utc>, f64)> = Vec::new();
    for (row, r) in rows {
        match r {
            Ok((t, q)) => {
                if let Some((prev, _)) = out.last()
                    && t <= *prev
                {
                    errors.push(RowError {
                        row,
                        field: "time".into(),
                        message: format!("times must increase: {t} does not follow {prev}"),
                    });
                    continue;
                }
                out.push((t, q));
            }
            Err(e) => errors.push(e),
        }
    }
    if out.len() < 2 && errors.is_empty() {
        errors.push(RowError {
            row: 0,
            field: "series".into(),
            message: "at least two samples are needed".into(),
        });
    }
    if errors.is_empty() {
        Ok(out)
    } else {
        Err(errors)
    }
}

fn parse_sample(
    row: usize,
    time: &str,
    q: Result<f64, String>,
) -> Result<(DateTime<Utc>, f64), RowError> {
    let t = DateTime::parse_from_rfc3339(time.trim()).map_err(|e| RowError {
        row,
        field: "time".into(),
        message: format!("`{time}` is not an RFC 3339 time with an offset ({e})"),
    })?;
    let q = q.map_err(|m| RowError {
        row,
        field: "discharge".into(),
        message: m,
    })?;
    if !q.is_finite() {
        return Err(RowError {
            row,
            field: "discharge".into(),
            message: "must be a finite number".into(),
        });
    }
    if q < 0.0 {
        return Err(RowError {
            row,
            field: "discharge".into(),
            message: format!("must not be negative, got {q}"),
        });
    }
    Ok((t.with_timezone(&Utc), q))
}

fn from_json(body: &[u8]) -> Result<(String, Vec<Row>), Problem> {
    let b: UploadBody = parse_json(body)?;
    let rows = b
        .series
        .iter()
        .enumerate()
        .map(|(i, v)| {
            let row = i + 1;
            let time = v.get("time").and_then(|t| t.as_str()).unwrap_or("");
            let q = match v.get("discharge") {
                Some(serde_json::Value::Number(n)) => {
                    n.as_f64().ok_or_else(|| "not a number".to_owned())
                }
                Some(other) => Err(format!("`{other}` is not a number")),
                None => Err("missing".to_owned()),
            };
            (row, parse_sample(row, time, q))
        })
        .collect();
    Ok((b.reason, rows))
}

fn from_csv(body: &[u8]) -> Result<Vec<Row>, Problem> {
    let mut reader = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(body);
    let headers = reader
        .headers()
        .map_err(|e| Problem::malformed("csv", format!("not valid CSV (RFC 4180): {e}")))?
        .clone();
    let col = |n: &str| headers.iter().position(|h| h.eq_ignore_ascii_case(n));
    let (Some(ti), Some(qi)) = (col("time"), col("discharge")) else {
        return Err(Problem::malformed(
            "csv",
            "the first line must be the header `time,discharge`".to_owned(),
        ));
    };
    let mut rows = Vec::new();
    for (i, rec) in reader.records().enumerate() {
        let rec =
            rec.map_err(|e| Problem::malformed("csv", format!("not valid CSV (RFC 4180): {e}")))?;
        // Row numbers count data rows from 1, as in the JSON form.
        let row = i + 1;
        let q = rec
            .get(qi)
            .unwrap_or("")
            .parse::<f64>()
            .map_err(|_| format!("`{}` is not a number", rec.get(qi).unwrap_or("")));
        rows.push((row, parse_sample(row, rec.get(ti).unwrap_or(""), q)));
    }
    Ok(rows)
}

fn reason_from_query(uri: &axum::http::Uri) -> Option<String> {
    uri.query()?
        .split('&')
        .find_map(|p| p.strip_prefix("reason="))
        .map(percent_decode)
}

/// Decodes `%XX` and `+` in a query value.
fn percent_decode(s: &str) -> String {
    let bytes = s.as_bytes();
    let mut out = Vec::with_capacity(bytes.len());
    let mut i = 0;
    while i < bytes.len() {
        match bytes[i] {
            b'+' => out.push(b' '),
            b'%' if i + 2 < bytes.len() => {
                match std::str::from_utf8(&bytes[i + 1..i + 3])
                    .ok()
                    .and_then(|h| u8::from_str_radix(h, 16).ok())
                {
                    Some(b) => {
                        out.push(b);
                        i += 2;
                    }
                    None => out.push(b'%'),
                }
            }
            b => out.push(b),
        }
        i += 1;
    }
    String::from_utf8_lossy(&out).into_owned()
}

async fn upload(
    auth: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(reach): Path<String>,
    headers: HeaderMap,
    uri: axum::http::Uri,
    body: Bytes,
) -> Result<Response, ApiError> {
    super::forecasts::find_reach(&state, &reach).await?;
    let media = headers
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("application/json")
        .split(';')
        .next()
        .unwrap_or("")
        .trim()
        .to_ascii_lowercase();
    let (reason, rows) = match media.as_str() {
        "application/json" => from_json(&body)?,
        "text/csv" => (
            reason_from_query(&uri).unwrap_or_default(),
            from_csv(&body)?,
        ),
        other => {
            return Err(Problem::new(
                StatusCode::UNSUPPORTED_MEDIA_TYPE,
                "unsupported-media-type",
                "Unsupported media type",
            )
            .detail(format!("`{other}`: send application/json or text/csv"))
            .into());
        }
    };
    let reason = reason.trim().to_owned();
    if reason.is_empty() || reason.chars().count() > 500 {
        return Err(Problem::invalid("reason", "say why in 1 to 500 characters").into());
    }
    if rows.len() > MAX_POINTS {
        return Err(Problem::invalid("series", format!("at most {MAX_POINTS} samples")).into());
    }
    let series = match check_rows(rows) {
        Ok(s) => s,
        Err(errors) => {
            let first = &errors[0];
            let mut p =
                Problem::invalid(first.field.clone(), first.message.clone()).detail(format!(
                    "{} row(s) rejected; nothing was stored. First: row {}, {}: {}",
                    errors.len(),
                    first.row,
                    first.field,
                    first.message
                ));
            if first.row > 0 {
                p = p.row(first.row);
            }
            return Err(p.with("errors", &errors).into());
        }
    };
    let version = state
        .store
        .insert_upload(&reach, &series, &reason, auth.caller().key_id())
        .await?;
    state.forecaster.data_arrived(&reach);
    Ok((
        StatusCode::CREATED,
        Json(serde_json::json!({"reach": reach, "version": version, "points": series.len()})),
    )
        .into_response())
}

async fn list(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(reach): Path<String>,
) -> Result<Response, ApiError> {
    super::forecasts::find_reach(&state, &reach).await?;
    let uploads = state.store.uploads(&reach).await?;
    Ok(
        Json(serde_json::json!({"caution": CAUTION, "reach": reach, "uploads": uploads}))
            .into_response(),
    )
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
        return Err(
            Problem::new(StatusCode::NOT_FOUND, "not-found", "No such upload")
                .detail(format!("reach `{reach}` has no upload {v} in force"))
                .field("version")
                .into(),
        );
    }
    state.forecaster.data_arrived(&reach);
    Ok(Json(serde_json::json!({"reach": reach, "version": v, "withdrawn": true})).into_response())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn percent_decoding_of_reasons() {
        assert_eq!(percent_decode("storm+update%2C+v2"), "storm update, v2");
        assert_eq!(percent_decode("100%"), "100%");
    }

    #[test]
    fn all_bad_rows_are_listed() {
        let rows = from_csv(
            b"time,discharge\n2026-03-01T00:00:00Z,1\nyesterday,2\n2026-03-01T02:00:00Z,-3\n",
        )
        .expect("csv");
        let errors = check_rows(rows).unwrap_err();
        assert_eq!(errors.len(), 2);
        assert_eq!((errors[0].row, errors[0].field.as_str()), (2, "time"));
        assert_eq!((errors[1].row, errors[1].field.as_str()), (3, "discharge"));
    }
}

//! Inflow hydrographs as people send them: CSV text (a header row with
//! `time` and `discharge` columns, one row per sample, RFC 3339 times with
//! an offset, discharge in m³/s; RFC 4180 quoting, CRLF line ends and `#`
//! comment lines accepted) or the JSON form `[{"time", "discharge"}, …]`.
//! Both end in [`Hydrograph::parse`], the one rule for a hydrograph, and
//! report bad rows in one shape ([`RowError`]).

use chrono::{DateTime, Utc};

use super::hydrograph::{Hydrograph, check_discharge};
use crate::row_error::RowError;

/// Why an inflow could not be read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum InflowError {
    /// Not CSV at all, or no `time`/`discharge` header.
    #[error("{0}")]
    Malformed(String),
    /// Readable, but these rows are wrong (every one is listed).
    #[error("{} bad row(s); first: {}", .0.len(), .0.first().map(ToString::to_string).unwrap_or_default())]
    Rows(Vec<RowError>),
}

/// One sample from its text: an RFC 3339 time with offset and a discharge.
fn sample(
    row: usize,
    time: &str,
    q: Result<f64, String>,
) -> Result<(DateTime<Utc>, f64), RowError> {
    let t = DateTime::parse_from_rfc3339(time.trim()).map_err(|e| {
        RowError::new(
            row,
            "time",
            format!("`{time}` is not an RFC 3339 time with an offset ({e})"),
        )
    })?;
    let q = q.map_err(|m| RowError::new(row, "discharge", m))?;
    Ok((t.with_timezone(&Utc), check_discharge(row, q)?))
}

/// Every row's own errors first; only a series whose rows all parse is
/// checked as a whole (order, length), so row numbers stay the sender's.
fn finish(rows: Vec<Result<(DateTime<Utc>, f64), RowError>>) -> Result<Hydrograph, Vec<RowError>> {
    let mut good = Vec::with_capacity(rows.len());
    let mut errors = Vec::new();
    for r in rows {
        match r {
            Ok(s) => good.push(s),
            Err(e) => errors.push(e),
        }
    }
    if errors.is_empty() {
        Hydrograph::parse(good)
    } else {
        Err(errors)
    }
}

/// Parses a CSV inflow.
pub fn parse_csv(body: &[u8]) -> Result<Hydrograph, InflowError> {
    let malformed =
        |e: csv::Error| InflowError::Malformed(format!("not valid CSV (RFC 4180): {e}"));
    let mut reader = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(body);
    let headers = reader.headers().map_err(malformed)?.clone();
    let col = |n: &str| headers.iter().position(|h| h.eq_ignore_ascii_case(n));
    let (Some(ti), Some(qi)) = (col("time"), col("discharge")) else {
        return Err(InflowError::Malformed(format!(
            "the header must name the columns `time` and `discharge`; found `{}`",
            headers.iter().collect::<Vec<_>>().join(",")
        )));
    };
    let mut rows = Vec::new();
    for (i, rec) in reader.records().enumerate() {
        let rec = rec.map_err(malformed)?;
        let q_text = rec.get(qi).unwrap_or("");
        let q = q_text
            .parse::<f64>()
            .map_err(|_| format!("`{q_text}` is not a number"));
        rows.push(sample(i + 1, rec.get(ti).unwrap_or(""), q));
    }
    finish(rows).map_err(InflowError::Rows)
}

/// Parses the JSON form: each element an object with `time` (text) and
/// `discharge` (number).
pub fn parse_json_samples(values: &[serde_json::Value]) -> Result<Hydrograph, Vec<RowError>> {
    let rows = values
        .iter()
        .enumerate()
        .map(|(i, v)| {
            let time = v.get("time").and_then(|t| t.as_str()).unwrap_or("");
            let q = match v.get("discharge") {
                Some(serde_json::Value::Number(n)) => {
                    n.as_f64().ok_or_else(|| "not a number".to_owned())
                }
                Some(other) => Err(format!("`{other}` is not a number")),
                None => Err("missing".to_owned()),
            };
            sample(i + 1, time, q)
        })
        .collect();
    finish(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rows(e: InflowError) -> Vec<(usize, String)> {
        match e {
            InflowError::Rows(r) => r.into_iter().map(|e| (e.row, e.field)).collect(),
            InflowError::Malformed(m) => panic!("malformed: {m}"),
        }
    }

    #[test]
    fn parses_offsets_quotes_and_crlf() {
        let text =
            "time,discharge\r\n\"2026-03-01T00:00:00+01:00\",12.5\r\n2026-02-29T23:30:00Z,20\r\n";
        // 2026 is not a leap year: Feb 29 does not exist (RFC 3339 §5.7).
        assert_eq!(
            rows(parse_csv(text.as_bytes()).unwrap_err()),
            [(2, "time".to_owned())]
        );
        let text = "# a comment\r\ntime,discharge\r\n\"2026-03-01T00:00:00+01:00\",12.5\r\n2026-02-28T23:30:00Z,20\r\n";
        let h = parse_csv(text.as_bytes()).expect("valid");
        assert_eq!(h.len(), 2);
        assert_eq!(
            crate::wire_time::format(h.start()),
            "2026-02-28T23:00:00.000Z"
        );
        assert_eq!(h.samples()[1].1, 20.0);
    }

    #[test]
    fn every_bad_row_is_named() {
        let e = parse_csv(
            b"time,discharge\n2026-03-01T00:00:00Z,1\nyesterday,2\n2026-03-01T02:00:00Z,-3\n2026-03-01T03:00:00Z,NaN\n",
        )
        .unwrap_err();
        assert_eq!(
            rows(e),
            [
                (2, "time".to_owned()),
                (3, "discharge".to_owned()),
                (4, "discharge".to_owned())
            ]
        );
        let e = parse_csv(b"time,discharge\n2026-03-01T01:00:00Z,5\n2026-03-01T00:00:00Z,5\n")
            .unwrap_err();
        assert_eq!(rows(e), [(2, "time".to_owned())]);
        assert!(matches!(
            parse_csv(b"when,flow\n"),
            Err(InflowError::Malformed(_))
        ));
    }

    #[test]
    fn json_and_csv_agree() {
        let json: Vec<serde_json::Value> = serde_json::from_str(
            r#"[{"time":"2026-03-01T00:00:00Z","discharge":1},{"time":"2026-03-01T01:00:00Z","discharge":2.5}]"#,
        )
        .unwrap();
        let csv = b"time,discharge\n2026-03-01T00:00:00Z,1\n2026-03-01T01:00:00Z,2.5\n";
        assert_eq!(parse_json_samples(&json).unwrap(), parse_csv(csv).unwrap());
        let bad: Vec<serde_json::Value> =
            serde_json::from_str(r#"[{"time":"2026-03-01T00:00:00Z","discharge":"x"}]"#).unwrap();
        let e = parse_json_samples(&bad).unwrap_err();
        assert_eq!((e[0].row, e[0].field.as_str()), (1, "discharge"));
    }
}

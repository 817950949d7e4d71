//! Inflow hydrographs as people send them: CSV text (a header row with
//! `time` and `discharge` columns, one row per sample, RFC 3339 times with
//! an offset, discharge in m³/s; RFC 4180 quoting, CRLF line ends and `#`
//! comment lines accepted) or the JSON form `[{"time", "discharge"}, …]`.
//! Both end in [`Hydrograph::parse`], the one rule for a hydrograph, and
//! report bad rows in one shape ([`RowError`]).
//!
//! Either may carry extra traces ([`Traces`]): CSV a `discharge_<name>`
//! column each, JSON `traces: [{"name", "series"}]`. Without them an
//! upload is a single series, as before traces existed.

use chrono::{DateTime, Utc};

use super::{
    hydrograph::{Hydrograph, check_discharge},
    traces::{InflowTrace, Traces},
};
use crate::row_error::RowError;

/// An upload's inflow: the main series (the most likely one, which the
/// deterministic run routes) and its extra traces.
#[derive(Debug, Clone, PartialEq)]
pub struct Inflow {
    pub series: Hydrograph,
    pub traces: Traces,
}

/// The header prefix of a trace column in CSV.
const TRACE_COLUMN: &str = "discharge_";

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

/// A discharge cell's number.
fn number(text: &str) -> Result<f64, String> {
    text.parse::<f64>()
        .map_err(|_| format!("`{text}` is not a number"))
}

/// The trace columns of a CSV header: index and trace name.
fn trace_columns(headers: &csv::StringRecord) -> Vec<(usize, String)> {
    headers
        .iter()
        .enumerate()
        .filter_map(|(i, h)| {
            let prefix = h.get(..TRACE_COLUMN.len())?;
            prefix
                .eq_ignore_ascii_case(TRACE_COLUMN)
                .then(|| (i, h[TRACE_COLUMN.len()..].to_owned()))
        })
        .collect()
}

/// Parses a CSV inflow.
pub fn parse_csv(body: &[u8]) -> Result<Inflow, InflowError> {
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
    let columns = trace_columns(&headers);
    let mut rows = Vec::new();
    let mut trace_values = vec![Vec::new(); columns.len()];
    let mut errors = Vec::new();
    for (i, rec) in reader.records().enumerate() {
        let rec = rec.map_err(malformed)?;
        let cell = |c: usize| rec.get(c).unwrap_or("");
        rows.push(sample(i + 1, cell(ti), number(cell(qi))));
        for (k, &(c, _)) in columns.iter().enumerate() {
            // The row's time is reported once, by the main series.
            match number(cell(c)).and_then(|q| check_discharge(i + 1, q).map_err(|e| e.message)) {
                Ok(q) => trace_values[k].push(q),
                Err(m) => errors.push(RowError::new(i + 1, &headers[c], m)),
            }
        }
    }
    let main = finish(rows);
    let series = match (main, errors.is_empty()) {
        (Ok(h), true) => h,
        (Ok(_), false) => return Err(InflowError::Rows(errors)),
        (Err(mut e), _) => {
            e.append(&mut errors);
            e.sort_by_key(|e| e.row);
            return Err(InflowError::Rows(e));
        }
    };
    let mut traces = Vec::with_capacity(columns.len());
    for ((_, name), values) in columns.into_iter().zip(trace_values) {
        // Every value is checked and the times are the main series', so
        // this cannot fail; its errors are reported all the same.
        let samples = series.iter().map(|s| s.0).zip(values).collect();
        let trace = Hydrograph::parse(samples).map_err(InflowError::Rows)?;
        traces.push(InflowTrace {
            name,
            series: trace,
        });
    }
    let traces = Traces::parse(&series, traces, |_, name| format!("{TRACE_COLUMN}{name}"))
        .map_err(|e| InflowError::Rows(vec![e]))?;
    Ok(Inflow { series, traces })
}

/// Parses the JSON form of one series: each element an object with `time`
/// (text) and `discharge` (number).
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

/// Parses the JSON form of an upload: the main series and each named
/// trace's series. A trace's bad rows name it (`traces[i].discharge`).
pub fn parse_json(
    series: &[serde_json::Value],
    traces: &[(String, Vec<serde_json::Value>)],
) -> Result<Inflow, Vec<RowError>> {
    let main = parse_json_samples(series);
    let mut parsed = Vec::with_capacity(traces.len());
    let mut errors = Vec::new();
    for (i, (name, values)) in traces.iter().enumerate() {
        match parse_json_samples(values) {
            Ok(series) => parsed.push(InflowTrace {
                name: name.clone(),
                series,
            }),
            Err(e) => errors.extend(e.into_iter().map(|mut e| {
                e.field = format!("traces[{i}].{}", e.field);
                e
            })),
        }
    }
    let series = match main {
        Ok(h) if errors.is_empty() => h,
        Ok(_) => return Err(errors),
        Err(mut e) => {
            e.append(&mut errors);
            return Err(e);
        }
    };
    let traces =
        Traces::parse(&series, parsed, |i, _| format!("traces[{i}]")).map_err(|e| vec![e])?;
    Ok(Inflow { series, traces })
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
        let h = parse_csv(text.as_bytes()).expect("valid").series;
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
        assert_eq!(
            parse_json_samples(&json).unwrap(),
            parse_csv(csv).unwrap().series
        );
        let bad: Vec<serde_json::Value> =
            serde_json::from_str(r#"[{"time":"2026-03-01T00:00:00Z","discharge":"x"}]"#).unwrap();
        let e = parse_json_samples(&bad).unwrap_err();
        assert_eq!((e[0].row, e[0].field.as_str()), (1, "discharge"));
    }

    #[test]
    fn traces_come_as_columns_or_named_series() {
        let csv = b"time,discharge,discharge_low,discharge_high\n\
            2026-03-01T00:00:00Z,10,8,12\n2026-03-01T01:00:00Z,20,15,30\n";
        let up = parse_csv(csv).expect("valid");
        assert_eq!(up.traces.names(), ["low", "high"]);
        let high = up.traces.iter().nth(1).expect("high");
        assert_eq!(high.series.samples()[1].1, 30.0);
        let json: serde_json::Value = serde_json::from_str(
            r#"{"series":[{"time":"2026-03-01T00:00:00Z","discharge":10},{"time":"2026-03-01T01:00:00Z","discharge":20}],
                "traces":[{"name":"low","series":[{"time":"2026-03-01T00:00:00Z","discharge":8},{"time":"2026-03-01T01:00:00Z","discharge":15}]},
                          {"name":"high","series":[{"time":"2026-03-01T00:00:00Z","discharge":12},{"time":"2026-03-01T01:00:00Z","discharge":30}]}]}"#,
        )
        .unwrap();
        let named: Vec<(String, Vec<serde_json::Value>)> = json["traces"]
            .as_array()
            .unwrap()
            .iter()
            .map(|t| {
                let name = t["name"].as_str().unwrap().to_owned();
                (name, t["series"].as_array().unwrap().clone())
            })
            .collect();
        let from_json = parse_json(json["series"].as_array().unwrap(), &named).unwrap();
        assert_eq!(from_json, up);
    }

    #[test]
    fn a_bad_trace_cell_names_its_column_or_trace() {
        let e = parse_csv(b"time,discharge,discharge_low\n2026-03-01T00:00:00Z,10,x\nnoon,20,-1\n")
            .unwrap_err();
        assert_eq!(
            rows(e),
            [
                (1, "discharge_low".to_owned()),
                (2, "time".to_owned()),
                (2, "discharge_low".to_owned())
            ]
        );
        let e = parse_csv(
            b"time,discharge,discharge_Low\n2026-03-01T00:00:00Z,10,1\n2026-03-01T01:00:00Z,10,1\n",
        )
        .unwrap_err();
        assert_eq!(rows(e), [(0, "discharge_Low.name".to_owned())]);
        let series: Vec<serde_json::Value> = serde_json::from_str(
            r#"[{"time":"2026-03-01T00:00:00Z","discharge":1},{"time":"2026-03-01T01:00:00Z","discharge":2}]"#,
        )
        .unwrap();
        let mut bad = series.clone();
        bad[1]["discharge"] = serde_json::json!(-2);
        let e = parse_json(&series, &[("low".to_owned(), bad)]).unwrap_err();
        assert_eq!((e[0].row, e[0].field.as_str()), (2, "traces[0].discharge"));
    }
}

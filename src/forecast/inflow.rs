//! Inflow hydrographs given as CSV text: a header row `time,discharge`,
//! then one row per sample with an RFC 3339 time (with offset) and a
//! discharge in m³/s (RFC 4180 quoting and CRLF line ends accepted).

use chrono::{DateTime, Utc};

/// A bad row, field and reason; rows count from 1 at the header, so the
/// number matches what a spreadsheet or editor shows.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("line {line}, field `{field}`: {message}")]
pub struct CsvRowError {
    pub line: usize,
    pub field: String,
    pub message: String,
}

fn err(line: usize, field: &str, message: impl Into<String>) -> CsvRowError {
    CsvRowError {
        line,
        field: field.to_owned(),
        message: message.into(),
    }
}

/// Parses an inflow hydrograph. Times must carry an offset, increase
/// strictly, and discharges be finite and not negative.
pub fn parse_inflow_csv(text: &str) -> Result<Vec<(DateTime<Utc>, f64)>, CsvRowError> {
    let mut reader = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(text.as_bytes());
    let headers = reader
        .headers()
        .map_err(|e| err(1, "header", e.to_string()))?
        .clone();
    let col = |name: &str| headers.iter().position(|h| h.eq_ignore_ascii_case(name));
    let (Some(ti), Some(qi)) = (col("time"), col("discharge")) else {
        return Err(err(
            1,
            "header",
            format!(
                "expected columns `time,discharge`, found `{}`",
                headers.iter().collect::<Vec<_>>().join(",")
            ),
        ));
    };
    let mut out: Vec<(DateTime<Utc>, f64)> = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|e| {
            let line = e.position().map_or(0, |p| p.line() as usize);
            err(line, "row", e.to_string())
        })?;
        let line = record.position().map_or(0, |p| p.line() as usize);
        let time_text = record.get(ti).unwrap_or("");
        let time = DateTime::parse_from_rfc3339(time_text)
            .map_err(|e| {
                err(
                    line,
                    "time",
                    format!("`{time_text}` is not an RFC 3339 time with offset ({e})"),
                )
            })?
            .with_timezone(&Utc);
        let q_text = record.get(qi).unwrap_or("");
        let q: f64 = q_text
            .parse()
            .map_err(|_| err(line, "discharge", format!("`{q_text}` is not a number")))?;
        if !q.is_finite() {
            return Err(err(line, "discharge", "must be finite"));
        }
        if q < 0.0 {
            return Err(err(
                line,
                "discharge",
                format!("must not be negative, got {q}"),
            ));
        }
        if let Some((prev, _)) = out.last()
            && time <= *prev
        {
            return Err(err(
                line,
                "time",
                format!("times must increase strictly: {time} does not follow {prev}"),
            ));
        }
        out.push((time, q));
    }
    if out.len() < 2 {
        return Err(err(1, "rows", "at least two samples are needed"));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_offsets_quotes_and_crlf() {
        let text =
            "time,discharge\r\n\"2026-03-01T00:00:00+01:00\",12.5\r\n2026-02-29T23:30:00Z,20\r\n";
        // 2026 is not a leap year: Feb 29 does not exist (RFC 3339 §5.7).
        assert_eq!(parse_inflow_csv(text).unwrap_err().field, "time");
        let text =
            "time,discharge\r\n\"2026-03-01T00:00:00+01:00\",12.5\r\n2026-02-28T23:30:00Z,20\r\n";
        let rows = parse_inflow_csv(text).expect("valid");
        assert_eq!(rows.len(), 2);
        assert_eq!(rows[0].0.to_rfc3339(), "2026-02-28T23:00:00+00:00");
        assert_eq!(rows[1].1, 20.0);
    }

    #[test]
    fn bad_rows_name_line_and_field() {
        let e = parse_inflow_csv("time,discharge\n2026-03-01T00:00:00,5\n").unwrap_err();
        assert_eq!((e.line, e.field.as_str()), (2, "time"));
        let e =
            parse_inflow_csv("time,discharge\n2026-03-01T00:00:00Z,5\n2026-03-01T01:00:00Z,-1\n")
                .unwrap_err();
        assert_eq!((e.line, e.field.as_str()), (3, "discharge"));
        let e = parse_inflow_csv("time,discharge\n2026-03-01T00:00:00Z,NaN\n").unwrap_err();
        assert_eq!(e.field, "discharge");
        let e = parse_inflow_csv("when,flow\n").unwrap_err();
        assert_eq!(e.field, "header");
        let e =
            parse_inflow_csv("time,discharge\n2026-03-01T01:00:00Z,5\n2026-03-01T00:00:00Z,5\n")
                .unwrap_err();
        assert_eq!((e.line, e.field.as_str()), (3, "time"));
    }
}

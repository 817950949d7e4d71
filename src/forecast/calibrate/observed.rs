//! Observed stage as a calibration reads it from a file: CSV with a
//! header naming `time` and `stage` columns (RFC 3339 times with offset,
//! stage in m), `#` comment lines allowed. Rows may come in any order;
//! they are sorted, and every bad row is reported.

use chrono::{DateTime, Utc};

use crate::row_error::RowError;

/// Why an observed-stage file could not be read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ObservedError {
    #[error("{0}")]
    Malformed(String),
    #[error("{} bad row(s); first: {}", .0.len(), .0.first().map(ToString::to_string).unwrap_or_default())]
    Rows(Vec<RowError>),
}

/// Parses the CSV into `(time, stage)` samples, oldest first.
pub fn parse_csv(body: &[u8]) -> Result<Vec<(DateTime<Utc>, f64)>, ObservedError> {
    let malformed = |e: csv::Error| ObservedError::Malformed(format!("not valid CSV: {e}"));
    let mut reader = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(body);
    let headers = reader.headers().map_err(malformed)?.clone();
    let col = |n: &str| headers.iter().position(|h| h.eq_ignore_ascii_case(n));
    let (Some(ti), Some(si)) = (col("time"), col("stage")) else {
        return Err(ObservedError::Malformed(
            "the header must name the columns `time` and `stage`".to_owned(),
        ));
    };
    let (mut good, mut bad) = (Vec::new(), Vec::new());
    for (i, rec) in reader.records().enumerate() {
        let rec = rec.map_err(malformed)?;
        let cell = |c: usize| rec.get(c).unwrap_or("");
        match row(i + 1, cell(ti), cell(si)) {
            Ok(s) => good.push(s),
            Err(e) => bad.push(e),
        }
    }
    if !bad.is_empty() {
        return Err(ObservedError::Rows(bad));
    }
    if good.is_empty() {
        return Err(ObservedError::Malformed("no observations".to_owned()));
    }
    good.sort_by_key(|s| s.0);
    Ok(good)
}

fn row(row: usize, time: &str, stage: &str) -> Result<(DateTime<Utc>, f64), RowError> {
    let t = DateTime::parse_from_rfc3339(time).map_err(|e| {
        RowError::new(
            row,
            "time",
            format!("`{time}` is not an RFC 3339 time with an offset ({e})"),
        )
    })?;
    let z = stage
        .parse::<f64>()
        .ok()
        .filter(|z| z.is_finite())
        .ok_or_else(|| RowError::new(row, "stage", format!("`{stage}` is not a finite number")))?;
    Ok((t.with_timezone(&Utc), z))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// RFC 4180 CSV with a header row; RFC 3339 times (both from memory).
    #[test]
    fn reads_sorts_and_reports_rows() {
        let ok = parse_csv(
            b"time,stage\n2026-03-14T01:00:00Z,12.5\n# gap\n2026-03-14T00:00:00Z,12.25\n",
        )
        .expect("valid");
        assert_eq!(ok.len(), 2);
        assert!(ok[0].0 < ok[1].0 && ok[0].1 == 12.25);
        let Err(ObservedError::Rows(rows)) =
            parse_csv(b"time,stage\nyesterday,1\n2026-03-14T00:00:00Z,NaN\n")
        else {
            panic!("rows expected");
        };
        assert_eq!(rows.len(), 2);
        assert!(parse_csv(b"time,discharge\n2026-03-14T00:00:00Z,3\n").is_err());
    }
}

//! The validated discharge hydrograph: the one rule for an inflow series,
//! wherever it comes from (an upload's JSON or CSV, `INFLOW.csv` for the
//! offline command, the assembly of observations and uploads) and wherever
//! it goes (the store, the run, the engine's [`Series`]).
//!
//! Parse, don't validate: [`Hydrograph::parse`] is the only way to build
//! one, so nothing downstream re-checks it. Its invariants: at least two
//! samples, times strictly increasing, every discharge finite and not
//! negative.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use crate::engine::series::Series;
use crate::row_error::RowError;

/// A discharge hydrograph (m³/s) that keeps the invariants above.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "Vec<Sample>", into = "Vec<Sample>")]
pub struct Hydrograph {
    samples: Vec<(DateTime<Utc>, f64)>,
}

/// The stored and wire form of one sample.
#[derive(Debug, Clone, Copy, Serialize, Deserialize)]
pub struct Sample {
    #[serde(with = "crate::wire_time")]
    pub time: DateTime<Utc>,
    pub discharge: f64,
}

impl TryFrom<Vec<Sample>> for Hydrograph {
    type Error = String;
    fn try_from(v: Vec<Sample>) -> Result<Self, String> {
        let samples = v.into_iter().map(|s| (s.time, s.discharge)).collect();
        Hydrograph::parse(samples).map_err(|errors| {
            errors
                .first()
                .map_or_else(|| "invalid hydrograph".to_owned(), ToString::to_string)
        })
    }
}

impl From<Hydrograph> for Vec<Sample> {
    fn from(h: Hydrograph) -> Self {
        h.samples
            .into_iter()
            .map(|(time, discharge)| Sample { time, discharge })
            .collect()
    }
}

/// The check of one discharge value (finite, not negative), shared with
/// the row parsers so that a single bad value is reported the same way
/// wherever it was typed.
pub fn check_discharge(row: usize, q: f64) -> Result<f64, RowError> {
    if !q.is_finite() {
        return Err(RowError::new(row, "discharge", "must be a finite number"));
    }
    if q < 0.0 {
        return Err(RowError::new(
            row,
            "discharge",
            format!("must not be negative, got {q}"),
        ));
    }
    Ok(q)
}

impl Hydrograph {
    /// Checks every sample and lists every bad one (rows from 1).
    pub fn parse(samples: Vec<(DateTime<Utc>, f64)>) -> Result<Self, Vec<RowError>> {
        let mut errors = Vec::new();
        for (i, &(t, q)) in samples.iter().enumerate() {
            if let Err(e) = check_discharge(i + 1, q) {
                errors.push(e);
            }
            if i > 0 && t <= samples[i - 1].0 {
                errors.push(RowError::new(
                    i + 1,
                    "time",
                    format!(
                        "times must increase strictly: {} does not follow {}",
                        crate::wire_time::format(t),
                        crate::wire_time::format(samples[i - 1].0)
                    ),
                ));
            }
        }
        if samples.len() < 2 && errors.is_empty() {
            errors.push(RowError::new(
                0,
                "series",
                "at least two samples are needed",
            ));
        }
        if errors.is_empty() {
            Ok(Self { samples })
        } else {
            Err(errors)
        }
    }

    /// The samples, oldest first.
    pub fn samples(&self) -> &[(DateTime<Utc>, f64)] {
        &self.samples
    }

    /// First sample time.
    pub fn start(&self) -> DateTime<Utc> {
        self.samples[0].0
    }

    /// Last sample time.
    pub fn end(&self) -> DateTime<Utc> {
        self.samples[self.samples.len() - 1].0
    }

    /// The engine's series, with times in seconds from `t0`. Sub-millisecond
    /// differences are kept, so samples distinct in time stay distinct.
    pub fn to_series(&self, t0: DateTime<Utc>) -> Series {
        let t = self.samples.iter().map(|(t, _)| seconds(*t, t0)).collect();
        let v = self.samples.iter().map(|(_, q)| *q).collect();
        Series::new(t, v).expect("a hydrograph's times increase strictly and its values are finite")
    }
}

/// Read-only access as a slice of samples: the invariants hold for any
/// read, and no `&mut` is ever handed out.
impl std::ops::Deref for Hydrograph {
    type Target = [(DateTime<Utc>, f64)];
    fn deref(&self) -> &Self::Target {
        &self.samples
    }
}

/// Seconds from `t0` to `t`, to the nanosecond where it fits.
pub fn seconds(t: DateTime<Utc>, t0: DateTime<Utc>) -> f64 {
    let d = t - t0;
    d.num_nanoseconds().map_or_else(
        || d.num_milliseconds() as f64 / 1000.0,
        |ns| ns as f64 / 1e9,
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn at(h: i64) -> DateTime<Utc> {
        DateTime::from_timestamp(1_772_323_200 + h * 3600, 0).unwrap()
    }

    #[test]
    fn every_bad_sample_is_listed_with_its_row() {
        let e =
            Hydrograph::parse(vec![(at(0), 1.0), (at(0), -2.0), (at(2), f64::NAN)]).unwrap_err();
        let found: Vec<(usize, &str)> = e.iter().map(|e| (e.row, e.field.as_str())).collect();
        assert_eq!(found, [(2, "discharge"), (2, "time"), (3, "discharge")]);
    }

    #[test]
    fn at_least_two_samples() {
        let e = Hydrograph::parse(vec![(at(0), 1.0)]).unwrap_err();
        assert_eq!((e[0].row, e[0].field.as_str()), (0, "series"));
        assert!(Hydrograph::parse(vec![(at(0), 0.0), (at(1), 0.0)]).is_ok());
    }

    #[test]
    fn stored_form_round_trips_and_is_checked() {
        let h = Hydrograph::parse(vec![(at(0), 1.5), (at(1), 2.25)]).unwrap();
        let json = serde_json::to_string(&h).unwrap();
        assert_eq!(
            json,
            r#"[{"time":"2026-03-01T00:00:00.000Z","discharge":1.5},{"time":"2026-03-01T01:00:00.000Z","discharge":2.25}]"#
        );
        assert_eq!(serde_json::from_str::<Hydrograph>(&json).unwrap(), h);
        let bad = r#"[{"time":"2026-03-01T01:00:00Z","discharge":1},{"time":"2026-03-01T00:00:00Z","discharge":1}]"#;
        assert!(serde_json::from_str::<Hydrograph>(bad).is_err());
    }

    #[test]
    fn engine_series_in_seconds_from_t0() {
        let h = Hydrograph::parse(vec![(at(1), 1.0), (at(3), 3.0)]).unwrap();
        let s = h.to_series(at(0));
        assert_eq!(s.at(3600.0), 1.0);
        assert_eq!(s.at(7200.0), 2.0);
    }
}

//! The extra traces of an inflow upload: a forecaster's own range (named
//! `low` and `high` beside the main series, the most likely one) or the
//! members of an inflow ensemble. Each trace is a discharge at every time
//! of the main series, so one upload is one table in either format: JSON
//! `traces: [{"name", "series": [{"time", "discharge"}]}]`, CSV a
//! `discharge_<name>` column per trace.
//!
//! The ensemble routes the main series and every trace as equally likely
//! scenarios (in place of perturbing the inflow); the deterministic run
//! routes the main series only.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::hydrograph::Hydrograph;
use crate::row_error::RowError;

/// Most traces one upload may carry (beside its main series).
pub const MAX_TRACES: usize = 100;

/// The name the main series goes by among the scenarios; no trace may
/// take it.
pub const MAIN: &str = "main";

/// One extra trace: its name and its hydrograph (on the main series'
/// times).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InflowTrace {
    pub name: String,
    pub series: Hydrograph,
}

/// The traces of one upload, checked against its main series: names
/// unique, valid and not [`MAIN`], at most [`MAX_TRACES`], each on the
/// main series' times.
#[derive(Debug, Clone, PartialEq, Default, Serialize)]
#[serde(transparent)]
pub struct Traces(Vec<InflowTrace>);

impl Traces {
    /// No traces: a single-series upload.
    pub const NONE: Traces = Traces(Vec::new());

    /// The one rule for a set of traces. `field` names how the sender
    /// wrote trace `i` (`traces[i]` in JSON, the column in CSV), so an
    /// error points at what they sent.
    pub fn parse(
        main: &Hydrograph,
        traces: Vec<InflowTrace>,
        field: impl Fn(usize, &str) -> String,
    ) -> Result<Self, RowError> {
        if traces.len() > MAX_TRACES {
            return Err(RowError::new(
                0,
                "traces",
                format!("at most {MAX_TRACES} traces beside the main series"),
            ));
        }
        for (i, t) in traces.iter().enumerate() {
            let at = field(i, &t.name);
            check_name(&t.name).map_err(|m| RowError::new(0, &format!("{at}.name"), m))?;
            if traces[..i].iter().any(|o| o.name == t.name) {
                return Err(RowError::new(
                    0,
                    &format!("{at}.name"),
                    format!("`{}` names two traces", t.name),
                ));
            }
            same_times(main, &t.series).map_err(|(row, m)| RowError::new(row, &at, m))?;
        }
        Ok(Self(traces))
    }

    /// The stored form read back (checked when it was stored).
    pub fn stored(traces: Vec<InflowTrace>) -> Self {
        Self(traces)
    }

    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    pub fn len(&self) -> usize {
        self.0.len()
    }

    pub fn iter(&self) -> std::slice::Iter<'_, InflowTrace> {
        self.0.iter()
    }

    /// The names, in upload order.
    pub fn names(&self) -> Vec<String> {
        self.0.iter().map(|t| t.name.clone()).collect()
    }
}

/// A trace name: 1 to 40 of `a-z`, `0-9`, `_` and `-`, so it can stand in
/// a CSV column name and a URL unquoted.
fn check_name(name: &str) -> Result<(), String> {
    let ok = (1..=40).contains(&name.len())
        && name
            .bytes()
            .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'_' || b == b'-');
    if !ok {
        return Err(format!(
            "`{name}`: a trace name is 1 to 40 of a-z, 0-9, `_` and `-`"
        ));
    }
    if name == MAIN {
        return Err(format!("`{MAIN}` is the main series' own name"));
    }
    Ok(())
}

/// `Err((row, message))` at the first sample whose time differs from the
/// main series' (1-based; 0 when only the lengths differ).
fn same_times(main: &Hydrograph, trace: &Hydrograph) -> Result<(), (usize, String)> {
    let time = |s: &(DateTime<Utc>, f64)| s.0;
    if let Some(i) = main
        .iter()
        .map(time)
        .zip(trace.iter().map(time))
        .position(|(a, b)| a != b)
    {
        return Err((
            i + 1,
            format!(
                "a trace has the main series' times; row {} is at {} there",
                i + 1,
                crate::wire_time::format(main.samples()[i].0)
            ),
        ));
    }
    if main.len() != trace.len() {
        return Err((
            0,
            format!(
                "a trace has the main series' {} samples, not {}",
                main.len(),
                trace.len()
            ),
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn h(values: &[(i64, f64)]) -> Hydrograph {
        let t0 = DateTime::from_timestamp(1_772_323_200, 0).unwrap();
        Hydrograph::parse(
            values
                .iter()
                .map(|&(m, q)| (t0 + chrono::Duration::minutes(m), q))
                .collect(),
        )
        .unwrap()
    }

    fn trace(name: &str, s: Hydrograph) -> InflowTrace {
        InflowTrace {
            name: name.to_owned(),
            series: s,
        }
    }

    fn field(i: usize, _: &str) -> String {
        format!("traces[{i}]")
    }

    #[test]
    fn names_and_times_are_checked() {
        let main = h(&[(0, 10.0), (60, 20.0)]);
        let ok = Traces::parse(
            &main,
            vec![
                trace("low", h(&[(0, 8.0), (60, 15.0)])),
                trace("high", h(&[(0, 12.0), (60, 30.0)])),
            ],
            field,
        )
        .expect("valid");
        assert_eq!(ok.names(), ["low", "high"]);
        let err = |traces| Traces::parse(&main, traces, field).unwrap_err();
        let e = err(vec![trace("Low", main.clone())]);
        assert_eq!((e.row, e.field.as_str()), (0, "traces[0].name"));
        let e = err(vec![trace("main", main.clone())]);
        assert_eq!(e.field, "traces[0].name");
        let e = err(vec![trace("a", main.clone()), trace("a", main.clone())]);
        assert_eq!(e.field, "traces[1].name");
        let e = err(vec![trace("a", h(&[(0, 1.0), (30, 2.0)]))]);
        assert_eq!((e.row, e.field.as_str()), (2, "traces[0]"));
        let e = err(vec![trace("a", h(&[(0, 1.0), (60, 2.0), (90, 2.0)]))]);
        assert_eq!((e.row, e.field.as_str()), (0, "traces[0]"));
        let many = (0..=MAX_TRACES)
            .map(|i| trace(&format!("m{i}"), main.clone()))
            .collect();
        assert_eq!(err(many).field, "traces");
    }
}

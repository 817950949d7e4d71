//! An inflow hydrograph written back as the CSV an upload accepts
//! (`time,discharge`, then a `discharge_<name>` column per trace; see
//! `forecast::inflow::parse_csv`), so a forecaster can download the upload
//! in force, revise it and send it again.
//!
//! Times are the wire form (milliseconds, `Z`), the precision the store
//! keeps. Discharges are Rust's `Display` of `f64`: the shortest decimal
//! that parses back to the same bits, so download and re-upload round-trip
//! exactly.

use crate::forecast::{hydrograph::Hydrograph, traces::Traces};

/// The CSV text of `h` and its traces (on its times), with a header line
/// and `\n` line ends.
pub fn csv_of(h: &Hydrograph, traces: &Traces) -> String {
    let mut out = String::with_capacity(32 * (1 + traces.len()) * (h.len() + 1));
    out.push_str("time,discharge");
    for t in traces.iter() {
        out.push_str(",discharge_");
        out.push_str(&t.name);
    }
    out.push('\n');
    for (i, &(t, q)) in h.samples().iter().enumerate() {
        out.push_str(&crate::wire_time::format(t));
        out.push(',');
        out.push_str(&q.to_string());
        for trace in traces.iter() {
            out.push(',');
            // Same times as the main series (a rule of `Traces`).
            let v = trace.series.samples().get(i).map_or(f64::NAN, |s| s.1);
            out.push_str(&v.to_string());
        }
        out.push('\n');
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::{inflow::parse_csv, traces::InflowTrace};

    #[test]
    fn awkward_values_round_trip_bit_for_bit() {
        let t0 = chrono::DateTime::from_timestamp_millis(1_772_323_200_123).unwrap();
        let values = [0.1 + 0.2, 1e-300, 123_456_789.012_345_67, 1.0 / 3.0, 0.0];
        let samples = values
            .iter()
            .enumerate()
            .map(|(i, &q)| (t0 + chrono::Duration::minutes(i as i64 * 15), q))
            .collect();
        let h = Hydrograph::parse(samples).unwrap();
        let low: Vec<_> = h.iter().map(|s| (s.0, s.1 * 0.7)).collect();
        let traces = Traces::parse(
            &h,
            vec![InflowTrace {
                name: "low".to_owned(),
                series: Hydrograph::parse(low).unwrap(),
            }],
            |_, n| n.to_owned(),
        )
        .unwrap();
        let back = parse_csv(csv_of(&h, &traces).as_bytes()).unwrap();
        let bits = |h: &Hydrograph| h.iter().map(|s| (s.0, s.1.to_bits())).collect::<Vec<_>>();
        assert_eq!(bits(&back.series), bits(&h));
        let (a, b) = (
            back.traces.iter().next().unwrap(),
            traces.iter().next().unwrap(),
        );
        assert_eq!((&a.name, bits(&a.series)), (&b.name, bits(&b.series)));
    }
}

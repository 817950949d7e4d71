//! An inflow hydrograph written back as the CSV an upload accepts
//! (`time,discharge`, see `forecast::inflow::parse_csv`), so a forecaster
//! can download the upload in force, revise it and send it again.
//!
//! Times are the wire form (milliseconds, `Z`), the precision the store
//! keeps. Discharges are Rust's `Display` of `f64`: the shortest decimal
//! that parses back to the same bits, so download and re-upload round-trip
//! exactly.

use crate::forecast::hydrograph::Hydrograph;

/// The CSV text of `h`, with a header line and `\n` line ends.
pub fn csv_of(h: &Hydrograph) -> String {
    let mut out = String::with_capacity(32 * (h.len() + 1));
    out.push_str("time,discharge\n");
    for &(t, q) in h.samples() {
        out.push_str(&crate::wire_time::format(t));
        out.push(',');
        out.push_str(&q.to_string());
        out.push('\n');
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::inflow::parse_csv;

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
        let back = parse_csv(csv_of(&h).as_bytes()).unwrap();
        let bits = |h: &Hydrograph| h.iter().map(|s| (s.0, s.1.to_bits())).collect::<Vec<_>>();
        assert_eq!(bits(&back), bits(&h));
    }
}

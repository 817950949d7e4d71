//! Threshold crossings and crests of a stage hydrograph.
//!
//! Pure functions over sampled series: times in seconds from a reference
//! instant, stages in metres. Between samples the stage is taken as linear,
//! which is how the series is drawn and how crossings are interpolated, so a
//! reader checking a chart against the numbers sees the same story.

use serde::Serialize;

/// The highest point of a hydrograph.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Crest {
    /// Time of the crest (s from the reference instant).
    pub time: f64,
    /// Crest stage (m).
    pub stage: f64,
}

/// How a stage series relates to one threshold elevation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Exceedance {
    /// The threshold elevation (m).
    pub elevation: f64,
    /// The series is above the threshold at some sample or between samples.
    pub exceeded: bool,
    /// Already above at the first sample.
    pub above_at_start: bool,
    /// First upward crossing (s), or the start time when already above.
    pub first_above: Option<f64>,
    /// End of the first period above (s); `None` if still above at the end.
    pub back_below: Option<f64>,
    /// Total time above the threshold over the whole series (s), summed over
    /// every period above.
    pub duration_above: f64,
    /// Highest stage minus the threshold (m): positive when exceeded.
    pub margin: f64,
}

/// The highest sample; the earliest one wins a tie. `None` for an empty or
/// non-finite series.
pub fn crest(times: &[f64], stages: &[f64]) -> Option<Crest> {
    let mut best: Option<Crest> = None;
    for (&t, &z) in times.iter().zip(stages) {
        if !t.is_finite() || !z.is_finite() {
            return None;
        }
        if best.is_none_or(|b| z > b.stage) {
            best = Some(Crest { time: t, stage: z });
        }
    }
    best
}

/// Crossings of `threshold` by the piecewise-linear series (`times`
/// increasing). A stage exactly at the threshold counts as not above, so a
/// series that only touches it is reported as not exceeded.
pub fn exceedance(times: &[f64], stages: &[f64], threshold: f64) -> Exceedance {
    let n = times.len().min(stages.len());
    let max = stages[..n]
        .iter()
        .copied()
        .fold(f64::NEG_INFINITY, f64::max);
    let mut out = Exceedance {
        elevation: threshold,
        exceeded: false,
        above_at_start: false,
        first_above: None,
        back_below: None,
        duration_above: 0.0,
        margin: if n > 0 { max - threshold } else { f64::NAN },
    };
    if n == 0 {
        return out;
    }
    let above = |z: f64| z > threshold;
    if above(stages[0]) {
        out.exceeded = true;
        out.above_at_start = true;
        out.first_above = Some(times[0]);
    }
    let mut in_first_period = out.above_at_start;
    for i in 1..n {
        let (t0, t1, z0, z1) = (times[i - 1], times[i], stages[i - 1], stages[i]);
        let dt = t1 - t0;
        match (above(z0), above(z1)) {
            (true, true) => out.duration_above += dt,
            (false, false) => {}
            (false, true) => {
                let tc = t0 + dt * (threshold - z0) / (z1 - z0);
                out.duration_above += t1 - tc;
                if !out.exceeded {
                    out.exceeded = true;
                    out.first_above = Some(tc);
                    in_first_period = true;
                }
            }
            (true, false) => {
                let tc = t0 + dt * (z0 - threshold) / (z0 - z1);
                out.duration_above += tc - t0;
                if in_first_period {
                    out.back_below = Some(tc);
                    in_first_period = false;
                }
            }
        }
    }
    out
}

/// The part of a series from time 0 ("now") on, with a sample
/// interpolated at 0. `secs` are seconds relative to now, increasing. After
/// the last sample the last stage is carried forward; before the first the
/// series is read from its start.
pub fn from_now(secs: &[f64], stage: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let n = secs.len().min(stage.len());
    let (mut ts, mut zs) = (Vec::with_capacity(n + 1), Vec::with_capacity(n + 1));
    if n == 0 {
        return (ts, zs);
    }
    if secs[0] >= 0.0 {
        ts.extend_from_slice(&secs[..n]);
        zs.extend_from_slice(&stage[..n]);
    } else if let Some(i) = secs[..n].iter().position(|&s| s > 0.0) {
        let (s0, s1, z0, z1) = (secs[i - 1], secs[i], stage[i - 1], stage[i]);
        ts.push(0.0);
        zs.push(z0 + (z1 - z0) * (0.0 - s0) / (s1 - s0));
        ts.extend_from_slice(&secs[i..n]);
        zs.extend_from_slice(&stage[i..n]);
    } else {
        ts.push(0.0);
        zs.push(stage[n - 1]);
    }
    (ts, zs)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A symmetric triangle from 0 to 4 m and back over 0..200 s, sampled
    /// every 10 s: it is above 3 m for t in (150/2, 250/2) = (75, 125) s by
    /// similar triangles (stage = 4·t/100 rising, 4·(200−t)/100 falling).
    fn triangle() -> (Vec<f64>, Vec<f64>) {
        let t: Vec<f64> = (0..=20).map(|i| f64::from(i) * 10.0).collect();
        let z = t
            .iter()
            .map(|&t| {
                if t <= 100.0 {
                    0.04 * t
                } else {
                    0.04 * (200.0 - t)
                }
            })
            .collect();
        (t, z)
    }

    #[test]
    fn triangle_crossings_match_geometry() {
        let (t, z) = triangle();
        let e = exceedance(&t, &z, 3.0);
        assert!(e.exceeded && !e.above_at_start);
        assert!((e.first_above.expect("crosses") - 75.0).abs() < 1e-9);
        assert!((e.back_below.expect("falls") - 125.0).abs() < 1e-9);
        assert!((e.duration_above - 50.0).abs() < 1e-9);
        assert!((e.margin - 1.0).abs() < 1e-12);
        let c = crest(&t, &z).expect("crest");
        assert_eq!((c.time, c.stage), (100.0, 4.0));
    }

    #[test]
    fn not_exceeded_and_touching() {
        let (t, z) = triangle();
        let e = exceedance(&t, &z, 5.0);
        assert!(!e.exceeded);
        assert_eq!(e.first_above, None);
        assert_eq!(e.duration_above, 0.0);
        assert!((e.margin + 1.0).abs() < 1e-12);
        // The crest touches 4 m exactly: not above.
        let e = exceedance(&t, &z, 4.0);
        assert!(!e.exceeded);
    }

    #[test]
    fn above_at_start_and_still_above_at_end() {
        let t = [0.0, 10.0, 20.0];
        let z = [5.0, 6.0, 7.0];
        let e = exceedance(&t, &z, 1.0);
        assert!(e.above_at_start);
        assert_eq!(e.first_above, Some(0.0));
        assert_eq!(e.back_below, None);
        assert_eq!(e.duration_above, 20.0);
    }

    #[test]
    fn two_periods_sum_durations_and_report_the_first() {
        let t = [0.0, 10.0, 20.0, 30.0, 40.0];
        let z = [0.0, 2.0, 0.0, 2.0, 0.0];
        let e = exceedance(&t, &z, 1.0);
        assert_eq!(e.first_above, Some(5.0));
        assert_eq!(e.back_below, Some(15.0));
        assert!((e.duration_above - 20.0).abs() < 1e-12);
    }

    #[test]
    fn from_now_interpolates_the_present() {
        let (t, z) = from_now(&[-20.0, -10.0, 10.0, 20.0], &[0.0, 1.0, 3.0, 4.0]);
        assert_eq!(t, vec![0.0, 10.0, 20.0]);
        assert_eq!(z, vec![2.0, 3.0, 4.0]);
        let (t, z) = from_now(&[-20.0, -10.0], &[0.0, 1.0]);
        assert_eq!((t, z), (vec![0.0], vec![1.0]));
        let (t, _) = from_now(&[5.0, 6.0], &[0.0, 1.0]);
        assert_eq!(t, vec![5.0, 6.0]);
    }

    #[test]
    fn empty_and_non_finite_series() {
        assert_eq!(crest(&[], &[]), None);
        assert_eq!(crest(&[0.0, 1.0], &[1.0, f64::NAN]), None);
        let e = exceedance(&[], &[], 1.0);
        assert!(!e.exceeded && e.margin.is_nan());
    }
}

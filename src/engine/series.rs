//! Time series: inflow hydrographs, lateral inflows and stage boundaries.
//!
//! A [`Series`] is a piecewise-linear function of time given at strictly
//! increasing sample times. The solvers evaluate it many thousands of times
//! at increasing times, so besides the random-access [`Series::at`] there is
//! a [`Cursor`] that remembers where the previous lookup landed and makes a
//! forward lookup O(1) amortised.
//!
//! Outside the sampled range the end values are held: a forecast inflow that
//! ends before the end of a run is taken to stay at its last value, which is
//! the least surprising choice for a caller that asks for a slightly longer
//! horizon than the forecast covers.

use serde::{Deserialize, Serialize};
use thiserror::Error;

/// Why a time series was rejected.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum SeriesError {
    /// No samples at all: a series must have at least one point.
    #[error("time series is empty")]
    Empty,
    /// `t` and `v` differ in length.
    #[error("time series has {times} times but {values} values")]
    LengthMismatch {
        /// Number of sample times.
        times: usize,
        /// Number of values.
        values: usize,
    },
    /// A time or a value is NaN or infinite.
    #[error("time series sample {index} is not finite (t = {t}, v = {v})")]
    NonFinite {
        /// Index of the offending sample.
        index: usize,
        /// Its time.
        t: f64,
        /// Its value.
        v: f64,
    },
    /// Times are not strictly increasing.
    #[error("time series times must increase strictly: t[{index}] = {t} follows {previous}")]
    NotIncreasing {
        /// Index of the sample whose time does not exceed its predecessor's.
        index: usize,
        /// Its time.
        t: f64,
        /// The preceding time.
        previous: f64,
    },
}

/// Raw form used by serde; validated through [`Series::new`].
#[derive(Deserialize)]
struct SeriesRaw {
    t: Vec<f64>,
    v: Vec<f64>,
}

impl TryFrom<SeriesRaw> for Series {
    type Error = SeriesError;
    fn try_from(raw: SeriesRaw) -> Result<Self, Self::Error> {
        Series::new(raw.t, raw.v)
    }
}

/// A validated piecewise-linear time series (times in seconds from a
/// caller-chosen reference instant).
///
/// Invariants (checked by [`Series::new`], so every method can rely on them):
/// at least one sample, `t` and `v` of equal length, all finite, `t` strictly
/// increasing.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "SeriesRaw")]
pub struct Series {
    t: Vec<f64>,
    v: Vec<f64>,
}

impl Series {
    /// Build a series, checking the invariants listed on the type.
    pub fn new(t: Vec<f64>, v: Vec<f64>) -> Result<Self, SeriesError> {
        if t.len() != v.len() {
            return Err(SeriesError::LengthMismatch {
                times: t.len(),
                values: v.len(),
            });
        }
        if t.is_empty() {
            return Err(SeriesError::Empty);
        }
        for (index, (&ti, &vi)) in t.iter().zip(v.iter()).enumerate() {
            if !ti.is_finite() || !vi.is_finite() {
                return Err(SeriesError::NonFinite {
                    index,
                    t: ti,
                    v: vi,
                });
            }
            if index > 0 && ti <= t[index - 1] {
                return Err(SeriesError::NotIncreasing {
                    index,
                    t: ti,
                    previous: t[index - 1],
                });
            }
        }
        Ok(Self { t, v })
    }

    /// A series that has the same value at all times.
    pub fn constant(value: f64) -> Result<Self, SeriesError> {
        Self::new(vec![0.0], vec![value])
    }

    /// Sample times (s).
    pub fn times(&self) -> &[f64] {
        &self.t
    }

    /// Sample values.
    pub fn values(&self) -> &[f64] {
        &self.v
    }

    /// Number of samples (at least one).
    pub fn len(&self) -> usize {
        self.t.len()
    }

    /// Always false: a valid series has at least one sample. Provided so the
    /// type reads like a collection.
    pub fn is_empty(&self) -> bool {
        self.t.is_empty()
    }

    /// First sample time.
    pub fn start(&self) -> f64 {
        self.t[0]
    }

    /// Last sample time.
    pub fn end(&self) -> f64 {
        self.t[self.t.len() - 1]
    }

    /// Smallest sample value.
    pub fn min_value(&self) -> f64 {
        self.v.iter().copied().fold(f64::INFINITY, f64::min)
    }

    /// Largest sample value and the time of its first occurrence.
    pub fn peak(&self) -> (f64, f64) {
        let mut best = (self.t[0], self.v[0]);
        for (&ti, &vi) in self.t.iter().zip(self.v.iter()) {
            if vi > best.1 {
                best = (ti, vi);
            }
        }
        best
    }

    /// Value at time `t` by linear interpolation, holding the end values
    /// outside the sampled range. O(log n).
    pub fn at(&self, t: f64) -> f64 {
        let n = self.t.len();
        if t <= self.t[0] || n == 1 {
            return self.v[0];
        }
        if t >= self.t[n - 1] {
            return self.v[n - 1];
        }
        // First index with time > t; in 1..n because of the checks above.
        let hi = self.t.partition_point(|&ti| ti <= t);
        self.interpolate(hi - 1, t)
    }

    /// A cursor for many lookups at (mostly) increasing times.
    pub fn cursor(&self) -> Cursor<'_> {
        Cursor {
            series: self,
            index: 0,
        }
    }

    /// Interpolate on segment `[i, i+1]`; `i + 1 < len` is the caller's duty.
    fn interpolate(&self, i: usize, t: f64) -> f64 {
        let (t0, t1) = (self.t[i], self.t[i + 1]);
        let (v0, v1) = (self.v[i], self.v[i + 1]);
        let w = (t - t0) / (t1 - t0);
        v0 + w * (v1 - v0)
    }
}

/// Remembers the segment of the previous lookup so that a sequence of
/// increasing times costs O(1) each (amortised) instead of a binary search.
/// Going backwards (a rejected and retried time step) is allowed and simply
/// walks back.
#[derive(Debug, Clone)]
pub struct Cursor<'a> {
    series: &'a Series,
    /// Index of the left end of the current segment.
    index: usize,
}

impl Cursor<'_> {
    /// Value at time `t`; identical to [`Series::at`].
    pub fn at(&mut self, t: f64) -> f64 {
        let s = self.series;
        let n = s.t.len();
        if t <= s.t[0] || n == 1 {
            self.index = 0;
            return s.v[0];
        }
        if t >= s.t[n - 1] {
            self.index = n - 1;
            return s.v[n - 1];
        }
        // Now t0 < t < t_{n-1}: walk to the segment with t_i <= t < t_{i+1}.
        let mut i = self.index.min(n - 2);
        while i > 0 && s.t[i] > t {
            i -= 1;
        }
        while s.t[i + 1] <= t {
            i += 1;
        }
        self.index = i;
        s.interpolate(i, t)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tri() -> Series {
        Series::new(vec![0.0, 10.0, 30.0], vec![1.0, 3.0, 0.0]).expect("valid")
    }

    #[test]
    fn interpolates_linearly_and_holds_ends() {
        let s = tri();
        assert_eq!(s.at(-5.0), 1.0);
        assert_eq!(s.at(0.0), 1.0);
        assert!((s.at(5.0) - 2.0).abs() < 1e-12);
        assert_eq!(s.at(10.0), 3.0);
        assert!((s.at(20.0) - 1.5).abs() < 1e-12);
        assert_eq!(s.at(30.0), 0.0);
        assert_eq!(s.at(1e9), 0.0);
    }

    #[test]
    fn single_point_is_constant() {
        let s = Series::constant(4.5).expect("valid");
        assert_eq!(s.at(-1e6), 4.5);
        assert_eq!(s.at(1e6), 4.5);
        assert_eq!(s.cursor().at(3.0), 4.5);
    }

    #[test]
    fn cursor_matches_random_access_forward_and_backward() {
        let t: Vec<f64> = (0..50).map(|i| (i * i) as f64).collect();
        let v: Vec<f64> = (0..50).map(|i| ((i as f64) * 0.7).sin()).collect();
        let s = Series::new(t, v).expect("valid");
        let mut c = s.cursor();
        let mut probe = -3.0;
        while probe < 2500.0 {
            assert_eq!(c.at(probe), s.at(probe), "forward at {probe}");
            probe += 7.3;
        }
        while probe > -10.0 {
            assert_eq!(c.at(probe), s.at(probe), "backward at {probe}");
            probe -= 11.1;
        }
    }

    #[test]
    fn peak_and_min() {
        let s = tri();
        assert_eq!(s.peak(), (10.0, 3.0));
        assert_eq!(s.min_value(), 0.0);
        assert_eq!((s.start(), s.end(), s.len()), (0.0, 30.0, 3));
    }

    #[test]
    fn rejects_bad_input() {
        assert_eq!(Series::new(vec![], vec![]), Err(SeriesError::Empty));
        assert!(matches!(
            Series::new(vec![0.0, 1.0], vec![1.0]),
            Err(SeriesError::LengthMismatch {
                times: 2,
                values: 1
            })
        ));
        assert!(matches!(
            Series::new(vec![0.0, 1.0], vec![1.0, f64::NAN]),
            Err(SeriesError::NonFinite { index: 1, .. })
        ));
        assert!(matches!(
            Series::new(vec![0.0, f64::INFINITY], vec![1.0, 1.0]),
            Err(SeriesError::NonFinite { index: 1, .. })
        ));
        assert!(matches!(
            Series::new(vec![0.0, 2.0, 2.0], vec![1.0, 1.0, 1.0]),
            Err(SeriesError::NotIncreasing { index: 2, .. })
        ));
    }
}

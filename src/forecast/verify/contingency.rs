//! Whether a level was forecast to be reached and whether it was: the
//! two-by-two contingency table over events, and its scores (Wilks,
//! Statistical Methods in the Atmospheric Sciences, chapter on forecast
//! verification; from memory).

/// Counts of forecast/observed outcomes.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Contingency {
    /// Forecast to reach it, and it did.
    pub hits: u64,
    /// Forecast to reach it, and it did not.
    pub false_alarms: u64,
    /// Not forecast, but it did.
    pub misses: u64,
    /// Not forecast, and it did not.
    pub correct_negatives: u64,
}

impl Contingency {
    /// Adds one event.
    pub fn add(&mut self, forecast: bool, observed: bool) {
        match (forecast, observed) {
            (true, true) => self.hits += 1,
            (true, false) => self.false_alarms += 1,
            (false, true) => self.misses += 1,
            (false, false) => self.correct_negatives += 1,
        }
    }

    /// Probability of detection: hits / (hits + misses).
    pub fn pod(&self) -> Option<f64> {
        ratio(self.hits, self.hits + self.misses)
    }

    /// False alarm ratio: false alarms / (hits + false alarms).
    pub fn far(&self) -> Option<f64> {
        ratio(self.false_alarms, self.hits + self.false_alarms)
    }

    /// Critical success index (threat score): hits / (hits + misses +
    /// false alarms).
    pub fn csi(&self) -> Option<f64> {
        ratio(self.hits, self.hits + self.misses + self.false_alarms)
    }

    /// Frequency bias: (hits + false alarms) / (hits + misses); above 1
    /// the level is forecast more often than it happens.
    pub fn frequency_bias(&self) -> Option<f64> {
        ratio(self.hits + self.false_alarms, self.hits + self.misses)
    }
}

fn ratio(a: u64, b: u64) -> Option<f64> {
    (b > 0).then(|| a as f64 / b as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Finley's 1884 tornado forecasts, the classic worked example of a
    /// 2×2 table (28 hits, 72 false alarms, 23 misses, 2,680 correct
    /// negatives; Murphy 1996, "The Finley affair"; counts from memory):
    /// POD = 28/51, FAR = 72/100, CSI = 28/123, bias = 100/51.
    #[test]
    fn finleys_table() {
        let t = Contingency {
            hits: 28,
            false_alarms: 72,
            misses: 23,
            correct_negatives: 2_680,
        };
        assert!((t.pod().unwrap() - 28.0 / 51.0).abs() < 1e-15);
        assert!((t.far().unwrap() - 0.72).abs() < 1e-15);
        assert!((t.csi().unwrap() - 28.0 / 123.0).abs() < 1e-15);
        assert!((t.frequency_bias().unwrap() - 100.0 / 51.0).abs() < 1e-15);
        let mut built = Contingency::default();
        for (f, o, n) in [
            (true, true, 28),
            (true, false, 72),
            (false, true, 23),
            (false, false, 2_680),
        ] {
            (0..n).for_each(|_| built.add(f, o));
        }
        assert_eq!(built, t);
        assert_eq!(Contingency::default().pod(), None);
    }
}

//! One run at one gauged point, once its window has been observed: the
//! crest it forecast against the crest the gauge saw, and for each level
//! whether it was forecast to be reached and whether it was. Each run is
//! one event of the contingency table (a yes/no forecast of the level
//! being exceeded within the run's window; common practice for
//! verifying warnings of a threshold).

use serde::{Deserialize, Serialize};

use super::pairs::Pair;

/// What one run forecast at one point, and what happened.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Event {
    /// Observations paired over the window.
    pub pairs: usize,
    /// Highest forecast and observed stage at the observation times (m).
    pub forecast_max: f64,
    pub observed_max: f64,
    /// The crest errors, when the gauge saw a crest inside the window.
    pub crest: Option<CrestError>,
    pub levels: Vec<LevelEvent>,
}

/// Crest stage and timing errors of one event.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CrestError {
    /// Forecast crest minus observed crest (m).
    pub stage_m: f64,
    /// Forecast crest time minus observed crest time (s): positive means
    /// the forecast crest came late.
    pub timing_s: f64,
    /// Lead time of the observed crest (s).
    pub observed_lead_s: f64,
}

/// Whether one level was forecast to be exceeded, and whether it was.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelEvent {
    pub id: String,
    pub elevation: f64,
    pub forecast: bool,
    pub observed: bool,
}

/// The event of a run's `pairs` (in time order) for the point's levels
/// `(id, elevation)`; `None` without pairs.
///
/// A level counts as exceeded when a stage lies strictly above it, the
/// rule of [`crate::forecast::exceed::exceedance`]. The crest errors are
/// given only when both the observed and the forecast highest stage lie
/// strictly inside the window: a highest stage at its first or last
/// observation is a rise or a fall that goes on beyond the window, not a
/// crest.
pub fn event(pairs: &[Pair], levels: &[(String, f64)]) -> Option<Event> {
    let (o_at, observed_max) = argmax(pairs.iter().map(|p| p.observed))?;
    let (f_at, forecast_max) = argmax(pairs.iter().map(|p| p.forecast))?;
    let inside = |i: usize| i > 0 && i + 1 < pairs.len();
    let crest = (inside(o_at) && inside(f_at)).then(|| CrestError {
        stage_m: forecast_max - observed_max,
        timing_s: pairs[f_at].lead_s - pairs[o_at].lead_s,
        observed_lead_s: pairs[o_at].lead_s,
    });
    let levels = levels
        .iter()
        .map(|(id, z)| LevelEvent {
            id: id.clone(),
            elevation: *z,
            forecast: forecast_max > *z,
            observed: observed_max > *z,
        })
        .collect();
    Some(Event {
        pairs: pairs.len(),
        forecast_max,
        observed_max,
        crest,
        levels,
    })
}

/// Index and value of the first largest value.
fn argmax(values: impl Iterator<Item = f64>) -> Option<(usize, f64)> {
    values.enumerate().fold(None, |best, (i, v)| match best {
        Some((_, b)) if b >= v => best,
        _ => Some((i, v)),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pair(lead_h: f64, forecast: f64, observed: f64) -> Pair {
        Pair {
            lead_s: lead_h * 3600.0,
            forecast,
            observed,
            persistence: 0.0,
        }
    }

    /// A flood seen crest at hour 6 at 12.0 m, forecast at hour 7 at
    /// 12.3 m (errors by hand: +0.3 m, +1 h); the level at 12.1 m was
    /// forecast but not reached (a false alarm), the one at 11 m both.
    #[test]
    fn a_late_high_crest_and_a_false_alarm() {
        let pairs: Vec<Pair> = (1..=12)
            .map(|h| {
                let h = f64::from(h);
                pair(
                    h,
                    12.3 - 0.1 * (h - 7.0).abs(),
                    12.0 - 0.1 * (h - 6.0).abs(),
                )
            })
            .collect();
        let levels = [("minor".to_owned(), 11.0), ("bridge".to_owned(), 12.1)];
        let e = event(&pairs, &levels).unwrap();
        let c = e.crest.unwrap();
        assert!((c.stage_m - 0.3).abs() < 1e-12);
        assert!((c.timing_s - 3600.0).abs() < 1e-9);
        assert!(e.levels[0].forecast && e.levels[0].observed);
        assert!(e.levels[1].forecast && !e.levels[1].observed);
    }

    /// A rise still going at the window's end has no crest; touching a
    /// level is not exceeding it.
    #[test]
    fn a_rise_through_the_window_has_no_crest() {
        let pairs: Vec<Pair> = (1..=5)
            .map(|h| pair(f64::from(h), f64::from(h), f64::from(h)))
            .collect();
        let e = event(&pairs, &[("top".to_owned(), 5.0)]).unwrap();
        assert_eq!(e.crest, None);
        assert!(!e.levels[0].forecast && !e.levels[0].observed);
        assert_eq!(event(&[], &[]), None);
    }
}

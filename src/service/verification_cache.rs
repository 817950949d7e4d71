//! The verification report of a reach, merged from the stored tallies once
//! per verification pass and day rather than on every request: the
//! forecast document carries it, and merging 30 days of hourly tallies
//! (1,440 rows per gauged point) took about 10 ms per point in a release
//! build, measured by hand, about twice the rest of the document.
//!
//! An entry is keyed by what the report depends on: the reach version
//! (its points and gauges), the window in days, the UTC days it spans (the
//! tallies are per issue day) and the reach's pass generation. A pass that
//! stores anything bumps the generation, so a report merged while the pass
//! was writing is never served after it.

use std::{
    collections::HashMap,
    sync::{Arc, Mutex},
};

use chrono::NaiveDate;

use crate::forecast::verify::report::PointVerification;

/// Entries kept at most; a service has a few reaches and windows.
const MAX_ENTRIES: usize = 256;

/// What a report depends on.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub(super) struct Key {
    pub reach_id: String,
    pub version: i64,
    pub days: u64,
    pub from_day: NaiveDate,
    pub to_day: NaiveDate,
    pub generation: u64,
}

#[derive(Default)]
struct State {
    generation: HashMap<String, u64>,
    entries: HashMap<Key, Arc<Vec<PointVerification>>>,
}

#[derive(Default)]
pub(super) struct ReportCache {
    state: Mutex<State>,
}

impl ReportCache {
    fn state(&self) -> std::sync::MutexGuard<'_, State> {
        // A panic elsewhere while holding the lock leaves a map that is
        // still consistent (every change is one insert or remove).
        self.state.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// The pass generation of `reach_id`, read before its tallies are.
    pub fn generation(&self, reach_id: &str) -> u64 {
        self.state().generation.get(reach_id).copied().unwrap_or(0)
    }

    pub fn get(&self, key: &Key) -> Option<Arc<Vec<PointVerification>>> {
        self.state().entries.get(key).cloned()
    }

    /// Keeps `report` unless a pass stored something since `key` was made.
    pub fn put(&self, key: Key, report: Arc<Vec<PointVerification>>) {
        let mut s = self.state();
        if s.generation.get(&key.reach_id).copied().unwrap_or(0) != key.generation {
            return;
        }
        if s.entries.len() >= MAX_ENTRIES {
            s.entries.clear();
        }
        s.entries.insert(key, report);
    }

    /// After a pass of `reach_id` stored tallies or events.
    pub fn invalidate(&self, reach_id: &str) {
        let mut s = self.state();
        *s.generation.entry(reach_id.to_owned()).or_insert(0) += 1;
        s.entries.retain(|k, _| k.reach_id != reach_id);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn key(reach: &str, generation: u64) -> Key {
        let day = NaiveDate::from_ymd_opt(2026, 3, 1).expect("a date");
        Key {
            reach_id: reach.to_owned(),
            version: 1,
            days: 30,
            from_day: day,
            to_day: day,
            generation,
        }
    }

    #[test]
    fn a_pass_hides_what_was_merged_before_it() {
        let c = ReportCache::default();
        let g = c.generation("a");
        c.put(key("a", g), Arc::new(Vec::new()));
        c.put(key("b", 0), Arc::new(Vec::new()));
        assert!(c.get(&key("a", g)).is_some());
        c.invalidate("a");
        assert!(c.get(&key("a", g)).is_none());
        assert!(c.get(&key("b", 0)).is_some(), "other reaches are kept");
        // A report merged while the pass wrote is not kept after it.
        c.put(key("a", g), Arc::new(Vec::new()));
        assert!(c.get(&key("a", g)).is_none());
        let g2 = c.generation("a");
        assert_eq!(g2, g + 1);
        c.put(key("a", g2), Arc::new(Vec::new()));
        assert!(c.get(&key("a", g2)).is_some());
    }
}

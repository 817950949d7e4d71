//! Cache of the most-read answer: a gauge's latest readings (no `from`,
//! `to` or `cursor`), as the exact bytes sent, per limit, order and format.
//!
//! Correctness: every write to a gauge's readings bumps the gauge's
//! generation and drops its entries *after* the write commits. A reader
//! notes the generation before it queries and stores its answer only if the
//! generation is unchanged when it is done, so an answer computed from data
//! older than a committed write is never kept.

use std::{
    collections::HashMap,
    sync::{Mutex, MutexGuard},
};

use axum::body::Bytes;

/// What distinguishes cached answers of one gauge.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct CacheKey {
    pub limit: i64,
    pub newest_first: bool,
    pub csv: bool,
}

/// A cached answer: the body and the next-page cursor.
#[derive(Debug, Clone)]
pub struct Cached {
    pub body: Bytes,
    pub next_cursor: Option<String>,
}

#[derive(Default)]
struct GaugeEntries {
    generation: u64,
    answers: HashMap<CacheKey, Cached>,
}

/// Most answer variants kept per gauge.
const MAX_PER_GAUGE: usize = 16;

#[derive(Default)]
pub struct ReadingsCache {
    gauges: Mutex<HashMap<String, GaugeEntries>>,
}

impl ReadingsCache {
    fn lock(&self) -> MutexGuard<'_, HashMap<String, GaugeEntries>> {
        match self.gauges.lock() {
            Ok(g) => g,
            Err(poisoned) => poisoned.into_inner(),
        }
    }

    /// The cached answer, or the generation to pass to `put` after
    /// computing it.
    pub fn get(&self, gauge: &str, key: CacheKey) -> Result<Cached, u64> {
        let map = self.lock();
        match map.get(gauge) {
            Some(e) => e.answers.get(&key).cloned().ok_or(e.generation),
            None => Err(0),
        }
    }

    /// Keeps an answer computed after `get` returned `generation`, unless a
    /// write has happened since.
    pub fn put(&self, gauge: &str, generation: u64, key: CacheKey, value: Cached) {
        let mut map = self.lock();
        let entries = map.entry(gauge.to_owned()).or_default();
        if entries.generation == generation && entries.answers.len() < MAX_PER_GAUGE {
            entries.answers.insert(key, value);
        }
    }

    /// Call after a write to `gauge`'s readings has committed.
    pub fn invalidate(&self, gauge: &str) {
        let mut map = self.lock();
        let entries = map.entry(gauge.to_owned()).or_default();
        entries.generation += 1;
        entries.answers.clear();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const K: CacheKey = CacheKey {
        limit: 500,
        newest_first: true,
        csv: false,
    };

    fn v(s: &'static str) -> Cached {
        Cached {
            body: Bytes::from_static(s.as_bytes()),
            next_cursor: None,
        }
    }

    #[test]
    fn a_write_during_a_read_discards_the_stale_answer() {
        let c = ReadingsCache::default();
        let g = c.get("a", K).expect_err("empty");
        c.invalidate("a"); // a write commits while the read runs
        c.put("a", g, K, v("old"));
        assert!(c.get("a", K).is_err(), "stale answer must not be kept");
        let g = c.get("a", K).expect_err("empty");
        c.put("a", g, K, v("new"));
        assert_eq!(c.get("a", K).expect("cached").body, "new");
        c.invalidate("a");
        assert!(c.get("a", K).is_err());
        // Other gauges are untouched by a write to "a".
        let g = c.get("b", K).expect_err("empty");
        c.put("b", g, K, v("b"));
        c.invalidate("a");
        assert!(c.get("b", K).is_ok());
    }
}

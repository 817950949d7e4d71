//! What the service counts, for `GET /metrics` in the Prometheus text
//! exposition format (written by the `prometheus-client` crate): readings
//! accepted and rejected, forecast runs by outcome and their duration, CAP
//! messages issued by type, and HTTP requests by route template and status
//! with their latency. Ages and current counts (last good run per reach,
//! newest reading per gauge, active exceedances, database pool) are read
//! when scraped and set just before encoding.

use std::sync::atomic::AtomicU64;

use prometheus_client::{
    encoding::{EncodeLabelSet, text::encode},
    metrics::{
        counter::Counter,
        family::Family,
        gauge::Gauge,
        histogram::{Histogram, exponential_buckets},
    },
    registry::Registry,
};

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct HttpLabels {
    pub method: String,
    /// The route template (`/api/gauges/{gauge}/readings`), never the raw
    /// path, so that the label set stays bounded.
    pub route: String,
    pub status: u16,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct ReadingLabels {
    pub gauge: String,
    /// `accepted`, `duplicate`, `revised`, or `rejected`.
    pub outcome: String,
    /// For a rejection, the field at fault; else empty.
    pub reason: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct RunLabels {
    pub reach: String,
    /// `ok` or `failed`.
    pub outcome: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct CapLabels {
    pub msg_type: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct ReachLabels {
    pub reach: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct OutcomeLabels {
    /// `ok` or `failed`.
    pub outcome: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct PrunedLabels {
    /// `runs_digested`, `readings`, `reading_revisions`, `cap_messages`,
    /// `audit_rows`.
    pub kind: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct GaugeLabels {
    pub gauge: String,
}

type Seconds = Gauge<f64, AtomicU64>;
type Timing = Family<HttpLabels, Histogram, fn() -> Histogram>;

fn latency_buckets() -> Histogram {
    // 1 ms to about 33 s.
    Histogram::new(exponential_buckets(0.001, 2.0, 16))
}

/// Every metric of the service.
pub struct Metrics {
    registry: Registry,
    pub http_requests: Family<HttpLabels, Counter>,
    pub http_seconds: Timing,
    pub readings: Family<ReadingLabels, Counter>,
    pub runs: Family<RunLabels, Counter>,
    pub run_seconds: Histogram,
    pub cap_messages: Family<CapLabels, Counter>,
    pub last_good_run_age: Family<ReachLabels, Seconds>,
    pub newest_reading_age: Family<GaugeLabels, Seconds>,
    pub active_exceedances: Family<ReachLabels, Gauge>,
    pub db_pool_size: Gauge,
    pub db_pool_idle: Gauge,
    pub pruned: Family<PrunedLabels, Counter>,
    pub backups: Family<OutcomeLabels, Counter>,
    pub db_write_wait: Histogram,
}

impl Default for Metrics {
    fn default() -> Self {
        let mut r = Registry::with_prefix("reachcast");
        let http_requests = Family::<HttpLabels, Counter>::default();
        r.register(
            "http_requests",
            "HTTP requests by route template and status",
            http_requests.clone(),
        );
        let http_seconds: Timing = Family::new_with_constructor(latency_buckets);
        r.register(
            "http_request_duration_seconds",
            "HTTP request latency",
            http_seconds.clone(),
        );
        let readings = Family::<ReadingLabels, Counter>::default();
        r.register(
            "readings",
            "Readings received, by outcome (and reason when rejected)",
            readings.clone(),
        );
        let runs = Family::<RunLabels, Counter>::default();
        r.register("forecast_runs", "Forecast runs by outcome", runs.clone());
        // 10 ms to about 80 s.
        let run_seconds = Histogram::new(exponential_buckets(0.01, 2.0, 14));
        r.register(
            "forecast_run_duration_seconds",
            "Wall time of the routing of one run",
            run_seconds.clone(),
        );
        let cap_messages = Family::<CapLabels, Counter>::default();
        r.register(
            "cap_messages",
            "CAP messages issued, by msgType",
            cap_messages.clone(),
        );
        let last_good_run_age = Family::<ReachLabels, Seconds>::default();
        r.register(
            "last_good_run_age_seconds",
            "Age of the latest successful run per reach",
            last_good_run_age.clone(),
        );
        let newest_reading_age = Family::<GaugeLabels, Seconds>::default();
        r.register(
            "newest_reading_age_seconds",
            "Age of the newest usable reading per gauge",
            newest_reading_age.clone(),
        );
        let active_exceedances = Family::<ReachLabels, Gauge>::default();
        r.register(
            "active_exceedances",
            "Levels forecast above now or later, per reach",
            active_exceedances.clone(),
        );
        let db_pool_size = Gauge::default();
        r.register(
            "db_pool_connections",
            "Open database connections",
            db_pool_size.clone(),
        );
        let db_pool_idle = Gauge::default();
        r.register(
            "db_pool_idle_connections",
            "Idle database connections",
            db_pool_idle.clone(),
        );
        let pruned = Family::<PrunedLabels, Counter>::default();
        r.register(
            "pruned_rows",
            "Rows pruned by retention, by kind (runs: results replaced by a digest)",
            pruned.clone(),
        );
        let backups = Family::<OutcomeLabels, Counter>::default();
        r.register(
            "scheduled_backups",
            "Scheduled backups by outcome",
            backups.clone(),
        );
        // 0.1 ms to about 3 s.
        let db_write_wait = Histogram::new(exponential_buckets(0.0001, 2.0, 15));
        r.register(
            "db_write_wait_seconds",
            "Wait of each write transaction for the write lock and a pooled connection",
            db_write_wait.clone(),
        );
        Self {
            registry: r,
            http_requests,
            http_seconds,
            readings,
            runs,
            run_seconds,
            cap_messages,
            last_good_run_age,
            newest_reading_age,
            active_exceedances,
            db_pool_size,
            db_pool_idle,
            pruned,
            backups,
            db_write_wait,
        }
    }
}

impl Metrics {
    /// Counts one finished run.
    pub fn run(&self, reach: &str, ok: bool, wall_s: f64) {
        let outcome = if ok { "ok" } else { "failed" };
        self.runs
            .get_or_create(&RunLabels {
                reach: reach.to_owned(),
                outcome: outcome.to_owned(),
            })
            .inc();
        self.run_seconds.observe(wall_s);
    }

    /// Counts what one pruning pass removed.
    pub fn pruned(&self, p: &crate::store::Pruned) {
        for (kind, n) in [
            ("runs_digested", p.runs_digested),
            ("readings", p.readings),
            ("reading_revisions", p.reading_revisions),
            ("cap_messages", p.cap_messages),
            ("audit_rows", p.audit_rows),
        ] {
            let labels = PrunedLabels {
                kind: kind.to_owned(),
            };
            self.pruned.get_or_create(&labels).inc_by(n);
        }
    }

    /// Counts one scheduled backup.
    pub fn backup(&self, ok: bool) {
        let outcome = if ok { "ok" } else { "failed" };
        self.backups
            .get_or_create(&OutcomeLabels {
                outcome: outcome.to_owned(),
            })
            .inc();
    }

    /// Counts one CAP message of this `msgType`.
    pub fn cap_issued(&self, msg_type: &str) {
        let labels = CapLabels {
            msg_type: msg_type.to_owned(),
        };
        self.cap_messages.get_or_create(&labels).inc();
    }

    /// Counts `n` readings of `gauge` with this outcome.
    pub fn readings(&self, gauge: &str, outcome: &str, reason: &str, n: u64) {
        if n == 0 {
            return;
        }
        let labels = ReadingLabels {
            gauge: gauge.to_owned(),
            outcome: outcome.to_owned(),
            reason: reason.to_owned(),
        };
        self.readings.get_or_create(&labels).inc_by(n);
    }

    /// The text exposition (OpenMetrics text, which Prometheus reads).
    pub fn render(&self) -> String {
        let mut out = String::new();
        // Writing into a String cannot fail.
        let _ = encode(&mut out, &self.registry);
        out
    }
}

//! Typed configuration: built-in defaults, then an optional TOML file, then
//! `REACHCAST_*` environment variables, then command-line flags.
//!
//! Everything is checked once, at start, before a socket is bound or a file
//! is written; an error names the offending key (for example
//! `server.shutdown_grace_secs`) and where the value came from, so an
//! operator can fix it without reading code.
//!
//! Environment variables map to keys by section and name:
//! `REACHCAST_SERVER_BIND` sets `server.bind`, `REACHCAST_STORAGE_DATA_DIR`
//! sets `storage.data_dir`. An unknown `REACHCAST_*` variable is an error
//! rather than silently ignored, because a typo in a deployment file would
//! otherwise leave a default in force unnoticed. A variable's value takes
//! the type of its key (`env_value`), so `REACHCAST_ALERTS_SENDER=2024`
//! is the text "2024".

use std::{
    collections::BTreeMap,
    net::SocketAddr,
    path::{Path, PathBuf},
    time::Duration,
};

use serde::{Deserialize, Serialize};

/// Prefix of the environment variables read as configuration.
pub const ENV_PREFIX: &str = "REACHCAST_";

/// The one `REACHCAST_*` variable that is not a key: the path of the
/// configuration file itself (read by the command line).
pub const ENV_CONFIG_FILE: &str = "REACHCAST_CONFIG";

/// A configuration problem, always naming the key.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    #[error("cannot read configuration file {path}: {source}")]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("configuration file {path} is not valid TOML or has a bad value: {message}")]
    Parse { path: PathBuf, message: String },
    #[error("configuration key `{key}` (from {origin}): {message}")]
    Invalid {
        key: String,
        origin: String,
        message: String,
    },
    #[error("environment variable {var} does not name a configuration key (known keys: {known})")]
    UnknownEnv { var: String, known: String },
}

/// The whole configuration of the service.
#[derive(Debug, Clone, Default, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct Config {
    pub server: ServerConfig,
    pub storage: StorageConfig,
    pub log: LogConfig,
    pub demo: DemoConfig,
    pub auth: AuthConfig,
    pub ingest: IngestConfig,
    pub forecast: ForecastConfig,
    pub alerts: AlertsConfig,
    pub retention: RetentionConfig,
    pub backup: BackupConfig,
    pub verification: VerificationConfig,
}

/// `[backup]`: scheduled online backups with a kept count.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct BackupConfig {
    /// Hours between backups (the first one that long after start); 0:
    /// none (`reachcast backup` still works).
    pub interval_hours: u64,
    /// Folder of the scheduled backups; empty: `backups` under
    /// `storage.data_dir`. Put it on another disk where you can.
    pub dir: PathBuf,
    /// Scheduled backups kept; older ones are deleted after a new one is
    /// written and checked.
    pub keep: u64,
}

impl Default for BackupConfig {
    fn default() -> Self {
        Self {
            interval_hours: 0,
            dir: PathBuf::new(),
            keep: 7,
        }
    }
}

impl Config {
    /// The folder of scheduled backups.
    pub fn backup_dir(&self) -> PathBuf {
        if self.backup.dir.as_os_str().is_empty() {
            self.storage.data_dir.join("backups")
        } else {
            self.backup.dir.clone()
        }
    }
}

/// `[verification]`: how forecasts are scored against what the gauges at
/// points of interest later saw.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct VerificationConfig {
    /// Edges of the lead-time bands scores are reported by, whole hours,
    /// increasing, comma-separated: `0,3,6` gives the bands 0–3 h and
    /// 3–6 h.
    pub bands_hours: String,
    /// Scores cover the runs issued in this many days up to now.
    pub window_days: u64,
    /// A band is shown as verified only with pairs from at least this many
    /// runs …
    pub min_runs: u64,
    /// … and at least this many forecast–observation pairs; otherwise it
    /// says "not yet verified".
    pub min_pairs: u64,
    /// A forecast whose window has ended is closed this long after its end
    /// even when its gauge has not reported up to it.
    pub grace_minutes: u64,
    /// The error correction at a gauged point is fitted on, and judged
    /// over, the runs issued in this many days.
    pub correction_window_days: u64,
    /// The correction is used only while, over that window, its RMSE is
    /// below both the raw model's and persistence's by this fraction.
    pub correction_min_gain: f64,
}

impl Default for VerificationConfig {
    fn default() -> Self {
        Self {
            bands_hours: "0,3,6,12,24,48".to_owned(),
            window_days: 30,
            min_runs: 5,
            min_pairs: 20,
            grace_minutes: 60,
            correction_window_days: 14,
            correction_min_gain: 0.05,
        }
    }
}

impl VerificationConfig {
    /// The band edges (h); `Err` names what is wrong.
    pub fn band_edges(&self) -> Result<Vec<u32>, String> {
        let edges = self
            .bands_hours
            .split(',')
            .map(|e| {
                e.trim()
                    .parse::<u32>()
                    .map_err(|_| format!("`{}` is not a whole number of hours", e.trim()))
            })
            .collect::<Result<Vec<u32>, String>>()?;
        if edges.len() < 2 {
            return Err("needs at least two edges, such as `0,3`".to_owned());
        }
        if !edges.windows(2).all(|w| w[0] < w[1]) {
            return Err("edges must increase".to_owned());
        }
        if edges.last().is_some_and(|&e| e > 720) {
            return Err("the last edge must be at most 720 h".to_owned());
        }
        Ok(edges)
    }

    /// When the error correction is used.
    pub fn correction_rules(&self) -> crate::forecast::verify::correction::Rules {
        crate::forecast::verify::correction::Rules {
            min_runs: self.min_runs,
            min_pairs: self.min_pairs,
            min_gain: self.correction_min_gain,
        }
    }

    /// How much history a band needs.
    pub fn enough(&self) -> crate::forecast::verify::summary::Enough {
        crate::forecast::verify::summary::Enough {
            runs: self.min_runs,
            pairs: self.min_pairs,
        }
    }
}

/// `[retention]`: what is pruned from the database, and how often. Each
/// age is in days; 0 keeps that kind forever.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct RetentionConfig {
    /// Minutes between pruning passes (the first one a minute after start);
    /// 0: never prune in the service (`reachcast prune` still does).
    pub interval_minutes: u64,
    /// A run's full results (hydrographs, profile, ensemble) are replaced
    /// by their digest after this many days; the newest good run of each
    /// reach is always kept whole.
    pub run_results_days: u64,
    /// Readings (and their revisions) older than this are deleted, but
    /// never those a run still kept whole was computed from.
    pub readings_days: u64,
    /// CAP messages of a closed chain are deleted this many days after its
    /// `Cancel` expired; an open chain is never touched.
    pub cap_grace_days: u64,
    /// Audit rows older than this are deleted.
    pub audit_days: u64,
}

impl Default for RetentionConfig {
    fn default() -> Self {
        Self {
            interval_minutes: 360,
            run_results_days: 14,
            readings_days: 0,
            cap_grace_days: 30,
            audit_days: 0,
        }
    }
}

/// `[alerts]`: CAP 1.2 messages issued after forecast runs and their Atom
/// index.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct AlertsConfig {
    /// CAP `sender`: identifies this service to consumers; no spaces,
    /// commas, `<` or `&` (CAP 1.2 §3.2.1).
    pub sender: String,
    /// CAP `status` of every message: `Actual`, `Exercise`, `System`,
    /// `Test` or `Draft`. Unset: `Exercise` while the invented demo is on,
    /// else `Actual` (see [`Config::cap_status`]).
    pub cap_status: Option<crate::forecast::cap::Status>,
    /// Absolute `http(s)://` URL under which the service is reached, used
    /// for CAP `web` and the links of the Atom index. Empty: CAP messages
    /// carry no `web`, and the index links are built from the request's
    /// `Host` header.
    pub base_url: String,
}

impl Default for AlertsConfig {
    fn default() -> Self {
        Self {
            sender: "reachcast@localhost".to_owned(),
            cap_status: None,
            base_url: String::new(),
        }
    }
}

impl AlertsConfig {
    /// `base_url` without a trailing `/`, or `None` when not set.
    pub fn base_url(&self) -> Option<&str> {
        let b = self.base_url.trim_end_matches('/');
        (!b.is_empty()).then_some(b)
    }
}

/// `[forecast]`: the forecast cycle.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct ForecastConfig {
    /// Every reach is forecast at least this often.
    pub interval_minutes: u64,
    /// After new readings or an upload, wait this long for more before
    /// running, so a burst of posts causes one run.
    pub debounce_ms: u64,
    /// How far back observed inflow is used.
    pub lookback_hours: u64,
    /// How far ahead of now the forecast reaches.
    pub horizon_hours: u64,
    /// Gaps in the readings up to this long are interpolated.
    pub max_gap_minutes: u64,
    /// The upstream gauge silent longer than this marks forecasts stale.
    pub stale_after_minutes: u64,
    /// Spacing of extrapolated and interpolated inflow samples.
    pub step_minutes: u64,
    /// Beyond the last reading with no upload: `persistence` (hold the last
    /// discharge) or `recession` (exponential decay to `base_flow_m3s`).
    pub extrapolation: String,
    /// Recession time constant.
    pub recession_hours: f64,
    /// Base flow the recession decays to.
    pub base_flow_m3s: f64,
    /// Folder of reach descriptions loaded at start: every `NAME.json` in
    /// it is the reach `NAME`, stored as a new version when it differs from
    /// the stored one. Empty: none.
    pub reach_dir: PathBuf,
    /// A reach with more computational nodes than this is refused.
    pub max_nodes: u64,
    /// A reach whose run would store more output values (nodes × output
    /// instants over look-back and horizon) is refused.
    pub max_output_values: u64,
    /// A reach whose run needs more time steps at least (look-back and
    /// horizon over the largest step) is refused.
    pub max_steps: u64,
    /// Ensemble members routed per run at most; a reach asking for more
    /// gets this many, and its runs' provenance says so. 0 turns ensembles
    /// off.
    pub max_ensemble_members: usize,
    /// Runs one hindcast request may make at most (API and command line).
    pub max_hindcast_runs: u64,
}

impl ForecastConfig {
    /// The cost budgets of one run.
    pub fn budget(&self) -> crate::forecast::budget::Budget {
        crate::forecast::budget::Budget {
            max_nodes: self.max_nodes,
            max_output_values: self.max_output_values,
            max_steps: self.max_steps,
        }
    }

    /// The window one run routes: look-back plus horizon (s).
    pub fn window_s(&self) -> f64 {
        (self.lookback_hours + self.horizon_hours) as f64 * 3600.0
    }
}

impl Default for ForecastConfig {
    fn default() -> Self {
        Self {
            interval_minutes: 15,
            debounce_ms: 2_000,
            lookback_hours: 24,
            horizon_hours: 48,
            max_gap_minutes: 60,
            stale_after_minutes: 60,
            step_minutes: 15,
            extrapolation: "persistence".to_owned(),
            recession_hours: 24.0,
            base_flow_m3s: 0.0,
            reach_dir: PathBuf::new(),
            max_nodes: 5_000,
            max_output_values: 5_000_000,
            max_steps: 200_000,
            max_ensemble_members: 200,
            max_hindcast_runs: 200,
        }
    }
}

/// `[server]`: the HTTP listener.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct ServerConfig {
    /// Address and port to listen on. Port 0 picks a free port.
    pub bind: String,
    /// How long a shutdown waits for requests in flight before giving up.
    pub shutdown_grace_secs: u64,
    /// Upper bound on the time one request may take.
    pub request_timeout_secs: u64,
    /// Largest request body accepted, in bytes.
    pub body_limit_bytes: usize,
    /// A connection must send its request line and headers within this
    /// long, or it is closed (a client that never finishes its headers is
    /// not held for ever).
    pub header_read_timeout_secs: u64,
    /// Most connections open at once; more are answered 503 and closed.
    pub max_connections: u64,
    /// Largest request line plus headers, in bytes (at least 8192); a
    /// larger head is answered 431 and closed.
    pub max_header_bytes: u64,
}

/// `[storage]`: the embedded SQLite database.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct StorageConfig {
    /// Folder that holds the database file; created if missing.
    pub data_dir: PathBuf,
    /// How long a connection waits for a lock held by another before failing.
    pub busy_timeout_ms: u64,
    /// Size of the connection pool.
    pub max_connections: u32,
    /// `/ready` answers 503 when less than this many MiB are free under
    /// `data_dir` (0: never).
    pub min_free_mib: u64,
    /// Largest size of the database file in MiB (SQLite's
    /// `max_page_count`); a write that would grow it further is refused
    /// like one on a full disk (0: no limit).
    pub max_size_mib: u64,
}

/// `[log]`: what the service writes to standard error.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct LogConfig {
    /// A `tracing` filter such as `info` or `reachcast=debug,tower_http=info`.
    /// `RUST_LOG`, when set, takes precedence.
    pub filter: String,
    /// `text` (one readable line per event) or `json` (one JSON object per
    /// line, for a log collector).
    pub format: String,
}

/// `[demo]`: the invented demonstration reach.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct DemoConfig {
    /// Seed the invented demo reach and replay its synthetic storm.
    pub enabled: bool,
    /// Seconds between replayed demo readings.
    pub replay_secs: u64,
}

/// `[auth]`: API keys and their limits.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct AuthConfig {
    /// Whether `GET` endpoints answer without a key.
    pub public_reads: bool,
    /// Sustained requests per second allowed for one key (token refill rate).
    pub rate_limit_per_sec: f64,
    /// Requests one key may send in a burst (token bucket size).
    pub rate_limit_burst: u32,
    /// Sustained requests per second of API reads without a key, per client
    /// address.
    pub anonymous_rate_limit_per_sec: f64,
    /// Burst of API reads without a key, per client address.
    pub anonymous_rate_limit_burst: u32,
    /// Take the client address from the last `X-Forwarded-For` entry (the
    /// one the proxy in front appended) instead of the connection. Only
    /// behind a proxy that sets it: otherwise clients choose their own
    /// address and escape the limit.
    pub trust_forwarded_for: bool,
}

/// `[ingest]`: checks on incoming readings and paging of answers.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct IngestConfig {
    /// How far ahead of the server clock a reading's time may lie.
    pub max_future_secs: u64,
    /// Most readings accepted in one request.
    pub max_rows_per_request: usize,
    /// Most readings returned in one page of `GET .../readings`.
    pub max_page_size: usize,
    /// Readings dated before 1 January of this year (UTC) are refused as
    /// implausible (a gauge clock reset to year 0 or 1970, say).
    pub earliest_year: u64,
}

impl Default for AuthConfig {
    fn default() -> Self {
        Self {
            public_reads: true,
            rate_limit_per_sec: 50.0,
            rate_limit_burst: 100,
            anonymous_rate_limit_per_sec: 20.0,
            anonymous_rate_limit_burst: 60,
            trust_forwarded_for: false,
        }
    }
}

impl Default for IngestConfig {
    fn default() -> Self {
        Self {
            max_future_secs: 600,
            max_rows_per_request: 50_000,
            max_page_size: 10_000,
            earliest_year: 1900,
        }
    }
}

impl Default for ServerConfig {
    fn default() -> Self {
        Self {
            bind: "127.0.0.1:8080".to_owned(),
            shutdown_grace_secs: 10,
            request_timeout_secs: 30,
            body_limit_bytes: 8 * 1024 * 1024,
            header_read_timeout_secs: 10,
            max_connections: 1_024,
            max_header_bytes: 32 * 1024,
        }
    }
}

impl Default for StorageConfig {
    fn default() -> Self {
        Self {
            data_dir: PathBuf::from("./data"),
            busy_timeout_ms: 5_000,
            max_connections: 8,
            min_free_mib: 100,
            max_size_mib: 0,
        }
    }
}

impl Default for LogConfig {
    fn default() -> Self {
        Self {
            filter: "info".to_owned(),
            format: "text".to_owned(),
        }
    }
}

impl Default for DemoConfig {
    fn default() -> Self {
        Self {
            enabled: true,
            replay_secs: 10,
        }
    }
}

/// Values given on the command line; they override file and environment.
#[derive(Debug, Clone, Default)]
pub struct Overrides {
    pub bind: Option<String>,
    pub data_dir: Option<PathBuf>,
}

/// Every key, as `section.name`, in the order the example file documents them.
pub const KEYS: &[&str] = &[
    "server.bind",
    "server.shutdown_grace_secs",
    "server.request_timeout_secs",
    "server.body_limit_bytes",
    "server.header_read_timeout_secs",
    "server.max_connections",
    "server.max_header_bytes",
    "storage.data_dir",
    "storage.busy_timeout_ms",
    "storage.max_connections",
    "storage.min_free_mib",
    "storage.max_size_mib",
    "log.filter",
    "log.format",
    "demo.enabled",
    "demo.replay_secs",
    "auth.public_reads",
    "auth.rate_limit_per_sec",
    "auth.rate_limit_burst",
    "auth.anonymous_rate_limit_per_sec",
    "auth.anonymous_rate_limit_burst",
    "auth.trust_forwarded_for",
    "ingest.max_future_secs",
    "ingest.max_rows_per_request",
    "ingest.max_page_size",
    "ingest.earliest_year",
    "forecast.interval_minutes",
    "forecast.debounce_ms",
    "forecast.lookback_hours",
    "forecast.horizon_hours",
    "forecast.max_gap_minutes",
    "forecast.stale_after_minutes",
    "forecast.step_minutes",
    "forecast.extrapolation",
    "forecast.recession_hours",
    "forecast.base_flow_m3s",
    "forecast.reach_dir",
    "forecast.max_nodes",
    "forecast.max_output_values",
    "forecast.max_steps",
    "forecast.max_ensemble_members",
    "forecast.max_hindcast_runs",
    "alerts.sender",
    "alerts.cap_status",
    "alerts.base_url",
    "retention.interval_minutes",
    "retention.run_results_days",
    "retention.readings_days",
    "retention.cap_grace_days",
    "retention.audit_days",
    "backup.interval_hours",
    "backup.dir",
    "backup.keep",
    "verification.bands_hours",
    "verification.window_days",
    "verification.min_runs",
    "verification.min_pairs",
    "verification.grace_minutes",
    "verification.correction_window_days",
    "verification.correction_min_gain",
];

impl Config {
    /// Loads defaults, the optional file, the environment and the overrides,
    /// then validates the result.
    pub fn load(
        file: Option<&Path>,
        env: impl IntoIterator<Item = (String, String)>,
        overrides: &Overrides,
    ) -> Result<Self, ConfigError> {
        let mut table = match file {
            Some(path) => read_file(path)?,
            None => toml::Table::new(),
        };
        let file_origin = file.map_or_else(
            || "defaults".to_owned(),
            |p| format!("file {}", p.display()),
        );
        // Where each key not from the file got its value; a later source
        // replaces an earlier one, as the value itself does.
        let mut origins: BTreeMap<&str, String> = BTreeMap::new();

        let mut env: Vec<(String, String)> = env
            .into_iter()
            .filter(|(k, _)| k.starts_with(ENV_PREFIX) && k != ENV_CONFIG_FILE)
            .collect();
        env.sort();
        let defaults = toml::Table::try_from(Config::default())
            .expect("the defaults are plain tables of scalars");
        for (var, raw) in env {
            let key = env_key(&var).ok_or_else(|| ConfigError::UnknownEnv {
                var: var.clone(),
                known: KEYS
                    .iter()
                    .map(|k| env_name(k))
                    .collect::<Vec<_>>()
                    .join(", "),
            })?;
            let origin = format!("environment variable {var}");
            let value = env_value(lookup(&defaults, key), &raw).map_err(|message| {
                ConfigError::Invalid {
                    key: key.to_owned(),
                    origin: origin.clone(),
                    message,
                }
            })?;
            set_key(&mut table, key, value);
            origins.insert(key, origin);
        }
        if let Some(bind) = &overrides.bind {
            set_key(&mut table, "server.bind", bind.clone().into());
            origins.insert("server.bind", "--bind".to_owned());
        }
        if let Some(dir) = &overrides.data_dir {
            set_key(
                &mut table,
                "storage.data_dir",
                dir.display().to_string().into(),
            );
            origins.insert("storage.data_dir", "--data-dir".to_owned());
        }

        let origin = |key: &str| {
            origins
                .get(key)
                .cloned()
                .unwrap_or_else(|| file_origin.clone())
        };
        // serde_path_to_error reports the path of the value that failed, so
        // the message names `section.key` whatever the TOML library says.
        let config: Config = serde_path_to_error::deserialize(table).map_err(|e| {
            let key = e.path().to_string();
            ConfigError::Invalid {
                origin: origin(&key),
                key,
                message: e.into_inner().message().to_owned(),
            }
        })?;
        config.validate(&|key, message| ConfigError::Invalid {
            key: key.to_owned(),
            origin: origin(key),
            message,
        })?;
        Ok(config)
    }

    /// Checks what the types do not: ranges, closed word lists, formats.
    fn validate(&self, bad: &dyn Fn(&str, String) -> ConfigError) -> Result<(), ConfigError> {
        let (s, st, i, f) = (&self.server, &self.storage, &self.ingest, &self.forecast);
        // Whole-number keys: (key, value, least, most), both ends allowed;
        // `u64::MAX` is no upper bound.
        #[rustfmt::skip]
        let ranges = [
            ("server.shutdown_grace_secs", s.shutdown_grace_secs, 1, 3_600),
            ("server.request_timeout_secs", s.request_timeout_secs, 1, 3_600),
            ("server.body_limit_bytes", s.body_limit_bytes as u64, 1_024, u64::MAX),
            ("server.header_read_timeout_secs", s.header_read_timeout_secs, 1, 3_600),
            ("server.max_connections", s.max_connections, 1, 1_000_000),
            ("server.max_header_bytes", s.max_header_bytes, 8_192, 1_048_576),
            ("storage.busy_timeout_ms", st.busy_timeout_ms, 0, 600_000),
            ("storage.max_connections", st.max_connections.into(), 1, 64),
            ("storage.min_free_mib", st.min_free_mib, 0, u64::MAX),
            ("storage.max_size_mib", st.max_size_mib, 0, 1 << 30),
            ("demo.replay_secs", self.demo.replay_secs, 1, 3_600),
            ("auth.rate_limit_burst", self.auth.rate_limit_burst.into(), 1, u64::MAX),
            ("auth.anonymous_rate_limit_burst", self.auth.anonymous_rate_limit_burst.into(), 1, u64::MAX),
            ("ingest.max_future_secs", i.max_future_secs, 0, 86_400),
            ("ingest.max_rows_per_request", i.max_rows_per_request as u64, 1, u64::MAX),
            ("ingest.max_page_size", i.max_page_size as u64, 1, 1_000_000),
            ("ingest.earliest_year", i.earliest_year, 1, 9_999),
            ("forecast.interval_minutes", f.interval_minutes, 1, 1_440),
            ("forecast.debounce_ms", f.debounce_ms, 0, 600_000),
            ("forecast.lookback_hours", f.lookback_hours, 1, 720),
            ("forecast.horizon_hours", f.horizon_hours, 1, 720),
            ("forecast.max_gap_minutes", f.max_gap_minutes, 0, 10_080),
            ("forecast.stale_after_minutes", f.stale_after_minutes, 1, 10_080),
            ("forecast.step_minutes", f.step_minutes, 1, 1_440),
            ("forecast.max_nodes", f.max_nodes, 2, 1_000_000),
            ("forecast.max_output_values", f.max_output_values, 1, u64::MAX),
            ("forecast.max_steps", f.max_steps, 1, u64::MAX),
            ("forecast.max_hindcast_runs", f.max_hindcast_runs, 1, 100_000),
            ("retention.interval_minutes", self.retention.interval_minutes, 0, 10_080),
            ("retention.run_results_days", self.retention.run_results_days, 0, 36_500),
            ("retention.readings_days", self.retention.readings_days, 0, 36_500),
            ("retention.cap_grace_days", self.retention.cap_grace_days, 0, 36_500),
            ("retention.audit_days", self.retention.audit_days, 0, 36_500),
            ("backup.interval_hours", self.backup.interval_hours, 0, 8_760),
            ("backup.keep", self.backup.keep, 1, 1_000),
            ("verification.window_days", self.verification.window_days, 1, 3_650),
            ("verification.min_runs", self.verification.min_runs, 1, u64::MAX),
            ("verification.min_pairs", self.verification.min_pairs, 1, u64::MAX),
            ("verification.grace_minutes", self.verification.grace_minutes, 0, 10_080),
            ("verification.correction_window_days", self.verification.correction_window_days, 1, 3_650),
        ];
        for (key, v, lo, hi) in ranges {
            if !(lo..=hi).contains(&v) {
                let expected = match (lo, hi) {
                    (_, u64::MAX) => format!("at least {lo}"),
                    (0, _) => format!("at most {hi}"),
                    _ => format!("between {lo} and {hi}"),
                };
                return Err(bad(key, format!("must be {expected}, got {v}")));
            }
        }
        if let Err(m) = self.verification.band_edges() {
            return Err(bad("verification.bands_hours", m));
        }
        let gain = self.verification.correction_min_gain;
        if !(gain.is_finite() && (0.0..1.0).contains(&gain)) {
            let m = format!("must be at least 0 and below 1, got {gain}");
            return Err(bad("verification.correction_min_gain", m));
        }
        for (key, rate) in [
            ("auth.rate_limit_per_sec", self.auth.rate_limit_per_sec),
            (
                "auth.anonymous_rate_limit_per_sec",
                self.auth.anonymous_rate_limit_per_sec,
            ),
        ] {
            if !(rate.is_finite() && rate > 0.0 && rate <= 1_000_000.0) {
                let m = format!("must be a number above 0 and at most 1000000, got {rate}");
                return Err(bad(key, m));
            }
        }
        if !(f.recession_hours.is_finite() && f.recession_hours > 0.0) {
            let m = format!("must be positive, got {}", f.recession_hours);
            return Err(bad("forecast.recession_hours", m));
        }
        if !(f.base_flow_m3s.is_finite() && f.base_flow_m3s >= 0.0) {
            let m = format!("must be zero or positive, got {}", f.base_flow_m3s);
            return Err(bad("forecast.base_flow_m3s", m));
        }
        self.bind_addr()
            .map_err(|m| bad("server.bind", m.to_string()))?;
        if st.data_dir.as_os_str().is_empty() {
            return Err(bad("storage.data_dir", "must not be empty".to_owned()));
        }
        if !matches!(f.extrapolation.as_str(), "persistence" | "recession") {
            return Err(bad(
                "forecast.extrapolation",
                format!(
                    "must be `persistence` or `recession`, got `{}`",
                    f.extrapolation
                ),
            ));
        }
        if !matches!(self.log.format.as_str(), "text" | "json") {
            return Err(bad(
                "log.format",
                format!("must be `text` or `json`, got `{}`", self.log.format),
            ));
        }
        if let Err(e) = tracing_subscriber::EnvFilter::try_new(&self.log.filter) {
            return Err(bad("log.filter", format!("not a valid log filter: {e}")));
        }
        self.validate_alerts(bad)
    }

    fn validate_alerts(
        &self,
        bad: &dyn Fn(&str, String) -> ConfigError,
    ) -> Result<(), ConfigError> {
        let a = &self.alerts;
        if !crate::forecast::cap::is_cap_token(&a.sender) {
            return Err(bad(
                "alerts.sender",
                format!(
                    "`{}`: must be non-empty without spaces, commas, `<` or `&` (CAP 1.2 §3.2.1)",
                    a.sender
                ),
            ));
        }
        if a.base_url().is_none() && !crate::forecast::cap::is_tag_authority(&a.sender) {
            return Err(bad(
                "alerts.sender",
                format!(
                    "`{}`: with alerts.base_url empty, the Atom ids are tag URIs (RFC 4151) \
                     minted under the sender, so it must be a domain name or an email address \
                     you control (or set alerts.base_url)",
                    a.sender
                ),
            ));
        }
        if !a.base_url.is_empty() && !is_base_url(&a.base_url) {
            return Err(bad(
                "alerts.base_url",
                format!(
                    "`{}`: must be empty or an absolute http:// or https:// URL without \
                     spaces, query or fragment",
                    a.base_url
                ),
            ));
        }
        Ok(())
    }

    /// The listen address, parsed.
    pub fn bind_addr(&self) -> Result<SocketAddr, std::net::AddrParseError> {
        self.server.bind.parse()
    }

    /// Bounded drain time on shutdown.
    pub fn shutdown_grace(&self) -> Duration {
        Duration::from_secs(self.server.shutdown_grace_secs)
    }

    /// The CAP `status` of every message: `alerts.cap_status` when it is
    /// set; otherwise `Exercise` while the invented demo is on, because its
    /// messages describe an invented river and no consumer must act on
    /// them (CAP 1.2 §3.2.1: "Exercise - Actionable only by designated
    /// exercise participants", from memory); else `Actual`.
    pub fn cap_status(&self) -> crate::forecast::cap::Status {
        use crate::forecast::cap::Status;
        match self.alerts.cap_status {
            Some(status) => status,
            None if self.demo.enabled => Status::Exercise,
            None => Status::Actual,
        }
    }

    /// Path of the SQLite database file inside the data directory.
    pub fn database_path(&self) -> PathBuf {
        self.storage.data_dir.join("reachcast.sqlite3")
    }
}

fn read_file(path: &Path) -> Result<toml::Table, ConfigError> {
    let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read {
        path: path.to_owned(),
        source,
    })?;
    text.parse()
        .map_err(|e: toml::de::Error| ConfigError::Parse {
            path: path.to_owned(),
            message: e.message().to_owned(),
        })
}

/// An absolute `http`/`https` URL with a host, no whitespace, query or
/// fragment, and none of the characters XML escapes (it is written into
/// CAP and Atom documents as it is).
fn is_base_url(s: &str) -> bool {
    let rest = s
        .strip_prefix("https://")
        .or_else(|| s.strip_prefix("http://"));
    rest.is_some_and(|r| {
        !r.is_empty()
            && !r.starts_with('/')
            && !s.chars().any(|c| {
                c.is_whitespace()
                    || c.is_control()
                    || matches!(c, '?' | '#' | '<' | '>' | '&' | '"' | '\'')
            })
    })
}

/// `server.bind` → `REACHCAST_SERVER_BIND`.
pub fn env_name(key: &str) -> String {
    format!("{ENV_PREFIX}{}", key.replace('.', "_").to_uppercase())
}

fn env_key(var: &str) -> Option<&'static str> {
    KEYS.iter().copied().find(|k| env_name(k) == var)
}

/// The value of `section.name` in `table`, if any.
fn lookup<'t>(table: &'t toml::Table, key: &str) -> Option<&'t toml::Value> {
    let (section, name) = key.split_once('.')?;
    table.get(section)?.get(name)
}

/// An environment value read as the type of the key it sets, which the
/// key's default tells: `REACHCAST_ALERTS_SENDER=2024` is the text "2024",
/// `REACHCAST_DEMO_ENABLED=false` the boolean. Nothing is guessed from how
/// the value looks. A key without a default value (an optional one) is
/// text. `Err` says what the value should have been.
fn env_value(default: Option<&toml::Value>, raw: &str) -> Result<toml::Value, String> {
    let t = raw.trim();
    let (parsed, expected) = match default {
        Some(toml::Value::Integer(_)) => {
            (t.parse().ok().map(toml::Value::Integer), "a whole number")
        }
        Some(toml::Value::Float(_)) => (t.parse().ok().map(toml::Value::Float), "a number"),
        Some(toml::Value::Boolean(_)) => (
            t.parse().ok().map(toml::Value::Boolean),
            "`true` or `false`",
        ),
        _ => return Ok(toml::Value::String(raw.to_owned())),
    };
    parsed.ok_or_else(|| format!("`{raw}` is not {expected}"))
}

fn set_key(table: &mut toml::Table, key: &str, value: toml::Value) {
    let (section, name) = key.split_once('.').unwrap_or(("", key));
    let entry = table
        .entry(section.to_owned())
        .or_insert_with(|| toml::Value::Table(toml::Table::new()));
    if !entry.is_table() {
        *entry = toml::Value::Table(toml::Table::new());
    }
    if let toml::Value::Table(t) = entry {
        t.insert(name.to_owned(), value);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn load_str(text: &str, env: &[(&str, &str)]) -> Result<Config, ConfigError> {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("c.toml");
        std::fs::write(&path, text).expect("write config");
        Config::load(
            Some(&path),
            env.iter().map(|(k, v)| (k.to_string(), v.to_string())),
            &Overrides::default(),
        )
    }

    #[test]
    fn defaults_are_valid() {
        let c = Config::load(None, Vec::new(), &Overrides::default()).expect("defaults");
        assert_eq!(c, Config::default());
        assert_eq!(c.bind_addr().expect("addr").port(), 8080);
    }

    #[test]
    fn file_then_env_then_flags() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("c.toml");
        std::fs::write(
            &path,
            "[server]\nbind = \"127.0.0.1:9000\"\nshutdown_grace_secs = 3\n",
        )
        .expect("write");
        let c = Config::load(
            Some(&path),
            vec![(
                "REACHCAST_SERVER_SHUTDOWN_GRACE_SECS".to_owned(),
                "7".to_owned(),
            )],
            &Overrides {
                bind: Some("127.0.0.1:0".to_owned()),
                data_dir: None,
            },
        )
        .expect("load");
        assert_eq!(c.server.bind, "127.0.0.1:0");
        assert_eq!(c.server.shutdown_grace_secs, 7);
    }

    #[test]
    fn wrong_type_names_the_key() {
        let e = load_str("[server]\nshutdown_grace_secs = \"soon\"\n", &[]).unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains("server.shutdown_grace_secs"), "{msg}");
    }

    #[test]
    fn unknown_key_names_the_key() {
        let e = load_str("[storage]\ndata_dri = \"x\"\n", &[]).unwrap_err();
        assert!(e.to_string().contains("storage.data_dri"), "{e}");
        let e = load_str("[nonsense]\na = 1\n", &[]).unwrap_err();
        assert!(e.to_string().contains("nonsense"), "{e}");
    }

    #[test]
    fn semantic_errors_name_the_key_and_origin() {
        let e = load_str("", &[("REACHCAST_SERVER_BIND", "not-an-address")]).unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains("server.bind"), "{msg}");
        assert!(msg.contains("REACHCAST_SERVER_BIND"), "{msg}");
        let e = load_str("[storage]\nmax_connections = 0\n", &[]).unwrap_err();
        assert!(e.to_string().contains("storage.max_connections"), "{e}");
        let e = load_str("[log]\nfilter = \"=[\"\n", &[]).unwrap_err();
        assert!(e.to_string().contains("log.filter"), "{e}");
    }

    #[test]
    fn auth_and_ingest_keys_are_checked() {
        let e = load_str("[auth]\nrate_limit_per_sec = 0.0\n", &[]).unwrap_err();
        assert!(e.to_string().contains("auth.rate_limit_per_sec"), "{e}");
        let e = load_str("", &[("REACHCAST_AUTH_RATE_LIMIT_BURST", "0")]).unwrap_err();
        assert!(e.to_string().contains("auth.rate_limit_burst"), "{e}");
        let e = load_str("[ingest]\nmax_page_size = 0\n", &[]).unwrap_err();
        assert!(e.to_string().contains("ingest.max_page_size"), "{e}");
        let c = load_str(
            "",
            &[
                ("REACHCAST_AUTH_RATE_LIMIT_PER_SEC", "2.5"),
                ("REACHCAST_AUTH_PUBLIC_READS", "false"),
                ("REACHCAST_INGEST_MAX_FUTURE_SECS", "60"),
            ],
        )
        .expect("load");
        assert_eq!(c.auth.rate_limit_per_sec, 2.5);
        assert!(!c.auth.public_reads);
        assert_eq!(c.ingest.max_future_secs, 60);
    }

    #[test]
    fn unknown_env_var_is_rejected() {
        let e = load_str("", &[("REACHCAST_SERVER_BINDD", "x")]).unwrap_err();
        assert!(e.to_string().contains("REACHCAST_SERVER_BINDD"), "{e}");
    }

    #[test]
    fn env_booleans_parse() {
        let c = load_str("", &[("REACHCAST_DEMO_ENABLED", "false")]).expect("load");
        assert!(!c.demo.enabled);
    }

    /// An environment value is read as the type of the key it sets, never
    /// guessed from how it looks: digits for a text key are text.
    #[test]
    fn env_values_take_the_type_of_their_key() {
        let c = load_str(
            "",
            &[
                ("REACHCAST_ALERTS_SENDER", "2024"),
                ("REACHCAST_FORECAST_REACH_DIR", "true"),
                ("REACHCAST_STORAGE_DATA_DIR", "1.5"),
                ("REACHCAST_AUTH_RATE_LIMIT_PER_SEC", "50"),
                ("REACHCAST_AUTH_RATE_LIMIT_BURST", " 7 "),
            ],
        )
        .expect("load");
        assert_eq!(c.alerts.sender, "2024");
        assert_eq!(c.forecast.reach_dir, PathBuf::from("true"));
        assert_eq!(c.storage.data_dir, PathBuf::from("1.5"));
        assert_eq!(c.auth.rate_limit_per_sec, 50.0);
        assert_eq!(c.auth.rate_limit_burst, 7);
    }

    /// A value that is not of the key's type names the key and the variable.
    #[test]
    fn env_value_of_the_wrong_type_names_key_and_variable() {
        for (var, key, value) in [
            (
                "REACHCAST_SERVER_SHUTDOWN_GRACE_SECS",
                "server.shutdown_grace_secs",
                "abc",
            ),
            (
                "REACHCAST_STORAGE_MAX_CONNECTIONS",
                "storage.max_connections",
                "8.5",
            ),
            (
                "REACHCAST_AUTH_RATE_LIMIT_PER_SEC",
                "auth.rate_limit_per_sec",
                "fast",
            ),
            ("REACHCAST_DEMO_ENABLED", "demo.enabled", "yes"),
        ] {
            let e = load_str("", &[(var, value)]).unwrap_err();
            let msg = e.to_string();
            assert!(msg.contains(key), "{msg}");
            assert!(msg.contains(var), "{msg}");
            assert!(msg.contains(value), "quotes the value: {msg}");
        }
    }

    /// `KEYS` lists every key of the structs (it also names optional keys,
    /// which have no default to serialize).
    #[test]
    fn keys_list_every_field() {
        let defaults = toml::Table::try_from(Config::default()).expect("serialize");
        for (section, fields) in &defaults {
            for name in fields.as_table().expect("section").keys() {
                let key = format!("{section}.{name}");
                assert!(KEYS.contains(&key.as_str()), "{key} missing from KEYS");
            }
        }
    }

    /// The shipped example documents every key with its default value.
    #[test]
    fn example_file_matches_defaults_and_documents_every_key() {
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("deploy/reachcast.example.toml");
        let c =
            Config::load(Some(&path), Vec::new(), &Overrides::default()).expect("example loads");
        assert_eq!(c, Config::default());
        let text = std::fs::read_to_string(&path).expect("read example");
        let unset_by_default = ["alerts.cap_status"];
        for key in KEYS {
            let name = key.split_once('.').map(|(_, n)| n).unwrap_or(key);
            let line = if unset_by_default.contains(key) {
                format!("\n# {name} = ")
            } else {
                format!("\n{name} = ")
            };
            assert!(text.contains(&line), "{key} not in example as `{line}`");
        }
    }

    #[test]
    fn alerts_keys_are_checked() {
        let e = load_str("[alerts]\nsender = \"two words\"\n", &[]).unwrap_err();
        assert!(e.to_string().contains("alerts.sender"), "{e}");
        let e = load_str("[alerts]\nsender = \"a,b\"\n", &[]).unwrap_err();
        assert!(e.to_string().contains("alerts.sender"), "{e}");
        // Not a tag authority (RFC 4151 §2.1): refused unless base_url is set.
        let e = load_str("[alerts]\nsender = \"urn:reachcast\"\n", &[]).unwrap_err();
        assert!(e.to_string().contains("alerts.sender"), "{e}");
        assert!(e.to_string().contains("RFC 4151"), "{e}");
        let with_base = "[alerts]\nsender = \"urn:reachcast\"\nbase_url = \"https://x.example\"\n";
        assert!(load_str(with_base, &[]).is_ok());
        let e = load_str("", &[("REACHCAST_ALERTS_CAP_STATUS", "actual")]).unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains("alerts.cap_status"), "{msg}");
        assert!(msg.contains("REACHCAST_ALERTS_CAP_STATUS"), "{msg}");
        for bad in [
            "ftp://x.example",
            "example.org",
            "https://",
            "https://a b",
            "https://x/?q=1",
        ] {
            let e = load_str(&format!("[alerts]\nbase_url = \"{bad}\"\n"), &[]).unwrap_err();
            assert!(e.to_string().contains("alerts.base_url"), "{bad}: {e}");
        }
        let c = load_str(
            "[alerts]\ncap_status = \"Exercise\"\nbase_url = \"https://cast.fernhollow.example/\"\n",
            &[],
        )
        .expect("load");
        assert_eq!(c.cap_status(), crate::forecast::cap::Status::Exercise);
        assert_eq!(c.alerts.base_url(), Some("https://cast.fernhollow.example"));
        assert_eq!(Config::default().alerts.base_url(), None);
    }

    #[test]
    fn cap_status_is_exercise_during_the_demo_unless_set() {
        use crate::forecast::cap::Status;
        // Unset: the invented demo (on by default) sends `Exercise` (CAP 1.2
        // §3.2.1, from memory: actionable only by exercise participants);
        // without the demo, `Actual`.
        assert!(Config::default().demo.enabled);
        assert_eq!(Config::default().alerts.cap_status, None);
        assert_eq!(Config::default().cap_status(), Status::Exercise);
        let c = load_str("[demo]\nenabled = false\n", &[]).expect("load");
        assert_eq!(c.cap_status(), Status::Actual);
        // Set explicitly, it wins either way.
        let c = load_str("[alerts]\ncap_status = \"Actual\"\n", &[]).expect("load");
        assert!(c.demo.enabled);
        assert_eq!(c.cap_status(), Status::Actual);
        let c = load_str(
            "",
            &[
                ("REACHCAST_DEMO_ENABLED", "false"),
                ("REACHCAST_ALERTS_CAP_STATUS", "Test"),
            ],
        )
        .expect("load");
        assert_eq!(c.cap_status(), Status::Test);
    }

    #[test]
    fn bad_toml_is_reported_with_the_file() {
        let e = load_str("[server\n", &[]).unwrap_err();
        assert!(matches!(e, ConfigError::Parse { .. }), "{e}");
    }
}

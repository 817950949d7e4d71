//! Command-line interface. `serve` is the default subcommand, so
//! `reachcast` alone starts the service with the demo reach.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand};

use crate::auth::Role;

/// reachcast: advisory flood-stage forecasts for the points of interest
/// along a river reach.
///
/// Stores upstream gauge readings in an embedded SQLite database, routes the
/// forecast inflow down the reach with a diffusive-wave model and serves
/// stages, threshold crossings and crests to a dashboard and an API.
/// All output is advisory model output, not an official warning.
#[derive(Debug, Parser)]
#[command(name = "reachcast", version, args_conflicts_with_subcommands = true)]
pub struct Cli {
    /// Configuration file (TOML). Every key can also be set with a
    /// REACHCAST_<SECTION>_<KEY> environment variable; see
    /// deploy/reachcast.example.toml.
    #[arg(
        long,
        short = 'c',
        global = true,
        value_name = "FILE",
        env = "REACHCAST_CONFIG"
    )]
    pub config: Option<PathBuf>,

    #[command(subcommand)]
    pub command: Option<Command>,

    /// Options of `serve`, accepted without the subcommand name too.
    #[command(flatten)]
    pub serve: ServeArgs,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the HTTP service and the dashboard (the default).
    Serve(ServeArgs),
    /// Route an inflow hydrograph through a reach offline and report, per
    /// point of interest, the crest and each threshold's crossing times.
    ///
    /// For what-if runs and checks; uses no database. See the README for
    /// the REACH.json and INFLOW.csv formats.
    Route(RouteArgs),
    /// Fit the reach's Manning's n multipliers (channel, floodplain) to the
    /// observed stage at one point, offline, and report the skill before
    /// and after on a fit window and a held-out window.
    ///
    /// Writes a proposal (the reach description with the multipliers) for a
    /// forecaster to review and apply with PUT; applies nothing itself.
    Calibrate(CalibrateArgs),
    /// Manage API keys in the database of the data directory.
    Keys(KeysArgs),
    /// Write a consistent copy of the database to a new file, while the
    /// service runs and writes (SQLite `VACUUM INTO`), and check it.
    Backup(BackupArgs),
    /// Replace the database with a backup, after checking it. Stop the
    /// service first; the replaced database is kept beside it.
    Restore(RestoreArgs),
    /// Prune the database once under the `[retention]` settings (what the
    /// service does every `retention.interval_minutes`); safe while the
    /// service runs.
    Prune(PruneArgs),
    /// Replay a past period as if live: one run per issue time from what
    /// counted as known then, stored as hindcast runs (never served as the
    /// current forecast, never alerting) and verified; safe while the
    /// service runs.
    Hindcast(HindcastArgs),
    /// Fit a rating (one power segment Q = C (h - e)^b) to gaugings in a
    /// CSV file (`time,stage_m,discharge_m3s,method,quality`, as
    /// `GET /api/gauges/{gauge}/gaugings?format=csv` exports them) and print
    /// it with each gauging's deviation; uses no database.
    FitRating(FitRatingArgs),
}

#[derive(Debug, Args, Clone)]
pub struct FitRatingArgs {
    /// The gaugings (CSV).
    #[arg(long, value_name = "FILE")]
    pub gaugings: PathBuf,
    /// Keep gaugings rated poor (left out by default).
    #[arg(long)]
    pub keep_poor: bool,
    /// Stages (m) where one power segment ends and the next begins,
    /// comma-separated and increasing; each segment above the first is
    /// fitted through the one below at its break [default: one segment].
    #[arg(long, value_name = "STAGES", value_delimiter = ',')]
    pub breaks: Vec<f64>,
    /// Write the fitted curve here as JSON (the `curve` of a rating
    /// version: POST it to /api/gauges/{gauge}/ratings with `valid_from`).
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
}

/// `reachcast fit-rating`: the fit and each gauging's deviation; what to
/// print.
pub fn run_fit_rating(args: &FitRatingArgs) -> anyhow::Result<String> {
    use crate::gauge::ratings::{self, GaugingQuality, GaugingsCsvError};
    use anyhow::Context;
    let path = args.gaugings.display();
    let body = std::fs::read(&args.gaugings).with_context(|| format!("reading {path}"))?;
    let all = ratings::parse_gaugings_csv(&body).map_err(|e| match e {
        GaugingsCsvError::Malformed(m) => anyhow::anyhow!("{path}: {m}"),
        GaugingsCsvError::Row(r) => {
            anyhow::anyhow!("{path}: row {}, {}: {}", r.row, r.field, r.message)
        }
    })?;
    let chosen: Vec<_> = all
        .into_iter()
        .filter(|g| args.keep_poor || g.quality != GaugingQuality::Poor)
        .collect();
    let report = ratings::fit(&chosen, &args.breaks).map_err(|e| anyhow::anyhow!("{path}: {e}"))?;
    let mut out = String::new();
    for (k, f) in report.segments.iter().enumerate() {
        let caution = if f.e_at_search_limit {
            "; the zero-flow stage sits at the search limit: treat e and b with caution"
        } else {
            ""
        };
        let upto = args
            .breaks
            .get(k)
            .map_or(String::new(), |b| format!(" up to {b} m"));
        out.push_str(&format!(
            "Q = {:.6} (h - {:.4})^{:.4}{upto}  from {} gaugings; largest deviation {:.2} %, r² (ln Q) {:.5}{caution}\n",
            f.c,
            f.e,
            f.b,
            f.n_points,
            100.0 * f.max_relative_error,
            f.r_squared,
        ));
    }
    out.push_str(&format!(
        "RMS deviation of all {} gaugings from the curve {:.2} %\n",
        chosen.len(),
        report.rms_deviation_pct
    ));
    for (g, d) in chosen.iter().zip(&report.deviations_pct) {
        out.push_str(&format!(
            "  {}  h {:.3} m  Q {:.3} m³/s  {:+.2} %\n",
            crate::wire_time::format(g.time),
            g.stage_m,
            g.discharge_m3s,
            d
        ));
    }
    if let Some(p) = &args.out {
        let json = serde_json::to_string_pretty(&report.curve)?;
        std::fs::write(p, json).with_context(|| format!("writing {}", p.display()))?;
        out.push_str(&format!("curve written to {}\n", p.display()));
    }
    out.push_str("A proposal: review it before it becomes a rating version. Advisory.\n");
    Ok(out)
}

#[derive(Debug, Args, Clone)]
pub struct HindcastArgs {
    /// Folder of the SQLite database [overrides storage.data_dir].
    #[arg(long, value_name = "DIR")]
    pub data_dir: Option<PathBuf>,
    /// The reach id.
    #[arg(long)]
    pub reach: String,
    /// First issue time (RFC 3339, e.g. 2026-03-14T06:00:00Z).
    #[arg(long, value_name = "TIME")]
    pub from: String,
    /// Last issue time (RFC 3339, in the past).
    #[arg(long, value_name = "TIME")]
    pub to: String,
    /// Minutes between issue times (5 to 10080).
    #[arg(long, default_value_t = 60)]
    pub every_minutes: u64,
    /// `as_received`: readings received by each issue time, at the
    /// revision in force then; `as_timed`: readings timed by then, as
    /// stored now (for a period before the readings were loaded).
    #[arg(long, default_value = "as_received", value_parser = ["as_received", "as_timed"])]
    pub knowledge: String,
}

/// `reachcast hindcast`: runs the plan and verifies it; what to print.
pub async fn run_hindcast(
    config: &crate::config::Config,
    args: &HindcastArgs,
) -> anyhow::Result<String> {
    use crate::forecast::{hindcast, record::Knowledge};
    use anyhow::Context;
    let time = |field: &str, text: &str| {
        chrono::DateTime::parse_from_rfc3339(text)
            .map(|t| t.with_timezone(&chrono::Utc))
            .with_context(|| format!("--{field} `{text}` is not an RFC 3339 time"))
    };
    let knowledge = if args.knowledge == "as_timed" {
        Knowledge::AsTimed
    } else {
        Knowledge::AsReceived
    };
    let plan = hindcast::plan(
        time("from", &args.from)?,
        time("to", &args.to)?,
        args.every_minutes,
        knowledge,
        config.forecast.max_hindcast_runs,
        chrono::Utc::now(),
    )
    .map_err(|e| anyhow::anyhow!("--{}: {}", e.field.replace('_', "-"), e.detail))?;
    let storage = &config.storage;
    let store = crate::store::Store::open_for_maintenance(storage)
        .await
        .with_context(|| format!("opening database in {}", storage.data_dir.display()))?;
    // No workers and no schedule: only the runs asked for.
    let (_stop, stop_rx) = tokio::sync::watch::channel(false);
    let forecaster = crate::service::Forecaster::new(
        store.clone(),
        config.forecast.clone(),
        config.verification.clone(),
        crate::service::alerts::Alerter::new(config),
        stop_rx,
    );
    let runs = forecaster.hindcast(&args.reach, &plan).await;
    store.close().await;
    let runs = runs?;
    let mut out = String::new();
    for r in &runs {
        let how = r.error.as_deref().unwrap_or("ok");
        out.push_str(&format!(
            "run {} issued {}: {}\n",
            r.run_id,
            crate::wire_time::format(r.issued),
            how
        ));
    }
    let ok = runs.iter().filter(|r| r.error.is_none()).count();
    out.push_str(&format!(
        "hindcast of `{}`: {} runs ({ok} ok, {} failed), {}; verified. Advisory model output, not an official warning.\n",
        args.reach,
        runs.len(),
        runs.len() - ok,
        knowledge.as_str()
    ));
    Ok(out)
}

#[derive(Debug, Args, Clone)]
pub struct PruneArgs {
    /// Folder of the SQLite database [overrides storage.data_dir].
    #[arg(long, value_name = "DIR")]
    pub data_dir: Option<PathBuf>,
}

#[derive(Debug, Args, Clone)]
pub struct BackupArgs {
    /// Folder of the SQLite database [overrides storage.data_dir].
    #[arg(long, value_name = "DIR")]
    pub data_dir: Option<PathBuf>,
    /// The backup file to write; it must not exist.
    #[arg(long, value_name = "FILE")]
    pub to: PathBuf,
}

#[derive(Debug, Args, Clone)]
pub struct RestoreArgs {
    /// Folder of the SQLite database [overrides storage.data_dir].
    #[arg(long, value_name = "DIR")]
    pub data_dir: Option<PathBuf>,
    /// The backup file to restore.
    #[arg(long, value_name = "FILE")]
    pub from: PathBuf,
}

/// `reachcast prune`: one pruning pass; what to print.
pub async fn run_prune(config: &crate::config::Config) -> anyhow::Result<String> {
    use anyhow::Context;
    let storage = &config.storage;
    let store = crate::store::Store::open_for_maintenance(storage)
        .await
        .with_context(|| format!("opening database in {}", storage.data_dir.display()))?;
    let pruned = crate::service::retention::prune_once(&store, config).await;
    store.close().await;
    let p = pruned?;
    let kept = p
        .readings_kept_from
        .map(|t| format!(" (readings from {} kept)", crate::wire_time::format(t)))
        .unwrap_or_default();
    Ok(format!(
        "pruned: {} runs' results replaced by their digest, {} readings, {} reading revisions, {} CAP messages, {} audit rows{kept}\n",
        p.runs_digested, p.readings, p.reading_revisions, p.cap_messages, p.audit_rows
    ))
}

/// `reachcast backup`: copies the database and checks the copy; what to
/// print.
pub async fn run_backup(
    to: &std::path::Path,
    storage: &crate::config::StorageConfig,
) -> anyhow::Result<String> {
    use anyhow::Context;
    let store = crate::store::Store::open_for_maintenance(storage)
        .await
        .with_context(|| format!("opening database in {}", storage.data_dir.display()))?;
    let written = store.backup_to(to).await;
    store.close().await;
    written?;
    let s = crate::store::backup::check_file(to).await?;
    anyhow::ensure!(
        s.intact,
        "the copy {} fails its integrity check: {}",
        to.display(),
        s.problem.unwrap_or_default()
    );
    Ok(format!(
        "backup written to {}: integrity ok, {} readings, {} forecast runs, schema {}\n",
        to.display(),
        s.readings,
        s.runs,
        s.schema_version
    ))
}

/// `reachcast restore`: replaces the database with a checked backup.
pub async fn run_restore(
    from: &std::path::Path,
    storage: &crate::config::StorageConfig,
) -> anyhow::Result<String> {
    let r = crate::store::backup::restore(from, &storage.data_dir).await?;
    let kept = r.kept.map_or_else(
        || "there was no database before".to_owned(),
        |k| format!("the replaced database is kept as {}", k.display()),
    );
    Ok(format!(
        "restored {} into {}: {} readings, {} forecast runs, schema {}; {kept}\n",
        from.display(),
        storage.data_dir.display(),
        r.summary.readings,
        r.summary.runs,
        r.summary.schema_version
    ))
}

#[derive(Debug, Args, Clone)]
pub struct RouteArgs {
    /// Reach description (JSON): sections, points of interest with
    /// thresholds, downstream boundary.
    #[arg(long, value_name = "REACH.json")]
    pub reach: PathBuf,
    /// Inflow hydrograph (CSV with header `time,discharge`; RFC 3339 times
    /// with offset; m³/s).
    #[arg(long, value_name = "INFLOW.csv")]
    pub inflow: PathBuf,
    /// Routing method [default: the reach's own, diffusive unless set].
    #[arg(long, value_parser = ["diffusive", "kinematic"])]
    pub method: Option<String>,
    /// Write stage and discharge hydrographs at every point to this CSV
    /// (with a stage column per ensemble percentile under `--members`).
    #[arg(long, value_name = "RESULTS.csv")]
    pub out: Option<PathBuf>,
    /// Also route an ensemble of this many members, perturbed as the
    /// reach's `ensemble` section says, and report ranges and
    /// probabilities [default: none].
    #[arg(long, value_name = "N")]
    pub members: Option<usize>,
    /// Seed of the ensemble's perturbations: the same seed gives the same
    /// answer.
    #[arg(long, value_name = "S", default_value_t = 1, requires = "members")]
    pub seed: u64,
}

#[derive(Debug, Args, Clone)]
pub struct CalibrateArgs {
    /// Reach description (JSON), as for `route`.
    #[arg(long, value_name = "REACH.json")]
    pub reach: PathBuf,
    /// Upstream inflow (CSV `time,discharge`) covering both windows and a
    /// warm-up before them.
    #[arg(long, value_name = "INFLOW.csv")]
    pub inflow: PathBuf,
    /// Observed stage at the point (CSV `time,stage`; RFC 3339 times with
    /// offset; m).
    #[arg(long, value_name = "OBSERVED.csv")]
    pub observed: PathBuf,
    /// The point of interest's id.
    #[arg(long, value_name = "ID")]
    pub point: String,
    /// The window fitted to: FROM/TO, two RFC 3339 times.
    #[arg(long, value_name = "FROM/TO")]
    pub fit: crate::forecast::calibrate::window::Window,
    /// The window scored but never fitted to: FROM/TO; must not overlap
    /// the fit window.
    #[arg(long, value_name = "FROM/TO")]
    pub held_out: crate::forecast::calibrate::window::Window,
    /// Smallest multiplier tried.
    #[arg(long, value_name = "X", default_value_t = 0.5)]
    pub lower: f64,
    /// Largest multiplier tried.
    #[arg(long, value_name = "X", default_value_t = 2.0)]
    pub upper: f64,
    /// Write the proposed reach description (JSON) here.
    #[arg(long, value_name = "PROPOSED.json")]
    pub out: Option<PathBuf>,
}

#[derive(Debug, Args, Clone)]
pub struct KeysArgs {
    /// Folder of the SQLite database [overrides storage.data_dir].
    #[arg(long, value_name = "DIR", global = true)]
    pub data_dir: Option<PathBuf>,

    #[command(subcommand)]
    pub command: KeysCommand,
}

#[derive(Debug, Subcommand, Clone)]
pub enum KeysCommand {
    /// Create a key and print it once (only its hash is stored).
    Create {
        /// A name saying whose key it is, e.g. "upper-weir logger".
        #[arg(long)]
        name: String,
        /// gauge (posts readings for the gauges given), forecaster or admin.
        #[arg(long, value_parser = parse_role)]
        role: Role,
        /// A gauge this key may post readings for (role gauge); repeatable.
        #[arg(long = "gauge", value_name = "ID")]
        gauges: Vec<String>,
    },
    /// List keys (id, name, role, gauges, created, revoked); no secrets.
    List,
    /// Revoke a key by id; it stops working at once.
    Revoke {
        /// The key id (the part after `rck_`, before the second `_`).
        id: String,
    },
}

fn parse_role(s: &str) -> Result<Role, String> {
    s.parse()
}

/// Runs a `keys` subcommand against the database; returns what to print.
pub async fn run_keys(
    command: &KeysCommand,
    storage: &crate::config::StorageConfig,
) -> anyhow::Result<String> {
    use anyhow::Context;
    use std::fmt::Write;
    let store = crate::store::Store::open_for_maintenance(storage)
        .await
        .with_context(|| format!("opening database in {}", storage.data_dir.display()))?;
    let out = match command {
        KeysCommand::Create { name, role, gauges } => {
            if name.trim().is_empty() {
                anyhow::bail!("--name must not be empty");
            }
            if *role == Role::Gauge && gauges.is_empty() {
                anyhow::bail!("a key with role gauge needs at least one --gauge ID");
            }
            if *role != Role::Gauge && !gauges.is_empty() {
                anyhow::bail!("--gauge applies only to keys with role gauge");
            }
            if let Some(bad) = gauges.iter().find(|g| !crate::gauge::valid_slug(g)) {
                anyhow::bail!("--gauge `{bad}` is not a gauge id (a-z, 0-9, -)");
            }
            let key = crate::auth::generate_key()
                .map_err(|e| anyhow::anyhow!("reading the random source: {e}"))?;
            let info = store.create_key(&key, name.trim(), *role, gauges).await?;
            format!(
                "{}\n# key id {} ({}, role {}); shown once: store it now\n",
                key.token, info.id, info.name, info.role
            )
        }
        KeysCommand::List => {
            let mut out = String::from("id\trole\tname\tgauges\tcreated\trevoked\n");
            for k in store.list_keys().await? {
                let _ = writeln!(
                    out,
                    "{}\t{}\t{}\t{}\t{}\t{}",
                    k.id,
                    k.role,
                    k.name,
                    k.gauges.join(","),
                    k.created_at,
                    k.revoked_at.as_deref().unwrap_or("-")
                );
            }
            out
        }
        KeysCommand::Revoke { id } => {
            if store.revoke_key(id).await? {
                format!("revoked {id}\n")
            } else {
                store.close().await;
                anyhow::bail!("no key with id {id}");
            }
        }
    };
    store.close().await;
    Ok(out)
}

#[derive(Debug, Args, Clone, Default)]
pub struct ServeArgs {
    /// Address to listen on, e.g. 127.0.0.1:8080 or 0.0.0.0:80
    /// [overrides server.bind].
    #[arg(long, value_name = "ADDR")]
    pub bind: Option<String>,

    /// Folder for the SQLite database; created if missing
    /// [overrides storage.data_dir].
    #[arg(long, value_name = "DIR")]
    pub data_dir: Option<PathBuf>,
}

impl Cli {
    /// The serve options, whether given before or after `serve`.
    pub fn serve_args(&self) -> ServeArgs {
        match &self.command {
            Some(Command::Serve(args)) => args.clone(),
            Some(Command::Keys(k)) => ServeArgs {
                bind: None,
                data_dir: k.data_dir.clone(),
            },
            None => self.serve.clone(),
            Some(Command::Route(_) | Command::Calibrate(_) | Command::FitRating(_)) => {
                self.serve.clone()
            }
            Some(Command::Backup(b)) => ServeArgs {
                bind: None,
                data_dir: b.data_dir.clone(),
            },
            Some(Command::Restore(r)) => ServeArgs {
                bind: None,
                data_dir: r.data_dir.clone(),
            },
            Some(Command::Prune(p)) => ServeArgs {
                bind: None,
                data_dir: p.data_dir.clone(),
            },
            Some(Command::Hindcast(h)) => ServeArgs {
                bind: None,
                data_dir: h.data_dir.clone(),
            },
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn serve_is_default_and_explicit() {
        let a = Cli::try_parse_from(["reachcast", "--bind", "127.0.0.1:1"]).expect("parse");
        assert_eq!(a.serve_args().bind.as_deref(), Some("127.0.0.1:1"));
        let b = Cli::try_parse_from(["reachcast", "serve", "--data-dir", "/tmp/x", "-c", "f.toml"])
            .expect("parse");
        assert_eq!(b.serve_args().data_dir, Some(PathBuf::from("/tmp/x")));
        assert_eq!(b.config, Some(PathBuf::from("f.toml")));
    }

    #[test]
    fn route_takes_files_and_method() {
        let c = Cli::try_parse_from([
            "reachcast",
            "route",
            "--reach",
            "r.json",
            "--inflow",
            "i.csv",
            "--method",
            "kinematic",
        ])
        .expect("parse");
        let Some(Command::Route(r)) = c.command else {
            panic!("route expected");
        };
        assert_eq!(r.method.as_deref(), Some("kinematic"));
        assert!(
            Cli::try_parse_from([
                "reachcast",
                "route",
                "--reach",
                "r",
                "--inflow",
                "i",
                "--method",
                "fast"
            ])
            .is_err()
        );
    }

    #[test]
    fn calibrate_takes_files_and_windows() {
        let args = |held: &str| {
            Cli::try_parse_from([
                "reachcast",
                "calibrate",
                "--reach",
                "r.json",
                "--inflow",
                "i.csv",
                "--observed",
                "o.csv",
                "--point",
                "mill",
                "--fit",
                "2026-03-14T00:00:00Z/2026-03-15T00:00:00Z",
                "--held-out",
                held,
            ])
        };
        let c = args("2026-03-15T01:00:00Z/2026-03-16T00:00:00Z").expect("parse");
        let Some(Command::Calibrate(a)) = c.command else {
            panic!("calibrate expected");
        };
        assert_eq!((a.point.as_str(), a.lower, a.upper), ("mill", 0.5, 2.0));
        assert!(
            args("2026-03-15T01:00:00Z").is_err(),
            "a window needs two ends"
        );
    }

    #[test]
    fn keys_subcommands_parse() {
        let c = Cli::try_parse_from([
            "reachcast",
            "keys",
            "create",
            "--name",
            "logger",
            "--role",
            "gauge",
            "--gauge",
            "alder-weir",
            "--gauge",
            "brook-end",
            "--data-dir",
            "/tmp/d",
        ])
        .expect("parse");
        match c.command {
            Some(Command::Keys(KeysArgs {
                data_dir,
                command: KeysCommand::Create { role, gauges, .. },
            })) => {
                assert_eq!(role, Role::Gauge);
                assert_eq!(gauges, ["alder-weir", "brook-end"]);
                assert_eq!(data_dir, Some(PathBuf::from("/tmp/d")));
            }
            other => panic!("{other:?}"),
        }
        assert!(
            Cli::try_parse_from([
                "reachcast",
                "keys",
                "create",
                "--name",
                "x",
                "--role",
                "boss"
            ])
            .is_err()
        );
        let r = Cli::try_parse_from(["reachcast", "keys", "revoke", "abc"]).expect("parse");
        assert!(matches!(
            r.command,
            Some(Command::Keys(KeysArgs {
                command: KeysCommand::Revoke { .. },
                ..
            }))
        ));
    }

    #[test]
    fn clap_definition_is_consistent() {
        use clap::CommandFactory;
        Cli::command().debug_assert();
    }
}

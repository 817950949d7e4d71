//! Command-line interface. `serve` is the default subcommand, so
//! `reachcast` alone starts the service with the demo reach.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand};

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
    /// Write stage and discharge hydrographs at every point to this CSV.
    #[arg(long, value_name = "RESULTS.csv")]
    pub out: Option<PathBuf>,
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
            _ => self.serve.clone(),
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
    fn clap_definition_is_consistent() {
        use clap::CommandFactory;
        Cli::command().debug_assert();
    }
}

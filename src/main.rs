use std::process::ExitCode;

use clap::Parser;
use reachcast::{
    app::{Application, shutdown_signal},
    cli::{Cli, Command},
    config::{Config, Overrides},
    telemetry,
};

fn main() -> ExitCode {
    let cli = Cli::parse();
    if let Some(Command::Route(args)) = &cli.command {
        return match reachcast::offline::route(args) {
            Ok(summary) => {
                print!("{summary}");
                ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("reachcast route: {e:#}");
                ExitCode::from(2)
            }
        };
    }
    if let Some(Command::Calibrate(args)) = &cli.command {
        return match reachcast::offline::calibrate(args) {
            Ok(summary) => {
                print!("{summary}");
                ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("reachcast calibrate: {e:#}");
                ExitCode::from(2)
            }
        };
    }
    if let Some(Command::FitRating(args)) = &cli.command {
        return match reachcast::cli::run_fit_rating(args) {
            Ok(text) => {
                print!("{text}");
                ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("reachcast fit-rating: {e:#}");
                ExitCode::from(2)
            }
        };
    }
    let args = cli.serve_args();
    let overrides = Overrides {
        bind: args.bind,
        data_dir: args.data_dir,
    };
    // Configuration is checked before anything else happens, so a bad value
    // stops the start with a message naming the key.
    let config = match Config::load(cli.config.as_deref(), std::env::vars(), &overrides) {
        Ok(c) => c,
        Err(e) => {
            eprintln!("reachcast: configuration error: {e}");
            return ExitCode::from(2);
        }
    };
    if let Some(Command::Keys(keys)) = &cli.command {
        return run_keys(&keys.command, &config);
    }
    if let Some(Command::Backup(b)) = &cli.command {
        return run_maintenance("backup", reachcast::cli::run_backup(&b.to, &config.storage));
    }
    if let Some(Command::Hindcast(h)) = &cli.command {
        return run_maintenance("hindcast", reachcast::cli::run_hindcast(&config, h));
    }
    if let Some(Command::Prune(_)) = &cli.command {
        return run_maintenance("prune", reachcast::cli::run_prune(&config));
    }
    if let Some(Command::Restore(r)) = &cli.command {
        return run_maintenance(
            "restore",
            reachcast::cli::run_restore(&r.from, &config.storage),
        );
    }
    telemetry::init(&config.log.filter, config.log.format == "json");
    let runtime = match tokio::runtime::Runtime::new() {
        Ok(r) => r,
        Err(e) => {
            eprintln!("reachcast: cannot start the async runtime: {e}");
            return ExitCode::FAILURE;
        }
    };
    match runtime.block_on(serve(config)) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("reachcast: {e:#}");
            ExitCode::FAILURE
        }
    }
}

/// `reachcast keys ...`: key management on the configured data directory.
fn run_keys(command: &reachcast::cli::KeysCommand, config: &Config) -> ExitCode {
    run_maintenance("keys", reachcast::cli::run_keys(command, &config.storage))
}

/// Runs one maintenance command to completion and prints its answer.
fn run_maintenance(
    name: &str,
    work: impl std::future::Future<Output = anyhow::Result<String>>,
) -> ExitCode {
    let result = tokio::runtime::Runtime::new()
        .map_err(anyhow::Error::from)
        .and_then(|rt| rt.block_on(work));
    match result {
        Ok(out) => {
            print!("{out}");
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("reachcast {name}: {e:#}");
            ExitCode::FAILURE
        }
    }
}

async fn serve(config: Config) -> anyhow::Result<()> {
    let signal = shutdown_signal()?;
    let app = Application::build(config).await?;
    let addr = app.local_addr()?;
    tracing::info!(%addr, "reachcast listening; dashboard at http://{addr}/");
    app.run_until(signal).await
}

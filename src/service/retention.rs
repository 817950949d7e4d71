//! The pruning schedule: a pass a minute after start, then every
//! `retention.interval_minutes`, each logged and counted. A failed pass is
//! logged and retried at the next interval; it never stops the service.

use std::time::Duration;

use chrono::Utc;
use tokio::sync::watch;

use super::Forecaster;
use crate::{
    config::Config,
    store::{Pruned, Retention, Store, StoreError},
};

/// Delay before the first pass, so that a start is not slowed by it.
const FIRST_PASS: Duration = Duration::from_secs(60);

/// One pass under the configuration, seen from now.
pub async fn prune_once(store: &Store, config: &Config) -> Result<Pruned, StoreError> {
    let policy = Retention::of(&config.retention, &config.forecast, Utc::now());
    store.prune(&policy).await
}

/// Starts the schedule unless `retention.interval_minutes` is 0.
pub fn spawn(
    store: Store,
    config: Config,
    forecaster: Forecaster,
    mut shutdown: watch::Receiver<bool>,
) {
    let minutes = config.retention.interval_minutes;
    if minutes == 0 {
        return;
    }
    let every = Duration::from_secs(minutes * 60);
    tokio::spawn(async move {
        let mut wait = FIRST_PASS;
        loop {
            tokio::select! {
                () = tokio::time::sleep(wait) => {}
                _ = shutdown.changed() => break,
            }
            wait = every;
            match prune_once(&store, &config).await {
                Ok(p) if p.is_empty() => tracing::debug!("retention: nothing to prune"),
                Ok(p) => {
                    forecaster.metrics().pruned(&p);
                    tracing::info!(
                        runs_digested = p.runs_digested,
                        readings = p.readings,
                        cap_messages = p.cap_messages,
                        audit_rows = p.audit_rows,
                        "retention: pruned"
                    );
                }
                Err(e) => {
                    tracing::warn!(error = %e, "retention: pruning failed; retried at the next interval")
                }
            }
        }
    });
}

//! Scheduled backups: every `backup.interval_hours` a consistent online
//! copy (`Store::backup_to`, SQLite's `VACUUM INTO`) is written to the
//! backup folder under a name that sorts by time, checked, and only then
//! are the oldest beyond `backup.keep` deleted. A copy that fails its
//! check is removed and the older ones are kept. Only files named as this
//! schedule names them are ever deleted.

use std::{
    path::{Path, PathBuf},
    time::Duration,
};

use chrono::{DateTime, NaiveDateTime, Utc};
use tokio::sync::watch;

use super::Forecaster;
use crate::{
    config::Config,
    store::{Store, backup},
};

const PREFIX: &str = "reachcast-";
const SUFFIX: &str = ".sqlite3";
const STAMP: &str = "%Y%m%dT%H%M%SZ";

/// What one scheduled backup did.
#[derive(Debug, Clone, PartialEq)]
pub struct BackupDone {
    pub path: PathBuf,
    pub summary: backup::FileSummary,
    /// Older backups deleted to keep `backup.keep`.
    pub removed: Vec<PathBuf>,
}

/// The file name of a backup taken at `now`.
pub fn file_name(now: DateTime<Utc>) -> String {
    format!("{PREFIX}{}{SUFFIX}", now.format(STAMP))
}

/// Whether `name` is a scheduled backup's name.
fn is_backup_name(name: &str) -> bool {
    name.strip_prefix(PREFIX)
        .and_then(|r| r.strip_suffix(SUFFIX))
        .is_some_and(|stamp| NaiveDateTime::parse_from_str(stamp, STAMP).is_ok())
}

/// The backups to delete so that `keep` remain: the oldest (names sort by
/// time); names that are not a scheduled backup's are never chosen.
pub fn beyond_keep(names: &[String], keep: usize) -> Vec<String> {
    let mut ours: Vec<&String> = names.iter().filter(|n| is_backup_name(n)).collect();
    ours.sort();
    let extra = ours.len().saturating_sub(keep);
    ours.into_iter().take(extra).cloned().collect()
}

/// Writes, checks and rotates one backup into `dir` at `now`.
pub async fn backup_once(
    store: &Store,
    dir: &Path,
    keep: usize,
    now: DateTime<Utc>,
) -> anyhow::Result<BackupDone> {
    tokio::fs::create_dir_all(dir).await?;
    let path = dir.join(file_name(now));
    store.backup_to(&path).await?;
    let summary = backup::check_file(&path).await?;
    if !summary.intact {
        let _ = tokio::fs::remove_file(&path).await;
        anyhow::bail!(
            "the copy {} failed its integrity check ({}); removed, older backups kept",
            path.display(),
            summary.problem.unwrap_or_default()
        );
    }
    let mut names = Vec::new();
    let mut entries = tokio::fs::read_dir(dir).await?;
    while let Some(e) = entries.next_entry().await? {
        if let Some(n) = e.file_name().to_str() {
            names.push(n.to_owned());
        }
    }
    let mut removed = Vec::new();
    for name in beyond_keep(&names, keep) {
        let old = dir.join(&name);
        tokio::fs::remove_file(&old).await?;
        removed.push(old);
    }
    Ok(BackupDone {
        path,
        summary,
        removed,
    })
}

/// Starts the schedule unless `backup.interval_hours` is 0.
pub fn spawn(
    store: Store,
    config: &Config,
    forecaster: Forecaster,
    mut shutdown: watch::Receiver<bool>,
) {
    let hours = config.backup.interval_hours;
    if hours == 0 {
        return;
    }
    let every = Duration::from_secs(hours * 3600);
    let dir = config.backup_dir();
    let keep = usize::try_from(config.backup.keep).unwrap_or(usize::MAX);
    tokio::spawn(async move {
        loop {
            tokio::select! {
                () = tokio::time::sleep(every) => {}
                _ = shutdown.changed() => break,
            }
            let outcome = backup_once(&store, &dir, keep, Utc::now()).await;
            forecaster.metrics().backup(outcome.is_ok());
            match outcome {
                Ok(b) => tracing::info!(
                    path = %b.path.display(),
                    readings = b.summary.readings,
                    runs = b.summary.runs,
                    removed = b.removed.len(),
                    "scheduled backup written and checked"
                ),
                Err(e) => {
                    tracing::error!(error = %format!("{e:#}"), dir = %dir.display(), "scheduled backup failed")
                }
            }
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_sort_by_time_and_only_ours_are_rotated() {
        let t = |s: &str| DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc);
        let a = file_name(t("2026-12-01T09:00:00Z"));
        let b = file_name(t("2026-12-01T10:00:00Z"));
        let c = file_name(t("2026-12-02T00:00:00Z"));
        assert_eq!(a, "reachcast-20261201T090000Z.sqlite3");
        let names = vec![
            c.clone(),
            "reachcast.sqlite3".to_owned(),
            a.clone(),
            "reachcast-mine.sqlite3".to_owned(),
            b.clone(),
        ];
        assert_eq!(beyond_keep(&names, 2), std::slice::from_ref(&a));
        assert_eq!(beyond_keep(&names, 1), [a, b]);
        assert!(beyond_keep(&names, 5).is_empty());
    }
}

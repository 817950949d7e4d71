//! Hindcasts: a past period replayed as if live. Each planned issue time
//! is run from what counted as known then (`cycle::Basis`), stored as a
//! hindcast run (never served as the current forecast, never alerting),
//! and the whole set is then verified like live runs, so verification
//! covers events from before the service ran.

use chrono::{DateTime, Utc};
use serde::Serialize;

use super::{CycleError, Forecaster, cycle::Basis};
use crate::forecast::{hindcast::Plan, record::RunStatus};

/// How one hindcast run ended.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HindcastRun {
    pub run_id: i64,
    #[serde(with = "crate::wire_time")]
    pub issued: DateTime<Utc>,
    pub status: RunStatus,
    pub error: Option<String>,
}

impl Forecaster {
    /// Runs the plan's issue times in order (after any live run of the
    /// reach in progress, and before the next), then one verification
    /// pass.
    pub async fn hindcast(
        &self,
        reach_id: &str,
        plan: &Plan,
    ) -> Result<Vec<HindcastRun>, CycleError> {
        let lock = self.run_lock(reach_id);
        let _guard = lock.lock().await;
        let mut out = Vec::with_capacity(plan.issues.len());
        for &issued in &plan.issues {
            let basis = Basis {
                issued,
                hindcast: Some(plan.knowledge),
            };
            let s = self.cycle_on(reach_id, basis).await?;
            out.push(HindcastRun {
                run_id: s.run_id,
                issued,
                status: s.status,
                error: s.error,
            });
        }
        self.verify(reach_id).await;
        Ok(out)
    }
}

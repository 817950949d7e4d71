//! A calibration from stored data: the point's gauge readings as observed
//! stage, and the upstream inflow assembled from the upstream gauge's
//! readings by the same assembly a forecast run uses (no upload: a
//! calibration compares the model with what happened). Applies nothing.

use chrono::{DateTime, Duration, Utc};

use super::{CycleError, Forecaster};
use crate::forecast::{
    assemble::{self, Rules},
    budget,
    calibrate::{self, Calibration, window::Window},
    spec::ReachSpec,
};

/// How long before the earlier window the inflow starts, so the model has
/// forgotten its steady initial state when scoring begins (a judgement:
/// several travel times of the reaches the service is meant for).
pub const WARM_UP: Duration = Duration::hours(6);

/// What to fit.
#[derive(Debug, Clone)]
pub struct CalibrationRequest {
    pub point: String,
    pub fit: Window,
    pub held_out: Window,
    pub bounds: (f64, f64),
}

/// Why no calibration was made: the request itself is wrong (bounds,
/// overlapping or over-long windows), or it does not fit what is stored
/// (no such point, no gauge at it, no readings to compare with).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum Refused {
    #[error("{0}")]
    Invalid(String),
    #[error("{0}")]
    Conflict(String),
}

impl From<calibrate::CalibrateError> for Refused {
    fn from(e: calibrate::CalibrateError) -> Self {
        match e {
            calibrate::CalibrateError::Setup(m) => Refused::Invalid(m),
            other => Refused::Conflict(other.to_string()),
        }
    }
}

/// A calibration, or why none was made.
pub type Calibrated = Result<(i64, Calibration), Refused>;

impl Forecaster {
    /// Fits the multipliers of reach `reach_id`'s latest version; returns
    /// the version fitted and the proposal.
    pub async fn calibration(
        &self,
        reach_id: &str,
        req: &CalibrationRequest,
    ) -> Result<Calibrated, CycleError> {
        let reach = self
            .inner
            .store
            .latest_reach(reach_id)
            .await?
            .ok_or_else(|| CycleError::NoReach(reach_id.to_owned()))?;
        let spec = reach.spec;
        let Some(point) = spec.points.iter().find(|p| p.point_id() == req.point) else {
            let m = format!("the reach has no point `{}`", req.point);
            return Ok(Err(Refused::Conflict(m)));
        };
        let Some(gauge) = point.gauge.clone() else {
            let m = format!("point `{}` has no gauge to calibrate against", req.point);
            return Ok(Err(Refused::Conflict(m)));
        };
        let from = req.fit.from.min(req.held_out.from) - WARM_UP;
        let to = req.fit.to.max(req.held_out.to);
        // Each of the fit's routings must fit the budgets a forecast run
        // does (the fit makes at most about eighty of them).
        let span_s = (to - from).num_seconds() as f64;
        if let Err(e) = budget::admit(&spec, &self.inner.config.budget(), span_s) {
            let m = format!("the windows are too long to route: {e}");
            return Ok(Err(Refused::Invalid(m)));
        }
        let observed = self.stages(&gauge, from, to).await?;
        let inflow = match self.past_inflow(&spec, from, to).await? {
            Ok(i) => i,
            Err(e) => return Ok(Err(Refused::Conflict(e))),
        };
        let req = req.clone();
        let fitted = tokio::task::spawn_blocking(move || {
            let problem = calibrate::Problem {
                spec: &spec,
                inflow: &inflow,
                observed: &observed,
                point: &req.point,
                fit: req.fit,
                held_out: req.held_out,
                bounds: req.bounds,
            };
            calibrate::calibrate(&problem).map_err(Refused::from)
        })
        .await
        .map_err(|e| CycleError::Task(format!("the calibration did not finish: {e}")))?;
        Ok(fitted.map(|c| (reach.version, c)))
    }

    /// The upstream inflow over `[from, to]` as a run issued at `to` with a
    /// lookback reaching `from` would assemble it from the readings alone.
    async fn past_inflow(
        &self,
        spec: &ReachSpec,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Result<crate::forecast::hydrograph::Hydrograph, String>, CycleError> {
        let rules = Rules {
            lookback: to - from,
            // The shortest forecast the rules allow: nothing past `to` is scored.
            horizon: self.rules().step,
            ..self.rules()
        };
        let observed = self
            .observed(spec, super::cycle::Basis::live(to), &rules)
            .await?;
        Ok(observed.and_then(|(readings, basis)| {
            assemble::assemble(to, &readings, &basis, None, &rules)
                .map(|a| a.series)
                .map_err(|e| format!("upstream inflow: {e}"))
        }))
    }
}

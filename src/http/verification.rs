//! `GET /api/reaches/{reach}/verification`: how past forecasts at each
//! point of interest compared with what its gauge later saw, by lead-time
//! band beside persistence, with crest errors and each level's contingency
//! table; JSON, or CSV (`format=csv` or `Accept: text/csv`) with one row
//! per point and band. Read like the forecast (same access).

use axum::{
    Json, Router,
    extract::{Path, State},
    http::{HeaderMap, HeaderValue, header},
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use super::{
    AppState,
    auth::ReadAccess,
    error::{ApiError, Problem},
    query::{Format, Params, vary_accept},
    reaches::find_reach,
};
use crate::{
    forecast::verify::report::{self, PointVerification},
    service::verifier,
};

pub fn router() -> Router<AppState> {
    Router::new().route("/reaches/{reach}/verification", get(verification))
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct VerificationParams {
    /// Runs issued in this many days up to now (default
    /// `verification.window_days`).
    days: Option<u64>,
    format: Option<Format>,
}

/// What a band needs before it counts as verified.
#[derive(Debug, Serialize)]
struct Needs {
    runs: u64,
    pairs: u64,
}

#[derive(Debug, Serialize)]
struct VerificationDoc<'a> {
    caution: &'static str,
    reach: String,
    reach_name: String,
    #[serde(with = "crate::wire_time")]
    now: DateTime<Utc>,
    /// Runs issued from this instant on: the start of the first UTC day
    /// (the scores are kept per issue day).
    #[serde(with = "crate::wire_time")]
    from: DateTime<Utc>,
    days: u64,
    bands_hours: Vec<u32>,
    needs: Needs,
    method: &'static str,
    points: &'a [PointVerification],
}

/// How the figures are made, in the answer itself.
const METHOD: &str = "Each good run's stage at a point with a gauge is paired with the gauge's \
later usable stage readings (forecast interpolated to the reading's time), by lead time. \
Persistence (the stage last observed at the issue time, held) is scored on the same pairs; \
skill is 1 - score/persistence's score, above 0 when the model did better. Bias, MAE and RMSE \
are in metres (bias: forecast minus observed). NSE: Nash and Sutcliffe 1970; KGE: Gupta et al. \
2009. Ensemble CRPS is estimated from the run's stored percentiles. A run whose window has been \
observed is one event: its crest errors (when the gauge saw a crest inside the window) and, per \
level, whether it was forecast to be exceeded and whether it was. Readings that arrive after \
newer ones have been counted are not counted.";

async fn verification(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
    Params(params): Params<VerificationParams>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let cfg = &state.config.verification;
    let days = params.days.unwrap_or(cfg.window_days);
    if !(1..=3_650).contains(&days) {
        return Err(Problem::invalid("days", format!("must be 1 to 3650, got {days}")).into());
    }
    let reach = find_reach(&state, &id).await?;
    let now = Utc::now();
    let points = state
        .forecaster
        .verification_report(&reach, days, now)
        .await?;
    let format = Format::choose(params.format, &headers);
    let mut res = match format {
        Format::Csv => {
            let body = report::csv(&reach.reach_id, &points)
                .map_err(|e| ApiError::Internal(anyhow::anyhow!("writing CSV: {e}")))?;
            (
                [(
                    header::CONTENT_TYPE,
                    HeaderValue::from_static("text/csv; charset=utf-8; header=present"),
                )],
                body,
            )
                .into_response()
        }
        Format::Json => Json(VerificationDoc {
            caution: crate::CAUTION,
            reach_name: reach.spec.name.clone(),
            reach: reach.reach_id,
            now,
            from: verifier::window_start(days, now),
            days,
            bands_hours: cfg.band_edges().unwrap_or_default(),
            needs: Needs {
                runs: cfg.min_runs,
                pairs: cfg.min_pairs,
            },
            method: METHOD,
            points: &points,
        })
        .into_response(),
    };
    if params.format.is_none() {
        vary_accept(res.headers_mut());
    }
    Ok(res)
}

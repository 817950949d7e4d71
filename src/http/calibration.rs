//! `POST /api/reaches/{reach}/calibration` (forecaster): fits the reach's
//! Manning's n multipliers to a gauged point's stored readings and returns
//! the proposal without applying it (applying it is a reach edit, a new
//! audited version). The work is in `service::calibration`.

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, State},
    response::{IntoResponse, Response},
    routing::post,
};
use serde::Deserialize;

use super::{
    AppState,
    auth::{Forecasting, RequireRole},
    error::{ApiError, Problem, parse_json},
    reaches::find_reach,
};
use crate::{
    CAUTION,
    forecast::calibrate::{report, window::Window},
    service::calibration::{CalibrationRequest, Refused},
};

pub fn router() -> Router<AppState> {
    Router::new().route("/reaches/{reach}/calibration", post(calibrate))
}

/// The request body; windows are `FROM/TO` strings, as on the command line.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Body {
    point: String,
    fit: String,
    held_out: String,
    #[serde(default = "default_lower")]
    lower: f64,
    #[serde(default = "default_upper")]
    upper: f64,
}

fn default_lower() -> f64 {
    0.5
}

fn default_upper() -> f64 {
    2.0
}

fn window(field: &str, text: &str) -> Result<Window, Problem> {
    text.parse().map_err(|e: String| Problem::invalid(field, e))
}

async fn calibrate(
    _: RequireRole<Forecasting>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    find_reach(&state, &id).await?;
    let b: Body = parse_json(&body)?;
    let req = CalibrationRequest {
        point: b.point,
        fit: window("fit", &b.fit)?,
        held_out: window("held_out", &b.held_out)?,
        bounds: (b.lower, b.upper),
    };
    let answer = state
        .forecaster
        .calibration(&id, &req)
        .await
        .map_err(|e| ApiError::Internal(anyhow::anyhow!(e)))?;
    let (version, c) = answer.map_err(|e| match e {
        Refused::Invalid(m) => Problem::invalid("calibration", m),
        Refused::Conflict(m) => Problem::conflict("calibration", m),
    })?;
    Ok(Json(serde_json::json!({
        "caution": CAUTION,
        "reach": id,
        "reach_version": version,
        "applied": false,
        "calibration": {
            "point": c.point, "fit_window": c.fit_window, "held_out_window": c.held_out_window,
            "fitted": c.fitted, "before": c.before, "after": c.after,
            "evaluations": c.evaluations,
        },
        "summary": report::summary(&c),
        "proposed": c.proposed,
    }))
    .into_response())
}

//! `/api/gauges`: describe gauges (admin) and read them (public by default).

use axum::{
    Json, Router,
    body::Bytes,
    extract::{Path, State},
    http::StatusCode,
    response::IntoResponse,
    routing::get,
};
use serde::Deserialize;

use super::{
    AppState,
    auth::{Admin, ReadAccess, RequireRole},
    error::{ApiError, Problem, parse_json},
};
use crate::{
    gauge::{Gauge, Measures, valid_slug},
    store::GaugeUpsert,
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/gauges", get(list))
        .route("/gauges/{gauge}", get(one).put(put))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct GaugeBody {
    name: String,
    #[serde(default)]
    reach: Option<String>,
    #[serde(default)]
    chainage_m: Option<f64>,
    measures: Measures,
    #[serde(default)]
    rating_curve: Option<serde_json::Value>,
    stage_min_m: f64,
    stage_max_m: f64,
    max_rise_m_per_h: f64,
    #[serde(default)]
    discharge_min_m3s: Option<f64>,
    #[serde(default)]
    discharge_max_m3s: Option<f64>,
}

/// The gauge with this id, or a 404 problem naming it.
pub async fn find_gauge(state: &AppState, id: &str) -> Result<Gauge, ApiError> {
    state.store.gauge(id).await?.ok_or_else(|| {
        Problem::new(StatusCode::NOT_FOUND, "unknown-gauge", "Unknown gauge")
            .detail(format!("there is no gauge `{id}`"))
            .field("gauge")
            .into()
    })
}

async fn list(_: ReadAccess, State(state): State<AppState>) -> Result<Json<Vec<Gauge>>, ApiError> {
    Ok(Json(state.store.gauges().await?))
}

async fn one(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Json<Gauge>, ApiError> {
    Ok(Json(find_gauge(&state, &id).await?))
}

fn check_body(b: GaugeBody) -> Result<GaugeUpsert, Problem> {
    let name = b.name.trim().to_owned();
    if name.is_empty() || name.chars().count() > 200 {
        return Err(Problem::invalid("name", "must be 1 to 200 characters"));
    }
    let finite = |field: &str, v: f64| {
        if v.is_finite() {
            Ok(())
        } else {
            Err(Problem::invalid(field, "must be a finite number"))
        }
    };
    finite("stage_min_m", b.stage_min_m)?;
    finite("stage_max_m", b.stage_max_m)?;
    if b.stage_max_m <= b.stage_min_m {
        return Err(Problem::invalid(
            "stage_max_m",
            "must be greater than stage_min_m",
        ));
    }
    if !(b.max_rise_m_per_h.is_finite() && b.max_rise_m_per_h > 0.0) {
        return Err(Problem::invalid(
            "max_rise_m_per_h",
            "must be a positive number (metres per hour)",
        ));
    }
    if let Some(c) = b.chainage_m {
        finite("chainage_m", c)?;
    }
    if let Some(q) = b.discharge_min_m3s
        && !(q.is_finite() && q >= 0.0)
    {
        return Err(Problem::invalid(
            "discharge_min_m3s",
            "must be a finite number of at least 0",
        ));
    }
    if let Some(q) = b.discharge_max_m3s {
        finite("discharge_max_m3s", q)?;
        if q <= b.discharge_min_m3s.unwrap_or(0.0) {
            return Err(Problem::invalid(
                "discharge_max_m3s",
                "must be greater than discharge_min_m3s (and than 0)",
            ));
        }
    }
    if let Some(curve) = &b.rating_curve {
        // The same rating format as the reach description's downstream
        // rating, checked by the engine so a bad curve is refused here and
        // not discovered by a failing forecast run.
        let rating: crate::engine::rating::RatingCurve =
            serde_path_to_error::deserialize(curve.clone()).map_err(|e| {
                let path = e.path().to_string();
                let field = if path == "." || path.starts_with('[') {
                    "rating_curve".to_owned()
                } else {
                    format!("rating_curve.{path}")
                };
                Problem::invalid(field, e.into_inner().to_string())
            })?;
        rating
            .validate()
            .map_err(|e| Problem::invalid("rating_curve", e.to_string()))?;
    }
    Ok(GaugeUpsert {
        name,
        reach: b.reach,
        chainage_m: b.chainage_m,
        measures: b.measures,
        rating_curve: b.rating_curve,
        stage_min_m: b.stage_min_m,
        stage_max_m: b.stage_max_m,
        max_rise_m_per_h: b.max_rise_m_per_h,
        discharge_min_m3s: b.discharge_min_m3s,
        discharge_max_m3s: b.discharge_max_m3s,
    })
}

async fn put(
    auth: RequireRole<Admin>,
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<impl IntoResponse, ApiError> {
    if !valid_slug(&id) {
        return Err(Problem::invalid(
            "gauge",
            "a gauge id is 1 to 64 of a-z, 0-9 and -, not starting with -",
        )
        .into());
    }
    let upsert = check_body(parse_json::<GaugeBody>(&body)?)?;
    if let Some(reach) = &upsert.reach
        && !state.store.reach_exists(reach).await?
    {
        return Err(Problem::invalid("reach", format!("there is no reach `{reach}`")).into());
    }
    let (gauge, created) = state
        .store
        .put_gauge(&id, &upsert, auth.caller().key_id())
        .await?;
    let status = if created {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    Ok((status, Json(gauge)))
}

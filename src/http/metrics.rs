//! `GET /metrics`: the service's counters in the Prometheus text format
//! ([`crate::metrics`]), and the two middleware that count HTTP requests
//! by route template: one inside the router tags a response with the
//! route it matched, one around it times the request and counts it.

use std::time::Instant;

use axum::{
    Router,
    extract::{MatchedPath, Request, State},
    http::{HeaderValue, header},
    middleware::Next,
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::Utc;

use super::{AppState, auth::ReadAccess, error::ApiError};
use crate::{
    metrics::{GaugeLabels, HttpLabels, ReachLabels},
    service::Forecaster,
};

pub fn router() -> Router<AppState> {
    Router::new().route("/metrics", get(metrics))
}

/// The route template a response came from.
#[derive(Debug, Clone)]
struct RouteTag(String);

/// Inside the router (`route_layer`): tags the response with the matched
/// route template.
pub async fn tag_route(matched: Option<MatchedPath>, req: Request, next: Next) -> Response {
    let route = matched.map(|m| m.as_str().to_owned());
    let mut res = next.run(req).await;
    if let Some(r) = route {
        res.extensions_mut().insert(RouteTag(r));
    }
    res
}

/// Around the router: counts and times every request by method, route
/// template (`fallback` for the static files and unknown paths) and status.
pub async fn track(State(f): State<Forecaster>, req: Request, next: Next) -> Response {
    let started = Instant::now();
    let method = req.method().as_str().to_owned();
    let res = next.run(req).await;
    let route = res
        .extensions()
        .get::<RouteTag>()
        .map_or_else(|| "fallback".to_owned(), |t| t.0.clone());
    let labels = HttpLabels {
        method,
        route,
        status: res.status().as_u16(),
    };
    let m = f.metrics();
    m.http_requests.get_or_create(&labels).inc();
    m.http_seconds
        .get_or_create(&labels)
        .observe(started.elapsed().as_secs_f64());
    res
}

async fn metrics(_: ReadAccess, State(state): State<AppState>) -> Result<Response, ApiError> {
    refresh_gauges(&state).await?;
    let body = state.forecaster.metrics().render();
    Ok((
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/openmetrics-text; version=1.0.0; charset=utf-8"),
        )],
        body,
    )
        .into_response())
}

/// Sets the values read at scrape time: ages, active exceedances, pool.
async fn refresh_gauges(state: &AppState) -> Result<(), ApiError> {
    let m = state.forecaster.metrics();
    let now = Utc::now();
    let (situations, _) = state.forecaster.board();
    for reach in state.store.reaches().await? {
        let labels = ReachLabels {
            reach: reach.reach_id.clone(),
        };
        if let Some(t) = state.store.last_good_run_finished(&reach.reach_id).await? {
            let age = (now - t).num_milliseconds() as f64 / 1000.0;
            m.last_good_run_age.get_or_create(&labels).set(age);
        }
        let active = situations
            .iter()
            .filter(|s| s.reach_id == reach.reach_id && s.is_active())
            .count();
        m.active_exceedances
            .get_or_create(&labels)
            .set(i64::try_from(active).unwrap_or(i64::MAX));
    }
    for g in state.store.gauges().await? {
        if let Some(ms) = state.store.last_usable_reading_ms(&g.id).await? {
            let age = (now.timestamp_millis() - ms) as f64 / 1000.0;
            m.newest_reading_age
                .get_or_create(&GaugeLabels {
                    gauge: g.id.clone(),
                })
                .set(age);
        }
    }
    let (size, idle) = state.store.pool_stats();
    m.db_pool_size.set(i64::from(size));
    m.db_pool_idle.set(i64::try_from(idle).unwrap_or(i64::MAX));
    Ok(())
}

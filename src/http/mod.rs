//! The HTTP layer: one router per resource file, merged here, plus the
//! middleware every request passes through (request id, tracing span,
//! timeout, body limit, security headers).
//!
//! Handlers stay thin: they parse input, call the store or the forecast
//! layer, and shape the answer.

pub mod assets;
pub mod auth;
pub mod cache;
pub mod calibration;
pub mod cap;
pub mod conditional;
pub mod error;
pub mod exceedances;
pub mod forecast;
pub mod gauges;
pub mod health;
pub mod hindcasts;
pub mod inflow_csv;
pub mod inflows;
pub mod keys;
pub mod listener;
pub mod metrics;
pub mod openapi;
pub mod profile;
pub mod query;
pub mod ratings;
pub mod reaches;
pub mod readings;
pub mod runs;
pub mod unreadable;
pub mod verification;

use std::{
    sync::{
        Arc,
        atomic::{AtomicU64, Ordering},
    },
    time::Duration,
};

use axum::{
    Router,
    extract::{DefaultBodyLimit, OriginalUri},
    http::{HeaderName, HeaderValue, Request, StatusCode, header},
    routing::any,
};
use tower::ServiceBuilder;
use tower_http::{
    request_id::{MakeRequestId, PropagateRequestIdLayer, RequestId, SetRequestIdLayer},
    set_header::SetResponseHeaderLayer,
    timeout::TimeoutLayer,
    trace::TraceLayer,
};

use crate::{auth::RateLimiter, config::Config, store::Store};

/// Shared by every handler. Cheap to clone.
#[derive(Clone)]
pub struct AppState {
    pub config: Arc<Config>,
    pub store: Store,
    /// Per-key request budget (`auth.rate_limit_*`).
    pub limiter: Arc<RateLimiter>,
    /// Per-client-address budget of reads without a key.
    pub anonymous_limiter: Arc<RateLimiter>,
    /// Latest-readings answers, invalidated on write.
    pub cache: Arc<cache::ReadingsCache>,
    /// The forecast cycle: triggers, the exceedance board.
    pub forecaster: crate::service::Forecaster,
    /// Serialized exceedance answers per board version.
    pub exceedance_cache: Arc<exceedances::ExceedanceCache>,
}

impl AppState {
    pub fn new(config: Config, store: Store, forecaster: crate::service::Forecaster) -> Self {
        let limiter =
            RateLimiter::new(config.auth.rate_limit_per_sec, config.auth.rate_limit_burst);
        let anonymous = RateLimiter::new(
            config.auth.anonymous_rate_limit_per_sec,
            config.auth.anonymous_rate_limit_burst,
        );
        Self {
            config: Arc::new(config),
            store,
            limiter: Arc::new(limiter),
            anonymous_limiter: Arc::new(anonymous),
            cache: Arc::new(cache::ReadingsCache::default()),
            forecaster,
            exceedance_cache: Arc::default(),
        }
    }
}

const REQUEST_ID: HeaderName = HeaderName::from_static("x-request-id");

/// Request ids: a per-process counter prefixed with the start time, unique
/// enough to find one request in the logs, with no random source needed.
#[derive(Clone)]
struct CountingIds {
    prefix: Arc<str>,
    next: Arc<AtomicU64>,
}

impl MakeRequestId for CountingIds {
    fn make_request_id<B>(&mut self, _: &Request<B>) -> Option<RequestId> {
        let n = self.next.fetch_add(1, Ordering::Relaxed);
        HeaderValue::from_str(&format!("{}-{n}", self.prefix))
            .ok()
            .map(RequestId::new)
    }
}

/// Content Security Policy for the dashboard: everything from this origin,
/// nothing from anywhere else, so the page works on a closed network and
/// injected markup cannot load scripts.
const CSP: &str = "default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; connect-src 'self'; frame-ancestors 'none'; base-uri 'none'; form-action 'self'";

/// Builds the whole application router.
pub fn router(state: AppState) -> Router {
    let timeout = Duration::from_secs(state.config.server.request_timeout_secs);
    let body_limit = state.config.server.body_limit_bytes;
    let ids = CountingIds {
        prefix: Arc::from(format!("{:x}", chrono::Utc::now().timestamp()).as_str()),
        next: Arc::new(AtomicU64::new(1)),
    };

    let api = Router::new()
        .merge(gauges::router())
        .merge(readings::router())
        .merge(ratings::router())
        .merge(reaches::router())
        .merge(forecast::router())
        .merge(profile::router())
        .merge(verification::router())
        .merge(runs::router())
        .merge(hindcasts::router())
        .merge(calibration::router())
        .merge(exceedances::router())
        .merge(inflows::router())
        .merge(keys::router())
        .merge(cap::router())
        .merge(openapi::router())
        .route_layer(axum::middleware::from_fn(metrics::tag_route))
        .fallback(any(|OriginalUri(uri): OriginalUri| error::not_found(uri)));
    let limits = error::Limits {
        body_limit_bytes: body_limit,
        request_timeout_secs: state.config.server.request_timeout_secs,
    };

    let forecaster = state.forecaster.clone();
    Router::new()
        .merge(health::router())
        .merge(error::router())
        .merge(metrics::router())
        .route_layer(axum::middleware::from_fn(metrics::tag_route))
        .nest("/api", api)
        .fallback(assets::serve)
        .with_state(state)
        .layer(
            ServiceBuilder::new()
                .layer(SetRequestIdLayer::new(REQUEST_ID, ids))
                .layer(
                    TraceLayer::new_for_http().make_span_with(|req: &Request<_>| {
                        let id = req
                            .headers()
                            .get(REQUEST_ID)
                            .and_then(|v| v.to_str().ok())
                            .unwrap_or("-");
                        tracing::info_span!(
                            "request",
                            id = %id,
                            method = %req.method(),
                            path = %req.uri().path(),
                        )
                    }),
                )
                .layer(PropagateRequestIdLayer::new(REQUEST_ID))
                .layer(axum::middleware::from_fn_with_state(
                    limits,
                    error::problemize,
                ))
                .layer(axum::middleware::from_fn_with_state(
                    forecaster,
                    metrics::track,
                ))
                .layer(TimeoutLayer::with_status_code(
                    StatusCode::SERVICE_UNAVAILABLE,
                    timeout,
                ))
                .layer(DefaultBodyLimit::max(body_limit))
                .layer(SetResponseHeaderLayer::if_not_present(
                    header::X_CONTENT_TYPE_OPTIONS,
                    HeaderValue::from_static("nosniff"),
                ))
                .layer(SetResponseHeaderLayer::if_not_present(
                    header::CONTENT_SECURITY_POLICY,
                    HeaderValue::from_static(CSP),
                ))
                .layer(SetResponseHeaderLayer::if_not_present(
                    header::REFERRER_POLICY,
                    HeaderValue::from_static("no-referrer"),
                )),
        )
}

//! Authentication extractors. A handler declares what it needs in its
//! signature: `RequireRole<Admin>` (or `GaugeWriter`, `Forecasting`) for
//! writes, `ReadAccess` for reads (public unless `auth.public_reads` is
//! false). Keys come as `Authorization: Bearer rck_<id>_<secret>`; each
//! authenticated request takes a token from the key's rate-limit bucket.

use std::{marker::PhantomData, net::SocketAddr, time::Instant};

use axum::{
    extract::{ConnectInfo, FromRequestParts},
    http::{HeaderValue, StatusCode, header, request::Parts},
};

use super::{AppState, error::ApiError, error::Problem};
use crate::auth::{KeyInfo, Role, parse_token, secret_matches};

/// The authenticated caller.
#[derive(Debug, Clone)]
pub struct Caller(pub KeyInfo);

impl Caller {
    pub fn key_id(&self) -> &str {
        &self.0.id
    }

    /// Whether this key may post readings for `gauge`: admins for any,
    /// gauge keys for the gauges named on the key.
    pub fn may_post_readings(&self, gauge: &str) -> bool {
        match self.0.role {
            Role::Admin => true,
            Role::Gauge => self.0.gauges.iter().any(|g| g == gauge),
            Role::Forecaster => false,
        }
    }
}

/// A set of roles allowed to call an endpoint.
pub trait Permission {
    const ROLES: &'static [Role];
    const WHAT: &'static str;
}

/// Gauge and reach administration, key management.
pub struct Admin;
impl Permission for Admin {
    const ROLES: &'static [Role] = &[Role::Admin];
    const WHAT: &'static str = "the admin role";
}

/// Posting readings (further limited to the key's gauges).
pub struct GaugeWriter;
impl Permission for GaugeWriter {
    const ROLES: &'static [Role] = &[Role::Gauge, Role::Admin];
    const WHAT: &'static str = "the gauge or admin role";
}

/// Confirming readings, uploading inflow forecasts, triggering runs.
pub struct Forecasting;
impl Permission for Forecasting {
    const ROLES: &'static [Role] = &[Role::Forecaster, Role::Admin];
    const WHAT: &'static str = "the forecaster or admin role";
}

/// Extractor: an authenticated caller with one of `P::ROLES`.
pub struct RequireRole<P>(pub Caller, PhantomData<P>);

impl<P> RequireRole<P> {
    pub fn caller(&self) -> &Caller {
        &self.0
    }
}

/// Extractor: any valid key, whatever its role (401 without one).
pub struct Authenticated(pub Caller);

/// Extractor for reads: the caller if a key was given; a key is required
/// only when `auth.public_reads` is false.
pub struct ReadAccess(pub Option<Caller>);

fn unauthorized(detail: &str) -> ApiError {
    Problem::new(
        StatusCode::UNAUTHORIZED,
        "unauthorized",
        "Missing or invalid API key",
    )
    .detail(detail)
    .header(
        header::WWW_AUTHENTICATE,
        HeaderValue::from_static("Bearer realm=\"reachcast\""),
    )
    .into()
}

/// Checks the bearer key, if any, and charges its rate-limit bucket.
async fn authenticate(parts: &Parts, state: &AppState) -> Result<Option<Caller>, ApiError> {
    let Some(value) = parts.headers.get(header::AUTHORIZATION) else {
        return Ok(None);
    };
    let text = value
        .to_str()
        .map_err(|_| unauthorized("the Authorization header is not ASCII"))?;
    let token = text
        .strip_prefix("Bearer ")
        .or_else(|| text.strip_prefix("bearer "))
        .ok_or_else(|| unauthorized("use `Authorization: Bearer rck_<id>_<secret>`"))?;
    let (id, secret) = parse_token(token.trim())
        .ok_or_else(|| unauthorized("the key is not of the form rck_<id>_<secret>"))?;
    let stored = state.store.find_key(id).await?;
    let Some(stored) = stored else {
        return Err(unauthorized("unknown or revoked key"));
    };
    if !secret_matches(secret, &stored.secret_sha256) || stored.info.revoked_at.is_some() {
        return Err(unauthorized("unknown or revoked key"));
    }
    if let Err(wait) = state.limiter.check(&stored.info.id, Instant::now()) {
        let a = &state.config.auth;
        let who = format!(
            "this key may send {} requests per second (bursts of {})",
            a.rate_limit_per_sec, a.rate_limit_burst
        );
        return Err(rate_limited(&who, wait).into());
    }
    Ok(Some(Caller(stored.info)))
}

/// 429 with `Retry-After`, saying what the limit is.
fn rate_limited(who: &str, wait: std::time::Duration) -> Problem {
    let secs = wait.as_secs_f64().ceil().max(1.0) as u64;
    Problem::new(
        StatusCode::TOO_MANY_REQUESTS,
        "rate-limited",
        "Too many requests",
    )
    .detail(format!("{who}; retry after {secs} s"))
    .header(
        header::RETRY_AFTER,
        HeaderValue::from_str(&secs.to_string()).unwrap_or(HeaderValue::from_static("1")),
    )
}

/// The client's address for per-client limits: the connection's peer, or,
/// with `auth.trust_forwarded_for`, the last `X-Forwarded-For` entry (the
/// one the proxy in front appended; earlier ones are the client's word).
fn client_address(parts: &Parts, trust_forwarded_for: bool) -> String {
    let forwarded = trust_forwarded_for
        .then(|| parts.headers.get("x-forwarded-for")?.to_str().ok())
        .flatten()
        .and_then(|v| v.rsplit(',').next())
        .map(|v| v.trim().to_owned())
        .filter(|v| !v.is_empty());
    forwarded.unwrap_or_else(|| {
        parts
            .extensions
            .get::<ConnectInfo<SocketAddr>>()
            .map_or_else(|| "unknown".to_owned(), |c| c.0.ip().to_string())
    })
}

impl<P: Permission + Send + Sync> FromRequestParts<AppState> for RequireRole<P> {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        let caller = authenticate(parts, state)
            .await?
            .ok_or_else(|| unauthorized("this endpoint needs `Authorization: Bearer <key>`"))?;
        if !P::ROLES.contains(&caller.0.role) {
            return Err(
                Problem::new(StatusCode::FORBIDDEN, "forbidden", "Forbidden")
                    .detail(format!(
                        "key {} has the {} role; this needs {}",
                        caller.0.id,
                        caller.0.role,
                        P::WHAT
                    ))
                    .into(),
            );
        }
        Ok(RequireRole(caller, PhantomData))
    }
}

impl FromRequestParts<AppState> for ReadAccess {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        let caller = authenticate(parts, state).await?;
        let a = &state.config.auth;
        if caller.is_none() && !a.public_reads {
            return Err(unauthorized(
                "reads need a key on this server (auth.public_reads = false)",
            ));
        }
        if caller.is_none() {
            let addr = client_address(parts, a.trust_forwarded_for);
            if let Err(wait) = state.anonymous_limiter.check(&addr, Instant::now()) {
                let who = format!(
                    "reads without a key may send {} requests per second per client address \
                     (bursts of {}); a key has its own budget",
                    a.anonymous_rate_limit_per_sec, a.anonymous_rate_limit_burst
                );
                return Err(rate_limited(&who, wait).into());
            }
        }
        Ok(ReadAccess(caller))
    }
}

impl FromRequestParts<AppState> for Authenticated {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        authenticate(parts, state)
            .await?
            .map(Authenticated)
            .ok_or_else(|| unauthorized("this endpoint needs `Authorization: Bearer <key>`"))
    }
}

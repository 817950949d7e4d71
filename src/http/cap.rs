//! CAP 1.2 messages and their Atom index (see `crate::service::alerts`):
//!
//! - `GET /api/cap/feed.atom`: the current messages of every reach
//!   (`application/atom+xml`, `ETag`, `If-None-Match` → 304)
//! - `GET /api/reaches/{reach}/cap/feed.atom`: the same for one reach
//! - `GET /api/cap/{identifier}`: one message as issued
//!   (`application/cap+xml`); 404 problem if unknown
//!
//! Links in the feed start with `alerts.base_url`, or, when it is not set,
//! with `http://` and the request's `Host` header. Ids never depend on the
//! request (`alerts::atom_feed`).

use axum::{
    Router,
    body::Body,
    extract::{Path, State},
    http::{HeaderMap, HeaderValue, StatusCode, header},
    response::{IntoResponse, Response},
    routing::get,
};
use chrono::Utc;

use super::{
    AppState,
    auth::ReadAccess,
    conditional::{fnv, not_modified, with_etag},
    error::{ApiError, Problem},
};
use crate::{
    forecast::cap::{ATOM_MEDIA_TYPE, CAP_MEDIA_TYPE},
    service::alerts,
};

pub fn router() -> Router<AppState> {
    Router::new()
        .route("/cap/feed.atom", get(feed_all))
        .route("/cap/{identifier}", get(document))
        .route("/reaches/{reach}/cap/feed.atom", get(feed_reach))
}

/// `alerts.base_url`, else `http://` + a plausible `Host` header, else the
/// loopback name.
fn base_url(state: &AppState, headers: &HeaderMap) -> String {
    if let Some(b) = state.config.alerts.base_url() {
        return b.to_owned();
    }
    let host = headers
        .get(header::HOST)
        .and_then(|h| h.to_str().ok())
        .filter(|h| {
            !h.is_empty()
                && h.chars()
                    .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | ':' | '[' | ']'))
        })
        .unwrap_or("localhost");
    format!("http://{host}")
}

fn xml_response(body: String, media_type: &'static str, headers: &HeaderMap) -> Response {
    let etag = format!("\"{:016x}\"", fnv(body.as_bytes()));
    if not_modified(headers, &etag) {
        return with_etag(StatusCode::NOT_MODIFIED.into_response(), &etag);
    }
    let mut r = Response::new(Body::from(body));
    r.headers_mut()
        .insert(header::CONTENT_TYPE, HeaderValue::from_static(media_type));
    with_etag(r, &etag)
}

async fn feed(
    state: &AppState,
    headers: &HeaderMap,
    reach: Option<(&str, &str)>,
) -> Result<Response, ApiError> {
    let current = state
        .store
        .current_cap_messages(reach.map(|(id, _)| id), Utc::now())
        .await?;
    // The database's identity and creation: for the Atom ids, and as the
    // feed's `updated` when nothing was ever issued.
    let meta = state.store.service_meta().await?;
    let (path, title) = match reach {
        Some((id, name)) => (
            format!("/api/reaches/{id}/cap/feed.atom"),
            format!("reachcast CAP messages: {name}"),
        ),
        None => (
            "/api/cap/feed.atom".to_owned(),
            "reachcast CAP messages".to_owned(),
        ),
    };
    let body = alerts::atom_feed(
        &base_url(state, headers),
        &state.config.alerts,
        &meta,
        &path,
        &title,
        &current,
    )
    .map_err(|e| ApiError::Internal(e.into()))?;
    Ok(xml_response(body, ATOM_MEDIA_TYPE, headers))
}

async fn feed_all(
    _: ReadAccess,
    State(state): State<AppState>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    feed(&state, &headers, None).await
}

async fn feed_reach(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let reach = super::reaches::find_reach(&state, &id).await?;
    feed(&state, &headers, Some((&id, &reach.spec.name))).await
}

async fn document(
    _: ReadAccess,
    State(state): State<AppState>,
    Path(identifier): Path<String>,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let doc = state
        .store
        .cap_document(&identifier)
        .await?
        .ok_or_else(|| {
            Problem::missing(
                "identifier",
                format!("no CAP message has the identifier `{identifier}`"),
            )
        })?;
    Ok(xml_response(doc, CAP_MEDIA_TYPE, &headers))
}

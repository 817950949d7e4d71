//! `GET /api/openapi.json`: the OpenAPI 3.1 description of the whole HTTP
//! API, written by hand in `openapi.json` beside this file and embedded in
//! the binary. `tests/it/openapi.rs` keeps it honest: every route is
//! described, every described operation is routed, and real answers match
//! it.

use axum::{
    Router,
    http::{HeaderValue, header},
    response::{IntoResponse, Response},
    routing::get,
};

use super::AppState;

/// The description, as served.
pub const DOCUMENT: &str = include_str!("openapi.json");

pub fn router() -> Router<AppState> {
    Router::new().route("/openapi.json", get(document))
}

async fn document() -> Response {
    (
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/json"),
        )],
        DOCUMENT,
    )
        .into_response()
}

//! The caller's own key: `GET /api/keys/self` answers the name and role of
//! the key sent (a 401 problem for a missing, unknown or revoked one), so a
//! client can check a key when it is entered instead of at the first write.

use axum::{Json, Router, response::IntoResponse, routing::get};

use super::{AppState, auth::Authenticated};

pub fn router() -> Router<AppState> {
    Router::new().route("/keys/self", get(own_key))
}

async fn own_key(Authenticated(caller): Authenticated) -> impl IntoResponse {
    let k = caller.0;
    Json(serde_json::json!({
        "id": k.id,
        "name": k.name,
        "role": k.role.as_str(),
        "gauges": k.gauges,
    }))
}

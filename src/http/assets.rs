//! The dashboard's static files, embedded in the binary at build time so
//! the release binary runs from any folder and on a closed network.
//!
//! In debug builds rust-embed reads the files from `static/` on disk, so
//! editing the dashboard needs no rebuild; release builds carry them inside.

use axum::{
    body::Body,
    http::{HeaderMap, HeaderValue, StatusCode, Uri, header},
    response::{IntoResponse, Response},
};
use rust_embed::Embed;

#[derive(Embed)]
#[folder = "static/"]
struct Assets;

/// Serves `/` as `index.html` and any other path from the embedded folder,
/// with a strong `ETag` from the file's hash so browsers revalidate cheaply.
pub async fn serve(uri: Uri, headers: HeaderMap) -> Response {
    let path = uri.path().trim_start_matches('/');
    let path = if path.is_empty() { "index.html" } else { path };
    let Some(file) = Assets::get(path) else {
        return super::error::not_found(uri).await.into_response();
    };
    let hash = file.metadata.sha256_hash();
    let etag = format!(
        "\"{}\"",
        hash.iter()
            .take(16)
            .map(|b| format!("{b:02x}"))
            .collect::<String>()
    );
    let matches = headers
        .get(header::IF_NONE_MATCH)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.split(',').any(|t| t.trim() == etag || t.trim() == "*"));
    let mut builder = Response::builder()
        .header(header::ETAG, &etag)
        .header(header::CACHE_CONTROL, "no-cache");
    if matches {
        builder = builder.status(StatusCode::NOT_MODIFIED);
        return builder
            .body(Body::empty())
            .unwrap_or_else(|_| StatusCode::INTERNAL_SERVER_ERROR.into_response());
    }
    let mime = mime_guess::from_path(path).first_or_octet_stream();
    let content_type = HeaderValue::from_str(mime.as_ref())
        .unwrap_or_else(|_| HeaderValue::from_static("application/octet-stream"));
    builder
        .header(header::CONTENT_TYPE, content_type)
        .body(Body::from(file.data.into_owned()))
        .unwrap_or_else(|_| StatusCode::INTERNAL_SERVER_ERROR.into_response())
}

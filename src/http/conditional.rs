//! Conditional requests (RFC 9110 §13): `ETag` validators and
//! `If-None-Match`, shared by every resource that polls cheaply.

use axum::{
    http::{HeaderMap, HeaderValue, header},
    response::Response,
};

/// The request's `If-None-Match` matches `etag` (weak comparison,
/// RFC 9110 §13.1.2): the client's copy is current.
pub fn not_modified(headers: &HeaderMap, etag: &str) -> bool {
    headers
        .get(header::IF_NONE_MATCH)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| {
            v.split(',').any(|t| {
                let t = t.trim();
                t == "*" || t.trim_start_matches("W/") == etag.trim_start_matches("W/")
            })
        })
}

/// Adds the validator, and `Cache-Control: no-cache` so that a cache
/// revalidates before reuse.
pub fn with_etag(mut r: Response, etag: &str) -> Response {
    if let Ok(v) = HeaderValue::from_str(etag) {
        r.headers_mut().insert(header::ETAG, v);
    }
    r.headers_mut()
        .insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    r
}

/// FNV-1a 64 of the body: a content hash for a strong `ETag`.
pub fn fnv(bytes: &[u8]) -> u64 {
    bytes.iter().fold(0xcbf2_9ce4_8422_2325, |h, b| {
        (h ^ u64::from(*b)).wrapping_mul(0x0100_0000_01b3)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// RFC 9110 §13.1.2: `If-None-Match` uses the weak comparison, and `*`
    /// matches any current representation.
    #[test]
    fn weak_comparison_and_star() {
        let mut h = HeaderMap::new();
        h.insert(
            header::IF_NONE_MATCH,
            HeaderValue::from_static("\"a\", W/\"b\""),
        );
        assert!(not_modified(&h, "\"b\""));
        assert!(not_modified(&h, "W/\"a\""));
        assert!(!not_modified(&h, "\"c\""));
        h.insert(header::IF_NONE_MATCH, HeaderValue::from_static("*"));
        assert!(not_modified(&h, "\"anything\""));
    }

    /// Published FNV-1a 64 test vector: FNV-1a("a") = af63dc4c8601ec8c.
    #[test]
    fn fnv_test_vector() {
        assert_eq!(fnv(b"a"), 0xaf63_dc4c_8601_ec8c);
    }
}

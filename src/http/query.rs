//! Query parameters, parsed one way everywhere: [`Params<T>`] deserializes
//! the query string into a typed struct with serde (`serde_urlencoded`),
//! and an unknown, repeated or malformed parameter is refused with the
//! app's own problem document: 400, type `/problems/invalid-parameter`,
//! the parameter named in `field`. Checks serde cannot make (a range that
//! comes from the configuration) use [`bad_parameter`] for the same answer.
//!
//! ```
//! use reachcast::http::query::{Format, parse};
//!
//! #[derive(serde::Deserialize)]
//! #[serde(deny_unknown_fields)]
//! struct Page {
//!     limit: Option<u32>,
//!     format: Option<Format>,
//! }
//! let page: Page = parse("limit=20&format=csv").unwrap();
//! assert_eq!((page.limit, page.format), (Some(20), Some(Format::Csv)));
//! let refused = parse::<Page>("limit=twenty").err().unwrap();
//! assert_eq!((refused.status, refused.field.as_deref()), (400, Some("limit")));
//! ```
//!
//! A struct for `Params` should `deny_unknown_fields` and make every member
//! an `Option` (or `#[serde(default)]`): parameters are optional.

use axum::{
    extract::FromRequestParts,
    http::{HeaderMap, HeaderValue, StatusCode, header, request::Parts},
};
use serde::{Deserialize, Deserializer, de::DeserializeOwned};

use super::error::Problem;
use crate::gauge::readings::parse_time;

/// Extractor: the query string as `T`; its rejection is a 400 problem
/// naming the parameter.
#[derive(Debug, Clone, Copy, Default)]
pub struct Params<T>(pub T);

impl<T: DeserializeOwned, S: Send + Sync> FromRequestParts<S> for Params<T> {
    type Rejection = Problem;

    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Self, Problem> {
        parse(parts.uri.query().unwrap_or_default()).map(Params)
    }
}

/// 400 for the query parameter `name`.
pub fn bad_parameter(name: &str, detail: impl Into<String>) -> Problem {
    Problem::new(
        StatusCode::BAD_REQUEST,
        "invalid-parameter",
        "Invalid query parameter",
    )
    .field(name)
    .detail(format!("{name}: {}", detail.into()))
}

/// Parses a query string (without the `?`) into `T`.
pub fn parse<T: DeserializeOwned>(query: &str) -> Result<T, Problem> {
    let de = serde_urlencoded::Deserializer::new(form_urlencoded::parse(query.as_bytes()));
    serde_path_to_error::deserialize(de).map_err(|e| {
        let path = e.path().to_string();
        let message = e.into_inner().to_string();
        // serde names an unknown or repeated parameter only in its message
        // (the path stops above it): "unknown field `colour`, expected …".
        let name = if path == "." {
            backticked(&message).unwrap_or_default().to_owned()
        } else {
            path
        };
        bad_parameter(&name, message)
    })
}

/// The first `quoted` word of a serde message.
fn backticked(message: &str) -> Option<&str> {
    message.split('`').nth(1)
}

/// A `format` parameter: the representation asked for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    Json,
    Csv,
}

impl Format {
    /// The representation to send: the `format` parameter if given, else
    /// CSV when the `Accept` header asks for `text/csv`, else JSON. An
    /// answer chosen this way carries [`vary_accept`].
    pub fn choose(param: Option<Format>, headers: &HeaderMap) -> Format {
        param.unwrap_or_else(|| {
            let csv = headers
                .get(header::ACCEPT)
                .and_then(|v| v.to_str().ok())
                .is_some_and(|a| a.contains("text/csv"));
            if csv { Format::Csv } else { Format::Json }
        })
    }
}

/// `Vary: Accept` (RFC 9110 §12.5.5): for every answer whose
/// representation the `Accept` header may choose, so caches keep one per
/// `Accept`.
pub fn vary_accept(headers: &mut HeaderMap) {
    headers.insert(header::VARY, HeaderValue::from_static("accept"));
}

/// A time parameter: RFC 3339 with its offset (`Z` or `±hh:mm`), as Unix
/// milliseconds. In a query `+` means a space, so an offset such as
/// `+01:00` is sent as `%2B01:00`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Time(pub i64);

impl<'de> Deserialize<'de> for Time {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        parse_time(&text)
            .map(Time)
            .map_err(serde::de::Error::custom)
    }
}

/// The media type of a request's `Content-Type`, lower-cased and without
/// parameters; `absent` when there is none.
pub fn media_type(headers: &HeaderMap, absent: &str) -> String {
    headers
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .map(|v| {
            v.split(';')
                .next()
                .unwrap_or("")
                .trim()
                .to_ascii_lowercase()
        })
        .unwrap_or_else(|| absent.to_owned())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(deny_unknown_fields)]
    struct Q {
        limit: Option<i64>,
        format: Option<Format>,
        from: Option<Time>,
    }

    fn refused(query: &str) -> Problem {
        parse::<Q>(query).expect_err(query)
    }

    #[test]
    fn typed_values_and_defaults() {
        let q: Q = parse("").expect("empty");
        assert_eq!(
            q,
            Q {
                limit: None,
                format: None,
                from: None
            }
        );
        // RFC 3986 §2.1 percent-encoding: %2B is `+`; RFC 3339 §5.8
        // example 1996-12-19T16:39:57-08:00 = 851042397 s after the epoch
        // (1996-12-20T00:39:57Z, computed by hand: 9484 days × 86400 +
        // 2397 s).
        let q: Q = parse("limit=5&format=json&from=1996-12-20T01:39:57%2B01:00").expect("ok");
        assert_eq!(q.limit, Some(5));
        assert_eq!(q.format, Some(Format::Json));
        assert_eq!(q.from, Some(Time(851_042_397_000)));
    }

    /// Every refusal is the same problem: 400, invalid-parameter, naming
    /// the parameter.
    #[test]
    fn each_refusal_names_the_parameter() {
        for (query, name, words) in [
            ("limit=abc", "limit", "invalid digit"),
            ("limit=", "limit", "empty"),
            ("format=xml", "format", "unknown variant"),
            ("from=2026-03-01", "from", "RFC 3339"),
            ("from=2026-03-01T04:15:00", "from", "no UTC offset"),
            ("colour=red", "colour", "unknown field"),
            ("limit=1&limit=2", "limit", "duplicate"),
        ] {
            let p = refused(query);
            assert_eq!(p.status, 400, "{query}");
            assert_eq!(p.kind, "/problems/invalid-parameter", "{query}");
            assert_eq!(p.field.as_deref(), Some(name), "{query}: {p:?}");
            let detail = p.detail.as_deref().unwrap_or_default();
            assert!(detail.contains(words), "{query}: {detail}");
        }
    }

    #[test]
    fn accept_chooses_only_without_a_parameter() {
        let mut headers = HeaderMap::new();
        assert_eq!(Format::choose(None, &headers), Format::Json);
        headers.insert(
            header::ACCEPT,
            HeaderValue::from_static("text/csv, application/json;q=0.5"),
        );
        assert_eq!(Format::choose(None, &headers), Format::Csv);
        assert_eq!(Format::choose(Some(Format::Json), &headers), Format::Json);
    }
}

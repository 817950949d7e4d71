//! The one extractor for query parameters: `Query<T>` parses the query
//! string into a typed struct (serde, `application/x-www-form-urlencoded`
//! rules, so `+` and percent-escapes decode), and refuses a bad or unknown
//! parameter with the app's own problem document: status 400, type
//! `invalid-query`, `field` naming the parameter. Every handler that reads
//! parameters declares `Query<Params>`; none parses the query by hand.

use axum::{extract::FromRequestParts, http::StatusCode, http::request::Parts};
use serde::de::DeserializeOwned;

use super::error::{ApiError, Problem};

/// Typed query parameters (use `#[serde(deny_unknown_fields)]` on `T`).
#[derive(Debug, Clone, Copy, Default)]
pub struct Query<T>(pub T);

/// The problem for a bad query parameter.
pub fn bad_parameter(field: &str, detail: impl Into<String>) -> Problem {
    Problem::new(
        StatusCode::BAD_REQUEST,
        "invalid-query",
        "Invalid query parameter",
    )
    .field(field)
    .detail(detail)
}

/// Parses `query` (without the `?`) into `T`, naming the parameter at
/// fault.
pub fn parse<T: DeserializeOwned>(query: &str) -> Result<T, Problem> {
    let de = serde_urlencoded::Deserializer::new(form_urlencoded::parse(query.as_bytes()));
    serde_path_to_error::deserialize(de).map_err(|e| {
        let path = e.path().to_string();
        let message = e.inner().to_string();
        // An unknown parameter is reported at the top level; its name is in
        // serde's message (`unknown field `x`, expected …`).
        let field = if path == "." {
            message
                .split('`')
                .nth(1)
                .map_or_else(|| "query".to_owned(), str::to_owned)
        } else {
            path
        };
        bad_parameter(&field, message)
    })
}

impl<T, S> FromRequestParts<S> for Query<T>
where
    T: DeserializeOwned,
    S: Send + Sync,
{
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Self, Self::Rejection> {
        Ok(Query(parse(parts.uri.query().unwrap_or(""))?))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(deny_unknown_fields)]
    struct P {
        limit: Option<i64>,
        #[serde(default)]
        wait: bool,
        reason: Option<String>,
    }

    /// WHATWG URL Standard, application/x-www-form-urlencoded parsing: `+`
    /// is a space and `%XX` a byte.
    #[test]
    fn decodes_form_encoding() {
        let p: P = parse("reason=storm+update%2C+v2&wait=true").unwrap();
        assert_eq!(p.reason.as_deref(), Some("storm update, v2"));
        assert!(p.wait);
        assert_eq!(
            parse::<P>("").unwrap(),
            P {
                limit: None,
                wait: false,
                reason: None
            }
        );
    }

    #[test]
    fn names_the_parameter_at_fault() {
        let e = parse::<P>("limit=ten").unwrap_err();
        assert_eq!((e.status, e.field.as_deref()), (400, Some("limit")));
        let e = parse::<P>("colour=red").unwrap_err();
        assert_eq!(e.field.as_deref(), Some("colour"));
        let e = parse::<P>("wait=maybe").unwrap_err();
        assert_eq!(e.field.as_deref(), Some("wait"));
    }
}

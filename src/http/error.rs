//! One error type for the HTTP layer, rendered as RFC 9457 problem details
//! (`application/problem+json`).
//!
//! Internal and database errors are logged with their cause; the client gets
//! a short, safe message. Validation errors name the field (and the row, for
//! batches) in extension members so a client can point at the bad input.
//!
//! Every problem has a `detail`. Every `type` (`/problems/{slug}`) is in
//! [`PROBLEM_TYPES`] and resolves to a short HTML page that explains it
//! (RFC 9457 §3.1.1), served by [`router`].

use axum::{
    Router,
    extract::{OriginalUri, Path, Request, State},
    http::{HeaderName, HeaderValue, Method, StatusCode, Uri, header},
    middleware::Next,
    response::{IntoResponse, Response},
    routing::get,
};
use serde::Serialize;

use super::AppState;
use crate::store::StoreError;

/// Media type of RFC 9457 problem details.
pub const PROBLEM_JSON: &str = "application/problem+json";

/// An RFC 9457 problem details document.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Problem {
    /// A URI reference that identifies the problem type. We use relative
    /// references under `/problems/` that the API documentation explains.
    #[serde(rename = "type")]
    pub kind: String,
    pub title: String,
    pub status: u16,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub detail: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub instance: Option<String>,
    /// Extension: the input field at fault, as a JSON-pointer-like path.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub field: Option<String>,
    /// Extension: the 1-based row of a batch or CSV body at fault.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub row: Option<usize>,
    /// Further extension members (RFC 9457 §3.2), e.g. a batch report.
    #[serde(flatten)]
    pub extensions: serde_json::Map<String, serde_json::Value>,
    /// Response headers to send with the problem (e.g. `Retry-After`).
    #[serde(skip)]
    pub headers: Vec<(HeaderName, HeaderValue)>,
}

impl Problem {
    pub fn new(status: StatusCode, kind: &str, title: &str) -> Self {
        Self {
            kind: format!("/problems/{kind}"),
            title: title.to_owned(),
            status: status.as_u16(),
            detail: None,
            instance: None,
            field: None,
            row: None,
            extensions: serde_json::Map::new(),
            headers: Vec::new(),
        }
    }

    /// Adds an extension member.
    pub fn with(mut self, name: &str, value: impl Serialize) -> Self {
        if let Ok(v) = serde_json::to_value(value) {
            self.extensions.insert(name.to_owned(), v);
        }
        self
    }

    /// Adds a response header.
    pub fn header(mut self, name: HeaderName, value: HeaderValue) -> Self {
        self.headers.push((name, value));
        self
    }

    /// 400 for a body that is not well-formed JSON or CSV.
    pub fn malformed(format: &str, detail: impl Into<String>) -> Self {
        Problem::new(
            StatusCode::BAD_REQUEST,
            &format!("malformed-{format}"),
            &format!("Malformed {} body", format.to_uppercase()),
        )
        .detail(detail)
    }

    /// 404 for a thing named by `field` that does not exist. One title for
    /// the type, whatever is missing (RFC 9457 §3.1.3: the title does not
    /// change from occurrence to occurrence); `detail` says what.
    pub fn missing(field: &str, detail: impl Into<String>) -> Self {
        Problem::new(StatusCode::NOT_FOUND, "not-found", "Not found")
            .field(field)
            .detail(detail)
    }

    /// 415 for a body of a media type the endpoint does not read; it reads
    /// JSON and CSV.
    pub fn unsupported_media(other: &str) -> Self {
        Problem::new(
            StatusCode::UNSUPPORTED_MEDIA_TYPE,
            "unsupported-media-type",
            "Unsupported media type",
        )
        .detail(format!(
            "Content-Type `{other}` is not accepted here; send application/json or text/csv"
        ))
        .field("Content-Type")
    }

    /// 422 for a well-formed body with a bad value in `field`.
    pub fn invalid(field: impl Into<String>, detail: impl Into<String>) -> Self {
        Problem::new(
            StatusCode::UNPROCESSABLE_ENTITY,
            "invalid-value",
            "Invalid value",
        )
        .field(field)
        .detail(detail)
    }

    /// 409 for a request that is valid on its own but does not fit what is
    /// stored now: it names a tributary, point or reach the service does not
    /// hold, or needs stored data that is not there. 422 stays for what is
    /// wrong with the request whatever is stored, so a client can tell "fix
    /// the request" from "fix (or wait for) the stored configuration".
    pub fn conflict(field: impl Into<String>, detail: impl Into<String>) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "state-conflict",
            "Does not fit what is stored",
        )
        .field(field)
        .detail(detail)
    }

    pub fn detail(mut self, detail: impl Into<String>) -> Self {
        self.detail = Some(detail.into());
        self
    }

    pub fn field(mut self, field: impl Into<String>) -> Self {
        self.field = Some(field.into());
        self
    }

    pub fn row(mut self, row: usize) -> Self {
        self.row = Some(row);
        self
    }

    pub fn instance(mut self, instance: impl Into<String>) -> Self {
        self.instance = Some(instance.into());
        self
    }
}

impl Problem {
    /// The problem as a whole HTTP/1.1 response that closes the connection,
    /// for answers written on the socket below the router (a connection
    /// over the cap, a head hyper could not read); `extra_headers` are
    /// whole `name: value\r\n` lines.
    pub fn to_closing_http1(&self, extra_headers: &str) -> Vec<u8> {
        let body = serde_json::to_string(self).unwrap_or_default();
        let status = StatusCode::from_u16(self.status).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR);
        let mut out = format!(
            "HTTP/1.1 {} {}\r\ncontent-type: {PROBLEM_JSON}\r\ncontent-length: {}\r\n\
             {extra_headers}connection: close\r\n\r\n",
            status.as_u16(),
            status.canonical_reason().unwrap_or(""),
            body.len()
        )
        .into_bytes();
        out.extend_from_slice(body.as_bytes());
        out
    }
}

impl IntoResponse for Problem {
    fn into_response(mut self) -> Response {
        if self.detail.is_none() {
            // Every problem says something beyond its title: at worst what
            // its type's page says.
            let slug = self.kind.trim_start_matches("/problems/");
            self.detail = Some(
                problem_type(slug).map_or_else(|| self.title.clone(), |t| t.explanation.to_owned()),
            );
        }
        let status = StatusCode::from_u16(self.status).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR);
        let mut response = (status, axum::Json(&self)).into_response();
        let headers = response.headers_mut();
        headers.insert(header::CONTENT_TYPE, HeaderValue::from_static(PROBLEM_JSON));
        for (name, value) in self.headers {
            headers.insert(name, value);
        }
        response
    }
}

/// What a handler can fail with.
#[derive(Debug, thiserror::Error)]
pub enum ApiError {
    /// A problem to show the client as it is (validation, not found, ...).
    #[error("{}", .0.title)]
    Problem(Problem),
    /// The database failed; logged, reported as 503 so clients retry.
    #[error(transparent)]
    Store(#[from] StoreError),
    /// Anything else unexpected; logged, reported as 500.
    #[error(transparent)]
    Internal(#[from] anyhow::Error),
}

impl From<Problem> for ApiError {
    fn from(p: Problem) -> Self {
        Self::Problem(p)
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        match self {
            ApiError::Problem(p) => p.into_response(),
            ApiError::Store(e) => {
                tracing::error!(error = %e, "storage failure while handling request");
                Problem::new(
                    StatusCode::SERVICE_UNAVAILABLE,
                    "storage-unavailable",
                    "Storage unavailable",
                )
                .detail("The database could not complete the request; nothing was changed by it. Retry later.")
                .into_response()
            }
            ApiError::Internal(e) => {
                tracing::error!(error = ?e, "internal error while handling request");
                Problem::new(
                    StatusCode::INTERNAL_SERVER_ERROR,
                    "internal",
                    "Internal error",
                )
                .detail("An unexpected error occurred; it has been logged.")
                .into_response()
            }
        }
    }
}

/// 404 for an unknown path, in problem form. Inside the nested `/api`
/// router the request's URI has lost its prefix: the API's fallback passes
/// the `OriginalUri`, so `instance` is the path the client asked for.
pub async fn not_found(uri: Uri) -> Problem {
    Problem::new(StatusCode::NOT_FOUND, "not-found", "Not found")
        .detail(format!("No resource at {}", uri.path()))
        .instance(uri.path().to_owned())
}

/// Parses a JSON body into `T`, naming the field at fault: syntax errors
/// are 400 with line and column, type and value errors 422 with the path.
pub fn parse_json<T: serde::de::DeserializeOwned>(body: &[u8]) -> Result<T, Problem> {
    let mut de = serde_json::Deserializer::from_slice(body);
    let parsed: Result<T, _> = serde_path_to_error::deserialize(&mut de);
    match parsed {
        Ok(v) => {
            de.end().map_err(json_syntax)?;
            Ok(v)
        }
        Err(e) => {
            let path = e.path().to_string();
            let inner = e.into_inner();
            if inner.is_syntax() || inner.is_eof() {
                Err(json_syntax(inner))
            } else {
                let message = inner.to_string();
                Err(Problem::invalid(member_path(&path, &message), message))
            }
        }
    }
}

/// The path of the member a serde error is about. serde names an unknown
/// or repeated member only in its message ("duplicate field `time`"), its
/// path stopping at the object that holds it ("." at the top, or
/// `readings[3]`): the member's name is appended so that `field` names it.
pub fn member_path(path: &str, message: &str) -> String {
    let about_member =
        message.starts_with("duplicate field") || message.starts_with("unknown field");
    match (about_member, message.split('`').nth(1)) {
        (true, Some(name)) if path == "." => name.to_owned(),
        (true, Some(name)) if !path.ends_with(name) => format!("{path}.{name}"),
        _ => path.to_owned(),
    }
}

fn json_syntax(e: serde_json::Error) -> Problem {
    Problem::malformed(
        "json",
        format!(
            "not valid JSON at line {} column {}: {e}",
            e.line(),
            e.column()
        ),
    )
    .with("line", e.line())
    .with("column", e.column())
}

/// What `problemize` needs to explain the errors of the layers around the
/// handlers: the limits they enforce.
#[derive(Debug, Clone, Copy)]
pub struct Limits {
    /// `server.body_limit_bytes`.
    pub body_limit_bytes: usize,
    /// `server.request_timeout_secs`.
    pub request_timeout_secs: u64,
}

/// The problem type `problemize` gives an error answer that is not already
/// a problem document, by status.
pub fn generic_kind(status: StatusCode) -> &'static str {
    match status {
        StatusCode::NOT_FOUND => "not-found",
        StatusCode::PAYLOAD_TOO_LARGE => "body-too-large",
        StatusCode::UNSUPPORTED_MEDIA_TYPE => "unsupported-media-type",
        StatusCode::METHOD_NOT_ALLOWED => "method-not-allowed",
        StatusCode::SERVICE_UNAVAILABLE => "unavailable",
        StatusCode::REQUEST_TIMEOUT => "timeout",
        s if s.is_server_error() => "internal",
        _ => "bad-request",
    }
}

/// Middleware: turns any error answer that is not already a problem
/// document (axum's own rejections, 405, the body limit's 413, the
/// timeout's 503) into one, with a `detail` and the request's path as
/// `instance`, so every error the API gives is RFC 9457.
pub async fn problemize(State(limits): State<Limits>, request: Request, next: Next) -> Response {
    let method = request.method().clone();
    // The path the client sent, whatever router this runs in.
    let path = request
        .extensions()
        .get::<OriginalUri>()
        .map_or_else(|| request.uri().path(), |o| o.path())
        .to_owned();
    let response = next.run(request).await;
    as_problem(response, &method, &path, limits).await
}

/// The work of [`problemize`], for one answer to `method path`.
pub async fn as_problem(
    response: Response,
    method: &Method,
    path: &str,
    limits: Limits,
) -> Response {
    let status = response.status();
    let is_problem = response
        .headers()
        .get(header::CONTENT_TYPE)
        .is_some_and(|v| v.as_bytes().starts_with(PROBLEM_JSON.as_bytes()));
    if !(status.is_client_error() || status.is_server_error()) || is_problem {
        return response;
    }
    let (parts, body) = response.into_parts();
    let text = axum::body::to_bytes(body, 4096)
        .await
        .map(|b| String::from_utf8_lossy(&b).trim().to_owned())
        .unwrap_or_default();
    // axum's method router adds `Allow` after the route's layers have run,
    // so it is usually not here yet; the answer carries it all the same.
    let allow = parts
        .headers
        .get(header::ALLOW)
        .and_then(|v| v.to_str().ok())
        .map_or_else(
            || "the Allow header lists the methods it takes".to_owned(),
            |a| format!("it allows {a}"),
        );
    let detail = match status {
        StatusCode::METHOD_NOT_ALLOWED => format!("{method} is not allowed on {path}; {allow}"),
        StatusCode::PAYLOAD_TOO_LARGE => format!(
            "the request body is larger than the {} bytes this server accepts (server.body_limit_bytes)",
            limits.body_limit_bytes
        ),
        StatusCode::SERVICE_UNAVAILABLE => format!(
            "the request did not finish within {} s (server.request_timeout_secs) and was abandoned; retry later",
            limits.request_timeout_secs
        ),
        s if s.is_server_error() => "An unexpected error occurred; it has been logged.".to_owned(),
        _ if !text.is_empty() => text,
        s => format!("{method} {path} was refused ({s})"),
    };
    let kind = generic_kind(status);
    let title = status.canonical_reason().unwrap_or("Error");
    let mut out = Problem::new(status, kind, title)
        .detail(detail)
        .instance(path)
        .into_response();
    for (name, value) in &parts.headers {
        if name != header::CONTENT_TYPE && name != header::CONTENT_LENGTH {
            out.headers_mut().insert(name.clone(), value.clone());
        }
    }
    out
}

/// A problem type: the slug of its URI `/problems/{slug}`, its title and
/// what its page says.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ProblemType {
    pub slug: &'static str,
    pub title: &'static str,
    pub explanation: &'static str,
}

const fn pt(slug: &'static str, title: &'static str, explanation: &'static str) -> ProblemType {
    ProblemType {
        slug,
        title,
        explanation,
    }
}

/// Every problem type the service emits (`tests/it/foundation.rs` checks the
/// list against the source both ways).
pub const PROBLEM_TYPES: &[ProblemType] = &[
    pt(
        "bad-request",
        "Bad request",
        "The request could not be read as sent, for example a path segment of the wrong form. The detail says what was wrong; the same request sent again gets the same answer.",
    ),
    pt(
        "header-too-large",
        "Request header too large",
        "The request line and headers together are longer than server.max_header_bytes. The answer is 431 and the connection is closed; send a shorter request (a long query, many or large cookies or custom headers are the usual cause).",
    ),
    pt(
        "uri-too-long",
        "Request target too long",
        "The request target (path and query) is longer than the server reads. The answer is 414 and the connection is closed.",
    ),
    pt(
        "malformed-json",
        "Malformed JSON body",
        "The body is not well-formed JSON (RFC 8259). The members line and column point at the first error. Nothing in the body was stored.",
    ),
    pt(
        "malformed-csv",
        "Malformed CSV body",
        "The body is not CSV as RFC 4180 defines it (for example a record with another number of fields than the header row), or the header row names a column this endpoint does not take. The members line and row (data records counted from 1) point at the error; field names an unknown column. Nothing in the body was stored.",
    ),
    pt(
        "malformed-body",
        "Malformed body",
        "The body could not be read as text: it is not UTF-8. Nothing was stored.",
    ),
    pt(
        "invalid-parameter",
        "Invalid query parameter",
        "A query parameter is unknown, repeated, or has a value of the wrong form or outside its range. The member field names the parameter and the detail says what is accepted. The answer is 400.",
    ),
    pt(
        "invalid-value",
        "Invalid value",
        "The body is well-formed but a value in it is not acceptable whatever is stored (a member missing, unknown or of the wrong type, a number out of range, values that contradict each other), or a path segment such as a time or an id is not of the right form. The member field names the value (a path for nested members). Nothing was stored.",
    ),
    pt(
        "state-conflict",
        "Does not fit what is stored",
        "The request is valid on its own but does not fit what the service holds now: it names a tributary, point, channel or reach that is not there, or it needs stored data that is missing (for example gaugings to fit a rating to). The member field names the value and the detail says what is stored. Nothing was changed; change the request, or the stored configuration first. The answer is 409.",
    ),
    pt(
        "invalid-readings",
        "No reading was accepted",
        "Every reading of the batch was rejected, so nothing was stored. The member errors lists each rejected row as row, field and message (rows counted from 1); field and row at the top repeat the first. A batch with at least one stored or duplicate reading answers 200 with the same list instead.",
    ),
    pt(
        "unauthorized",
        "Missing or invalid API key",
        "This needs an API key and the request had none, or the key is malformed, unknown or revoked. Send Authorization: Bearer rck_<id>_<secret>; keys are made with the command reachcast keys create.",
    ),
    pt(
        "forbidden",
        "Forbidden",
        "The key is valid but its role does not allow this, or a gauge key asked for a gauge not named on it. The detail says what is needed.",
    ),
    pt(
        "not-found",
        "Not found",
        "There is nothing at this path: no such resource, or an id that names nothing (the member field names the path segment).",
    ),
    pt(
        "unknown-gauge",
        "Unknown gauge",
        "No gauge has this id. An admin creates gauges with PUT /api/gauges/{gauge}.",
    ),
    pt(
        "unknown-reading",
        "No such reading",
        "The gauge has no reading at this time. A reading is identified by its instant: 04:15+01:00 and 03:15Z are the same reading.",
    ),
    pt(
        "method-not-allowed",
        "Method not allowed",
        "The resource exists but does not take this method. The Allow header lists the methods it takes.",
    ),
    pt(
        "timeout",
        "Request timeout",
        "The server stopped waiting for the request to arrive in full. Send it again.",
    ),
    pt(
        "not-suspect",
        "Reading is not flagged",
        "Nothing flagged this reading suspect (neither its sender nor the rate check), so it feeds forecasts already and there is nothing to confirm.",
    ),
    pt(
        "body-too-large",
        "Request body too large",
        "The request body is larger than this server accepts (server.body_limit_bytes). Send fewer rows per request.",
    ),
    pt(
        "too-many-readings",
        "Too many readings",
        "The batch has more readings than one request may carry (ingest.max_rows_per_request). Split it into smaller batches.",
    ),
    pt(
        "unsupported-media-type",
        "Unsupported media type",
        "The body's Content-Type is not one this endpoint reads. Readings and inflow uploads take application/json or text/csv; other writes take application/json.",
    ),
    pt(
        "rate-limited",
        "Too many requests",
        "This key has used its request budget (auth.rate_limit_per_sec, in bursts of auth.rate_limit_burst). Wait the number of seconds in the Retry-After header, then retry.",
    ),
    pt(
        "internal",
        "Internal error",
        "The server failed in a way it did not expect. The error is logged with the request's x-request-id; quote that id when reporting it.",
    ),
    pt(
        "storage-unavailable",
        "Storage unavailable",
        "The database could not complete the request, and nothing the request asked for was changed. Retry later; GET /ready tells whether the database answers.",
    ),
    pt(
        "not-ready",
        "Service not ready",
        "The service runs but cannot do its job: the database does not answer, or its schema does not match this version of the service.",
    ),
    pt(
        "unavailable",
        "Service unavailable",
        "The request did not finish within server.request_timeout_secs and was abandoned. Retry later: a batch of readings sent again counts what was already stored as duplicates.",
    ),
    pt(
        "too-many-connections",
        "Too many connections",
        "The server already has server.max_connections connections open, so this one was answered and closed. Retry after the Retry-After seconds; a client that keeps idle connections open should close some.",
    ),
];

/// The problem type with this slug.
pub fn problem_type(slug: &str) -> Option<&'static ProblemType> {
    PROBLEM_TYPES.iter().find(|t| t.slug == slug)
}

/// `GET /problems/{slug}`: the page a problem's `type` resolves to.
pub fn router() -> Router<AppState> {
    Router::new().route("/problems/{slug}", get(page))
}

/// The HTML page of one problem type.
pub fn page_html(t: &ProblemType) -> String {
    format!(
        "<!doctype html>\n<html lang=\"en\">\n<head><meta charset=\"utf-8\"><title>{title} (reachcast)</title></head>\n<body>\n<h1>{title}</h1>\n<p>Problem type <code>/problems/{slug}</code> of the reachcast API, sent as an RFC 9457 problem document (<code>application/problem+json</code>).</p>\n<p>{explanation}</p>\n<p>The whole API is described at <a href=\"/api/openapi.json\">/api/openapi.json</a>.</p>\n</body>\n</html>\n",
        // XML's five entities are HTML's too (HTML Living Standard,
        // named character references).
        title = quick_xml::escape::escape(t.title),
        slug = t.slug,
        explanation = quick_xml::escape::escape(t.explanation),
    )
}

async fn page(Path(slug): Path<String>) -> Response {
    match problem_type(&slug) {
        Some(t) => (
            [
                (header::CONTENT_TYPE, "text/html; charset=utf-8"),
                (header::CACHE_CONTROL, "max-age=3600"),
            ],
            page_html(t),
        )
            .into_response(),
        None => Problem::new(StatusCode::NOT_FOUND, "not-found", "Not found")
            .detail(format!("there is no problem type `{slug}`"))
            .field("slug")
            .instance(format!("/problems/{slug}"))
            .into_response(),
    }
}

#[cfg(test)]
mod tests {
    /// A repeated or unknown member is named in `field` (it used to be
    /// reported as ".").
    #[test]
    fn duplicated_and_unknown_members_are_named() {
        #[derive(Debug, serde::Deserialize)]
        #[serde(deny_unknown_fields)]
        #[allow(dead_code)]
        struct Row {
            time: String,
            stage: f64,
        }
        #[derive(Debug, serde::Deserialize)]
        #[serde(deny_unknown_fields)]
        #[allow(dead_code)]
        struct Batch {
            readings: Vec<Row>,
        }
        let field = |body: &str| {
            let p = super::parse_json::<Batch>(body.as_bytes()).expect_err("refused");
            p.field.clone()
        };
        assert_eq!(
            field(r#"{"readings": [], "readings": []}"#).as_deref(),
            Some("readings")
        );
        assert_eq!(
            field(r#"{"readings": [{"time": "t", "stage": 1, "stage": 2}]}"#).as_deref(),
            Some("readings[0].stage")
        );
        assert_eq!(
            field(r#"{"readings": [{"time": "t", "stage": 1, "colour": 2}]}"#).as_deref(),
            Some("readings[0].colour")
        );
    }

    use super::*;

    const LIMITS: Limits = Limits {
        body_limit_bytes: 2048,
        request_timeout_secs: 30,
    };

    async fn problem_of(response: Response, method: Method) -> serde_json::Value {
        let out = as_problem(response, &method, "/api/gauges/g/readings", LIMITS).await;
        assert_eq!(out.headers()[header::CONTENT_TYPE], PROBLEM_JSON);
        let bytes = axum::body::to_bytes(out.into_body(), 1 << 16)
            .await
            .expect("body");
        serde_json::from_slice(&bytes).expect("problem JSON")
    }

    /// RFC 9457 §3.1.4 `detail` and §3.1.5 `instance`, for the answers the
    /// layers around the handlers give with an empty body.
    #[tokio::test]
    async fn layer_errors_get_a_detail_and_the_path() {
        let timeout = StatusCode::SERVICE_UNAVAILABLE.into_response();
        let p = problem_of(timeout, Method::GET).await;
        assert_eq!(p["type"], "/problems/unavailable");
        assert!(
            p["detail"].as_str().expect("detail").contains("30 s"),
            "{p}"
        );
        assert_eq!(p["instance"], "/api/gauges/g/readings");
        let mut not_allowed = StatusCode::METHOD_NOT_ALLOWED.into_response();
        not_allowed
            .headers_mut()
            .insert(header::ALLOW, HeaderValue::from_static("GET,POST"));
        let p = problem_of(not_allowed, Method::DELETE).await;
        assert_eq!(
            p["detail"],
            "DELETE is not allowed on /api/gauges/g/readings; it allows GET,POST"
        );
        let p = problem_of(StatusCode::PAYLOAD_TOO_LARGE.into_response(), Method::POST).await;
        assert!(
            p["detail"].as_str().expect("detail").contains("2048"),
            "{p}"
        );
        let p = problem_of(StatusCode::NOT_ACCEPTABLE.into_response(), Method::GET).await;
        assert_eq!(p["type"], "/problems/bad-request");
        assert!(p["detail"].is_string(), "{p}");
    }

    #[tokio::test]
    async fn a_problem_without_detail_gets_its_types_explanation() {
        let res =
            Problem::new(StatusCode::NOT_FOUND, "unknown-gauge", "Unknown gauge").into_response();
        let bytes = axum::body::to_bytes(res.into_body(), 1 << 16)
            .await
            .expect("body");
        let p: serde_json::Value = serde_json::from_slice(&bytes).expect("json");
        assert_eq!(
            p["detail"].as_str(),
            problem_type("unknown-gauge").map(|t| t.explanation)
        );
    }

    #[test]
    fn every_generic_kind_is_catalogued_and_pages_escape() {
        for code in 400..600 {
            if let Ok(s) = StatusCode::from_u16(code) {
                assert!(problem_type(generic_kind(s)).is_some(), "{code}");
            }
        }
        let mut slugs: Vec<&str> = PROBLEM_TYPES.iter().map(|t| t.slug).collect();
        slugs.sort_unstable();
        slugs.dedup();
        assert_eq!(slugs.len(), PROBLEM_TYPES.len(), "a slug twice");
        let html = page_html(&pt("x", "a < b", "\"quoted\" & more"));
        assert!(html.contains("a &lt; b") && html.contains("&quot;quoted&quot; &amp; more"));
    }
}

//! One error type for the HTTP layer, rendered as RFC 9457 problem details
//! (`application/problem+json`).
//!
//! Internal and database errors are logged with their cause; the client gets
//! a short, safe message. Validation errors name the field (and the row, for
//! batches) in extension members so a client can point at the bad input.

use axum::{
    http::{HeaderName, HeaderValue, StatusCode, header},
    response::{IntoResponse, Response},
};
use serde::Serialize;

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

impl IntoResponse for Problem {
    fn into_response(self) -> Response {
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

/// 404 for unknown API paths, in problem form.
pub async fn not_found(uri: axum::http::Uri) -> Problem {
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
                Err(Problem::invalid(path, inner.to_string()))
            }
        }
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

/// Middleware: turns any error response that is not already a problem
/// document (axum's own rejections, 405, the timeout's 503) into one, so
/// every error the API gives is RFC 9457.
pub async fn problemize(response: Response) -> Response {
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
    let kind = match status {
        StatusCode::PAYLOAD_TOO_LARGE => "body-too-large",
        StatusCode::UNSUPPORTED_MEDIA_TYPE => "unsupported-media-type",
        StatusCode::METHOD_NOT_ALLOWED => "method-not-allowed",
        StatusCode::SERVICE_UNAVAILABLE => "unavailable",
        StatusCode::REQUEST_TIMEOUT => "timeout",
        s if s.is_server_error() => "internal",
        _ => "bad-request",
    };
    let title = status.canonical_reason().unwrap_or("Error");
    let mut problem = Problem::new(status, kind, title);
    if status.is_client_error() && !text.is_empty() {
        problem = problem.detail(text);
    }
    let mut out = problem.into_response();
    for (name, value) in &parts.headers {
        if name != header::CONTENT_TYPE && name != header::CONTENT_LENGTH {
            out.headers_mut().insert(name.clone(), value.clone());
        }
    }
    out
}

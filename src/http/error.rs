//! One error type for the HTTP layer, rendered as RFC 9457 problem details
//! (`application/problem+json`).
//!
//! Internal and database errors are logged with their cause; the client gets
//! a short, safe message. Validation errors name the field (and the row, for
//! batches) in extension members so a client can point at the bad input.

use axum::{
    http::{HeaderValue, StatusCode, header},
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
        }
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
        response
            .headers_mut()
            .insert(header::CONTENT_TYPE, HeaderValue::from_static(PROBLEM_JSON));
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

//! The one HTTP error type: each variant maps to a status code and a JSON body
//! `{"error": …, "field": …, "allowed": …}`. Internal and database errors are logged here and answered
//! with a generic message; their text never reaches the client.

use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::Serialize;

use crate::store::StoreError;
use crate::watch::{HubError, WatchError};
use oedolog_core::analysis::AnalysisError;

/// Why a request failed.
#[derive(Debug, thiserror::Error)]
pub enum ApiError {
    /// Malformed request (bad JSON syntax, bad query value): 400.
    #[error("{error}")]
    BadRequest {
        /// What is wrong.
        error: String,
        /// The field, if one is to blame.
        field: Option<String>,
        /// What is allowed there.
        allowed: Option<String>,
    },
    /// Well-formed but invalid (unknown field, value out of range): 422.
    #[error("{field}: {error}")]
    Invalid {
        /// What is wrong.
        error: String,
        /// The field.
        field: String,
        /// What is allowed.
        allowed: String,
    },
    /// Not JSON: 415.
    #[error("{0}")]
    UnsupportedMediaType(String),
    /// An action without `Content-Type: application/json` (what it got): 415 naming `Content-Type`.
    #[error("an action needs a JSON body with `Content-Type: application/json` (got {0})")]
    BadContentType(String),
    /// A cross-site action, by the header that shows it: 403 naming that header.
    #[error("{error}")]
    CrossSite {
        /// `Sec-Fetch-Site` or `Origin`.
        header: &'static str,
        /// What is wrong.
        error: String,
        /// What is allowed there.
        allowed: String,
    },
    /// A `Host` that does not name this daemon: 421 naming `Host`.
    #[error("{0}")]
    MisdirectedHost(String),
    /// No such frame, test, increment or file: 404.
    #[error("{0}")]
    NotFound(String),
    /// The frame is not in a state that allows it: 409.
    #[error("{0}")]
    Conflict(String),
    /// No or wrong credentials: 401 with `WWW-Authenticate`.
    #[error("credentials needed: HTTP Basic (name and token) or `Authorization: Bearer TOKEN`")]
    Unauthorized,
    /// A viewer tried to act: 403.
    #[error("user `{0}` is a viewer: reading only (an operator may act)")]
    Forbidden(String),
    /// Someone other than a signed-in engineer tried to adjust or approve: 403, saying who may.
    #[error("{0}")]
    NotEngineer(String),
    /// A limit of the daemon reached (event streams): 503 with `Retry-After`.
    #[error("{0}")]
    Busy(String),
    /// Something failed inside; logged, never sent.
    #[error("internal error: {0}")]
    Internal(String),
}

impl ApiError {
    /// A 422 naming `field` and what is allowed there.
    pub(crate) fn invalid(field: &str, error: impl Into<String>, allowed: impl Into<String>) -> ApiError {
        ApiError::Invalid { error: error.into(), field: field.into(), allowed: allowed.into() }
    }

    /// A 400 about query parameter `field`.
    pub(crate) fn bad_query(field: &str, error: impl Into<String>, allowed: impl Into<String>) -> ApiError {
        ApiError::BadRequest { error: error.into(), field: Some(field.into()), allowed: Some(allowed.into()) }
    }

    fn status(&self) -> StatusCode {
        match self {
            ApiError::BadRequest { .. } => StatusCode::BAD_REQUEST,
            ApiError::Invalid { .. } => StatusCode::UNPROCESSABLE_ENTITY,
            ApiError::UnsupportedMediaType(_) => StatusCode::UNSUPPORTED_MEDIA_TYPE,
            ApiError::BadContentType(_) => StatusCode::UNSUPPORTED_MEDIA_TYPE,
            ApiError::CrossSite { .. } => StatusCode::FORBIDDEN,
            ApiError::MisdirectedHost(_) => StatusCode::MISDIRECTED_REQUEST,
            ApiError::NotFound(_) => StatusCode::NOT_FOUND,
            ApiError::Conflict(_) => StatusCode::CONFLICT,
            ApiError::Unauthorized => StatusCode::UNAUTHORIZED,
            ApiError::Forbidden(_) | ApiError::NotEngineer(_) => StatusCode::FORBIDDEN,
            ApiError::Busy(_) => StatusCode::SERVICE_UNAVAILABLE,
            ApiError::Internal(_) => StatusCode::INTERNAL_SERVER_ERROR,
        }
    }
}

#[derive(Serialize)]
struct Body<'a> {
    error: String,
    field: Option<&'a str>,
    allowed: Option<&'a str>,
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let status = self.status();
        let body = match &self {
            ApiError::Internal(detail) => {
                tracing::error!("http: {detail}");
                Body { error: "internal error; see the daemon's log".into(), field: None, allowed: None }
            }
            ApiError::BadRequest { error, field, allowed } => {
                Body { error: error.clone(), field: field.as_deref(), allowed: allowed.as_deref() }
            }
            ApiError::Invalid { error, field, allowed } => {
                Body { error: error.clone(), field: Some(field), allowed: Some(allowed) }
            }
            ApiError::BadContentType(_) => Body {
                error: self.to_string(),
                field: Some("Content-Type"),
                allowed: Some("application/json (send `{}` where the action takes no values)"),
            },
            ApiError::CrossSite { header, error, allowed } => {
                Body { error: error.clone(), field: Some(header), allowed: Some(allowed) }
            }
            ApiError::MisdirectedHost(error) => Body {
                error: error.clone(),
                field: Some("Host"),
                allowed: error.split_once("(allowed: ").map(|(_, a)| a.trim_end_matches(')')),
            },
            other => Body { error: other.to_string(), field: None, allowed: None },
        };
        let mut response = (status, axum::Json(body)).into_response();
        if status == StatusCode::UNAUTHORIZED {
            response
                .headers_mut()
                .insert(header::WWW_AUTHENTICATE, HeaderValue::from_static("Basic realm=\"oedolog\""));
        }
        if status == StatusCode::SERVICE_UNAVAILABLE {
            response.headers_mut().insert(header::RETRY_AFTER, HeaderValue::from_static("5"));
        }
        response
    }
}

impl From<StoreError> for ApiError {
    fn from(error: StoreError) -> Self {
        match error {
            StoreError::Refused(why) => ApiError::Conflict(why),
            other => ApiError::Internal(other.to_string()),
        }
    }
}

impl From<HubError> for ApiError {
    fn from(error: HubError) -> Self {
        match error {
            HubError::NoFrame => ApiError::NotFound("no such frame".into()),
            HubError::Watch(WatchError::State(..)) => ApiError::Conflict(error.to_string()),
            HubError::Watch(WatchError::Value { field, message }) => ApiError::invalid(field, message.clone(), message),
            HubError::Store(e) => ApiError::from(e),
        }
    }
}

impl From<AnalysisError> for ApiError {
    /// An analysis refusing stored data is a conflict with what the test holds, not a server fault.
    fn from(error: AnalysisError) -> Self {
        ApiError::Conflict(format!("the analysis cannot run on these data: {error}"))
    }
}

//! The web layer's errors and the one place they become HTTP responses: JSON under `/api`,
//! an HTML page elsewhere. Database and internal errors are logged, never shown.

use axum::Json;
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{Html, IntoResponse, Response};
use serde::Serialize;

use super::layout::{Common, PageData, render};
use crate::domain::Problems;
use crate::domain::observations::RowProblem;
use crate::ops::OpError;

/// An error answer: status, a stable machine code, a message for people, and for validation
/// errors the problem of each field.
#[derive(Debug)]
pub struct ApiError {
    pub status: StatusCode,
    pub code: &'static str,
    pub message: String,
    pub fields: Option<Problems>,
    /// For uploads: each bad line or item and why.
    pub rows: Option<Vec<RowProblem>>,
    pub retry_after: Option<u64>,
}

impl ApiError {
    pub fn new(status: StatusCode, code: &'static str, message: impl Into<String>) -> ApiError {
        ApiError {
            status,
            code,
            message: message.into(),
            fields: None,
            rows: None,
            retry_after: None,
        }
    }

    pub fn bad_request(message: impl Into<String>) -> ApiError {
        ApiError::new(StatusCode::BAD_REQUEST, "bad_request", message)
    }

    /// A malformed request parameter (query or body field), named in `fields`.
    pub fn bad_param(name: impl Into<String>, message: impl Into<String>) -> ApiError {
        let message = message.into();
        ApiError {
            fields: Some(Problems::single(name, message.clone())),
            ..ApiError::bad_request(message)
        }
    }

    pub fn invalid(problems: Problems) -> ApiError {
        ApiError {
            fields: Some(problems.clone()),
            ..ApiError::new(
                StatusCode::BAD_REQUEST,
                "invalid",
                problems
                    .0
                    .iter()
                    .map(|p| p.message.as_str())
                    .collect::<Vec<_>>()
                    .join("; "),
            )
        }
    }

    pub fn unauthorized(message: impl Into<String>) -> ApiError {
        ApiError::new(StatusCode::UNAUTHORIZED, "unauthorized", message)
    }

    pub fn forbidden(message: impl Into<String>) -> ApiError {
        ApiError::new(StatusCode::FORBIDDEN, "forbidden", message)
    }

    pub fn not_found(message: impl Into<String>) -> ApiError {
        ApiError::new(StatusCode::NOT_FOUND, "not_found", message)
    }

    pub fn throttled(retry_after: u64) -> ApiError {
        ApiError::new(
            StatusCode::TOO_MANY_REQUESTS,
            "throttled",
            format!("too many failed attempts; try again in {retry_after} seconds"),
        )
        .retry_after(retry_after)
    }

    /// 503: the database could not take the request; nothing was changed.
    fn database_later(code: &'static str, message: &'static str, seconds: u64) -> ApiError {
        ApiError::new(StatusCode::SERVICE_UNAVAILABLE, code, message).retry_after(seconds)
    }

    /// The same answer, asking the client to try again after `seconds`.
    fn retry_after(self, seconds: u64) -> ApiError {
        ApiError {
            retry_after: Some(seconds),
            ..self
        }
    }

    pub fn internal() -> ApiError {
        ApiError::new(
            StatusCode::INTERNAL_SERVER_ERROR,
            "internal",
            "something went wrong on the server; it has been logged",
        )
    }
}

/// Retry-After (RFC 9110 §10.2.3) when the database was busy: another writer held the lock,
/// which lasts a fraction of a second as a rule.
pub const BUSY_RETRY_SECONDS: u64 = 1;
/// Retry-After when the database did not answer: a restart takes seconds.
pub const UNAVAILABLE_RETRY_SECONDS: u64 = 5;

impl From<OpError> for ApiError {
    fn from(e: OpError) -> Self {
        match e {
            OpError::Forbidden(m) => ApiError::forbidden(m),
            OpError::Invalid(p) => ApiError::invalid(p),
            OpError::InvalidRows(rows) => ApiError {
                rows: Some(rows.clone()),
                ..ApiError::new(
                    StatusCode::BAD_REQUEST,
                    "invalid_rows",
                    format!(
                        "{} in the upload; nothing was changed",
                        match rows.len() {
                            1 => "1 problem".to_string(),
                            n => format!("{n} problems"),
                        }
                    ),
                )
            },
            OpError::Conflict(m) => ApiError::new(StatusCode::CONFLICT, "conflict", m),
            OpError::BadCredentials(m) => ApiError::unauthorized(m),
            OpError::Throttled(seconds) => ApiError::throttled(seconds),
            OpError::NotFound(m) => ApiError::not_found(m),
            OpError::Busy(why) => {
                tracing::warn!(reason = %why, "database busy; answered 503");
                ApiError::database_later(
                    "busy",
                    "the database is busy with other changes and nothing was changed; try again shortly",
                    BUSY_RETRY_SECONDS,
                )
            }
            OpError::Unavailable(why) => {
                tracing::error!(error = %why, "database unavailable");
                ApiError::database_later(
                    "unavailable",
                    "the database is not answering and nothing was changed; try again shortly",
                    UNAVAILABLE_RETRY_SECONDS,
                )
            }
            OpError::Internal(why) => {
                tracing::error!(error = %why, "internal error");
                ApiError::internal()
            }
        }
    }
}

/// The body of every error answer of the API.
#[derive(Debug, Serialize, utoipa::ToSchema)]
pub struct ErrorBody {
    pub error: ErrorDetail,
}

/// What went wrong.
#[derive(Debug, Serialize, utoipa::ToSchema)]
pub struct ErrorDetail {
    /// A stable code: bad_request, bad_json, invalid, invalid_rows, unauthorized, forbidden,
    /// not_found, conflict, too_large, unsupported_media_type, throttled, busy, unavailable, ...
    pub code: &'static str,
    /// What went wrong, for people.
    pub message: String,
    /// Each invalid input field with what is wrong with it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fields: Option<Problems>,
    /// For uploads: each bad line or item and why.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rows: Option<Vec<RowProblem>>,
}

impl ErrorDetail {
    /// A code and a message, naming no field.
    pub fn new(code: &'static str, message: impl Into<String>) -> ErrorDetail {
        ErrorDetail {
            code,
            message: message.into(),
            fields: None,
            rows: None,
        }
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let body = ErrorBody {
            error: ErrorDetail {
                code: self.code,
                message: self.message,
                fields: self.fields,
                rows: self.rows,
            },
        };
        let mut response = (self.status, Json(body)).into_response();
        if let Some(seconds) = self.retry_after {
            response
                .headers_mut()
                .insert(header::RETRY_AFTER, HeaderValue::from(seconds));
        }
        response
    }
}

/// An error shown to a browser as a page. Built from the same variants; rendered by
/// [`error_page`] so it carries the site's layout.
#[derive(Debug)]
pub struct PageError(pub ApiError);

impl From<ApiError> for PageError {
    fn from(e: ApiError) -> Self {
        PageError(e)
    }
}

impl From<OpError> for PageError {
    fn from(e: OpError) -> Self {
        PageError(e.into())
    }
}

impl IntoResponse for PageError {
    fn into_response(self) -> Response {
        error_page(&self.0)
    }
}

/// The error page's data: a heading for the kind of error and the message the API would give.
#[derive(Debug, Serialize)]
pub struct ErrorPage<'a> {
    pub heading: &'a str,
    pub message: &'a str,
}

impl PageData for ErrorPage<'_> {
    const TEMPLATE: &'static str = "error.html";
}

/// The page for an error, with the same status and message the API would give.
pub fn error_page(err: &ApiError) -> Response {
    let heading = match err.status {
        StatusCode::BAD_REQUEST => "That request could not be used",
        StatusCode::UNAUTHORIZED => "Please sign in",
        StatusCode::FORBIDDEN => "Not allowed",
        StatusCode::NOT_FOUND => "Not found",
        StatusCode::CONFLICT => "That clashes with what is recorded",
        StatusCode::PAYLOAD_TOO_LARGE => "Too large",
        StatusCode::UNSUPPORTED_MEDIA_TYPE => "Unsupported form encoding",
        StatusCode::TOO_MANY_REQUESTS => "Too many attempts",
        StatusCode::SERVICE_UNAVAILABLE if err.code == "busy" => "Busy with other changes",
        StatusCode::SERVICE_UNAVAILABLE => "The database is not answering",
        _ => "Something went wrong",
    };
    let page = ErrorPage {
        heading,
        message: &err.message,
    };
    let mut response = match render(&Common::new(None, heading, ""), &page) {
        Ok(body) => (err.status, Html(body)).into_response(),
        // The error page itself failed: fall back to plain words rather than loop.
        Err(_) => (err.status, Html(format!("<h1>{heading}</h1>"))).into_response(),
    };
    if let Some(seconds) = err.retry_after {
        response
            .headers_mut()
            .insert(header::RETRY_AFTER, HeaderValue::from(seconds));
    }
    response
}

//! The service's errors: each variant picks its HTTP status and a stable code.
//!
//! Every error answers `{"error": {"code": "...", "message": "..."}}`. Messages of 4xx
//! errors say what was wrong and what to send instead; they never carry a server path. A 5xx
//! is logged in full and answers only a generic message.

use axum::Json;
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use shearbox_cf::CfError;
use shearbox_core::CoreError;

use crate::query::QueryError;
use crate::wire::{ErrorBody, ErrorDoc};

/// Seconds a client is asked to wait after a 503.
pub const RETRY_AFTER_SECS: u64 = 1;

/// What went wrong with a request.
#[derive(Debug, Clone, PartialEq)]
pub enum ApiError {
    /// 400: a malformed or impossible request.
    BadRequest {
        /// Stable code, e.g. `invalid_bbox`.
        code: &'static str,
        /// What was wrong.
        message: String,
    },
    /// 401: a bearer token is required or was wrong.
    Unauthorized,
    /// 404: no such dataset or route.
    NotFound {
        /// Stable code.
        code: &'static str,
        /// What was not found.
        message: String,
    },
    /// 405: the route exists, the method does not.
    MethodNotAllowed,
    /// 414: the URI is longer than the service reads.
    UriTooLong {
        /// Its length, bytes.
        len: usize,
        /// The limit, bytes.
        max: usize,
    },
    /// 413: a gridded answer would exceed the cell limit.
    TooManyCells {
        /// What was asked and the limit.
        message: String,
        /// The smallest stride that fits.
        stride: usize,
    },
    /// 503: too many requests are waiting.
    Overloaded,
    /// 503: the request took longer than the limit.
    Timeout,
    /// 503: the dataset is configured but no file of it could be loaded.
    Unavailable {
        /// The dataset.
        dataset: String,
        /// Why (without server paths).
        reason: String,
    },
    /// 500: a fault on the server's side; logged, not shown.
    Internal {
        /// What failed, for the log.
        detail: String,
    },
}

impl ApiError {
    /// A 400 with `code` and `message`.
    pub fn bad(code: &'static str, message: impl Into<String>) -> Self {
        ApiError::BadRequest { code, message: message.into() }
    }

    /// A 500 whose detail goes to the log only.
    pub fn internal(detail: impl std::fmt::Display) -> Self {
        ApiError::Internal { detail: detail.to_string() }
    }

    /// The status this error answers with.
    pub fn status(&self) -> StatusCode {
        match self {
            ApiError::BadRequest { .. } => StatusCode::BAD_REQUEST,
            ApiError::Unauthorized => StatusCode::UNAUTHORIZED,
            ApiError::NotFound { .. } => StatusCode::NOT_FOUND,
            ApiError::MethodNotAllowed => StatusCode::METHOD_NOT_ALLOWED,
            ApiError::UriTooLong { .. } => StatusCode::URI_TOO_LONG,
            ApiError::TooManyCells { .. } => StatusCode::PAYLOAD_TOO_LARGE,
            ApiError::Overloaded | ApiError::Timeout | ApiError::Unavailable { .. } => {
                StatusCode::SERVICE_UNAVAILABLE
            }
            ApiError::Internal { .. } => StatusCode::INTERNAL_SERVER_ERROR,
        }
    }

    /// The body this error answers with.
    pub fn body(&self) -> ErrorBody {
        let (code, message, stride) = match self {
            ApiError::BadRequest { code, message } | ApiError::NotFound { code, message } => {
                (*code, message.clone(), None)
            }
            ApiError::Unauthorized => (
                "unauthorized",
                "this service needs a bearer token: send Authorization: Bearer TOKEN".into(),
                None,
            ),
            ApiError::MethodNotAllowed => {
                ("method_not_allowed", "this route answers GET (and HEAD) only".into(), None)
            }
            ApiError::UriTooLong { len, max } => (
                "uri_too_long",
                format!("the URI is {len} bytes long; the service reads at most {max}"),
                None,
            ),
            ApiError::TooManyCells { message, stride } => {
                ("too_many_cells", message.clone(), Some(*stride))
            }
            ApiError::Overloaded => (
                "overloaded",
                format!("too many requests are waiting; retry in {RETRY_AFTER_SECS} s"),
                None,
            ),
            ApiError::Timeout => (
                "timeout",
                "the request took longer than the service's time limit; try a smaller box or \
                 retry later"
                    .into(),
                None,
            ),
            ApiError::Unavailable { dataset, reason } => (
                "dataset_unavailable",
                format!("dataset {dataset:?} is configured but could not be loaded: {reason}"),
                None,
            ),
            ApiError::Internal { .. } => {
                ("internal", "internal error; the service's log has the details".into(), None)
            }
        };
        ErrorBody { code: code.to_string(), message, stride }
    }

    /// Maps a box-query failure on dataset `name`; paths never reach the message.
    pub fn from_query(name: &str, e: QueryError) -> Self {
        match e {
            QueryError::Request(core) => Self::from_core(core),
            QueryError::Data(cf) => match *cf {
                CfError::TimeNotFound { wanted, first, last, count, calendar, .. } => {
                    ApiError::bad(
                        "time_not_found",
                        format!(
                            "time {wanted} is not in dataset {name:?}; it has {count} step(s) \
                             from {first} to {last} ({calendar} calendar); use one of those or \
                             \"latest\""
                        ),
                    )
                }
                CfError::BadTimeSelector { .. } => ApiError::bad("invalid_time", cf.to_string()),
                other => ApiError::internal(format!("dataset {name:?}: {other}")),
            },
        }
    }

    /// Maps a kernel validation error.
    pub fn from_core(e: CoreError) -> Self {
        let code = match &e {
            CoreError::InvalidBBox { .. } => "invalid_bbox",
            CoreError::EmptyBox { .. } => "empty_box",
            CoreError::LevelNotFound { .. } => "level_not_found",
            CoreError::InvertedLayer { .. } => "invalid_layer",
            _ => return ApiError::internal(e),
        };
        ApiError::bad(code, e.to_string())
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let status = self.status();
        if let ApiError::Internal { detail } = &self {
            tracing::error!(error = %detail, "internal error");
        }
        let mut response = (status, Json(ErrorDoc { error: self.body() })).into_response();
        let headers = response.headers_mut();
        headers.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
        if status == StatusCode::SERVICE_UNAVAILABLE {
            headers.insert(header::RETRY_AFTER, HeaderValue::from(RETRY_AFTER_SECS));
        }
        if status == StatusCode::UNAUTHORIZED {
            headers.insert(header::WWW_AUTHENTICATE, HeaderValue::from_static("Bearer"));
        }
        response
    }
}

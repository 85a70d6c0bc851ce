//! The one place where failures become HTTP statuses with an [`ApiError`] body.

use crate::store::StoreError;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use axum::Json;
use cubehunt_common::protocol::ApiError;

#[derive(Debug)]
pub struct AppError {
    pub status: StatusCode,
    pub code: &'static str,
    pub message: String,
}

impl AppError {
    pub fn new(status: StatusCode, code: &'static str, message: impl Into<String>) -> AppError {
        AppError {
            status,
            code,
            message: message.into(),
        }
    }
    pub fn bad_request(code: &'static str, message: impl Into<String>) -> AppError {
        AppError::new(StatusCode::BAD_REQUEST, code, message)
    }
    pub fn unauthorized(code: &'static str, message: impl Into<String>) -> AppError {
        AppError::new(StatusCode::UNAUTHORIZED, code, message)
    }
    pub fn forbidden(code: &'static str, message: impl Into<String>) -> AppError {
        AppError::new(StatusCode::FORBIDDEN, code, message)
    }
    pub fn not_found(code: &'static str, message: impl Into<String>) -> AppError {
        AppError::new(StatusCode::NOT_FOUND, code, message)
    }
    pub fn conflict(code: &'static str, message: impl Into<String>) -> AppError {
        AppError::new(StatusCode::CONFLICT, code, message)
    }
    pub fn unprocessable(code: &'static str, message: impl Into<String>) -> AppError {
        AppError::new(StatusCode::UNPROCESSABLE_ENTITY, code, message)
    }
    pub fn internal(message: impl Into<String>) -> AppError {
        AppError::new(StatusCode::INTERNAL_SERVER_ERROR, "internal", message)
    }
}

impl std::fmt::Display for AppError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{} {}: {}",
            self.status.as_u16(),
            self.code,
            self.message
        )
    }
}

impl IntoResponse for AppError {
    fn into_response(self) -> Response {
        if self.status.is_server_error() {
            tracing::error!(code = self.code, message = %self.message, "request failed");
        } else {
            tracing::debug!(status = self.status.as_u16(), code = self.code, message = %self.message, "request refused");
        }
        let body = ApiError {
            error: self.code.to_string(),
            message: self.message,
        };
        (self.status, Json(body)).into_response()
    }
}

impl From<StoreError> for AppError {
    fn from(e: StoreError) -> AppError {
        match e {
            StoreError::NotFound(m) => AppError::not_found("not_found", m),
            StoreError::Conflict(code, m) => AppError::conflict(code, m),
            StoreError::Forbidden(code, m) => AppError::forbidden(code, m),
            StoreError::Closed => AppError::new(
                axum::http::StatusCode::SERVICE_UNAVAILABLE,
                "shutting_down",
                "the coordinator is shutting down; try again in a moment",
            ),
            e @ (StoreError::Db(_) | StoreError::Migrate(_) | StoreError::Corrupt(_)) => {
                AppError::internal(format!("{e}; the coordinator log has details"))
            }
        }
    }
}

impl From<axum::extract::rejection::BytesRejection> for AppError {
    fn from(r: axum::extract::rejection::BytesRejection) -> AppError {
        let status = r.status();
        let code = if status == StatusCode::PAYLOAD_TOO_LARGE {
            "body_too_large"
        } else {
            "bad_body"
        };
        AppError::new(
            status,
            code,
            format!(
                "{} (bodies are limited to {} bytes)",
                r.body_text(),
                cubehunt_common::protocol::MAX_BODY_BYTES
            ),
        )
    }
}

impl From<tokio::task::JoinError> for AppError {
    fn from(e: tokio::task::JoinError) -> AppError {
        AppError::internal(format!("background task failed: {e}"))
    }
}

/// Parse a JSON body into `T`, with a message naming what was wrong.
pub fn parse_json<T: serde::de::DeserializeOwned>(body: &[u8], what: &str) -> Result<T, AppError> {
    serde_json::from_slice(body)
        .map_err(|e| AppError::bad_request("bad_json", format!("malformed {what} body: {e}")))
}

pub type ApiResult<T> = Result<T, AppError>;

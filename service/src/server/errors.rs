//! The service's error type and its one mapping to HTTP statuses and gRPC codes.

use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};

/// What went wrong, from the client's point of view.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// The request is malformed or breaks a limit (the client's error).
    InvalidArgument,
    NotFound,
    Unauthenticated,
    /// Admin routes are off (no admin token configured).
    PermissionDenied,
    PayloadTooLarge,
    /// Load shedding: too many requests in flight.
    ResourceExhausted,
    DeadlineExceeded,
    /// No model loaded yet, or shutting down.
    Unavailable,
    Internal,
}

/// An error with a stable machine-readable code and a message for people.
#[derive(Debug, Clone)]
pub struct ApiError {
    pub kind: Kind,
    pub code: &'static str,
    pub message: String,
}

impl ApiError {
    pub fn new(kind: Kind, code: &'static str, message: impl Into<String>) -> Self {
        ApiError {
            kind,
            code,
            message: message.into(),
        }
    }

    pub fn invalid(code: &'static str, message: impl Into<String>) -> Self {
        ApiError::new(Kind::InvalidArgument, code, message)
    }

    pub fn http_status(&self) -> StatusCode {
        match self.kind {
            Kind::InvalidArgument => StatusCode::BAD_REQUEST,
            Kind::NotFound => StatusCode::NOT_FOUND,
            Kind::Unauthenticated => StatusCode::UNAUTHORIZED,
            Kind::PermissionDenied => StatusCode::FORBIDDEN,
            Kind::PayloadTooLarge => StatusCode::PAYLOAD_TOO_LARGE,
            Kind::ResourceExhausted => StatusCode::TOO_MANY_REQUESTS,
            Kind::DeadlineExceeded => StatusCode::GATEWAY_TIMEOUT,
            Kind::Unavailable => StatusCode::SERVICE_UNAVAILABLE,
            Kind::Internal => StatusCode::INTERNAL_SERVER_ERROR,
        }
    }

    pub fn grpc_code(&self) -> tonic::Code {
        match self.kind {
            Kind::InvalidArgument | Kind::PayloadTooLarge => tonic::Code::InvalidArgument,
            Kind::NotFound => tonic::Code::NotFound,
            Kind::Unauthenticated => tonic::Code::Unauthenticated,
            Kind::PermissionDenied => tonic::Code::PermissionDenied,
            Kind::ResourceExhausted => tonic::Code::ResourceExhausted,
            Kind::DeadlineExceeded => tonic::Code::DeadlineExceeded,
            Kind::Unavailable => tonic::Code::Unavailable,
            Kind::Internal => tonic::Code::Internal,
        }
    }
}

impl std::fmt::Display for ApiError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: {}", self.code, self.message)
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let body = serde_json::json!({"error": {"code": self.code, "message": self.message}});
        (self.http_status(), axum::Json(body)).into_response()
    }
}

impl From<ApiError> for tonic::Status {
    fn from(e: ApiError) -> Self {
        tonic::Status::new(e.grpc_code(), format!("{}: {}", e.code, e.message))
    }
}

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
    /// An HTTP route called with a method it does not take.
    MethodNotAllowed,
    /// Load shedding: too many requests in flight.
    ResourceExhausted,
    DeadlineExceeded,
    /// No model loaded yet, or shutting down.
    Unavailable,
    Internal,
}

/// Every machine-readable error code of the API, rendered once (snake_case) for HTTP bodies,
/// gRPC status messages and the `code` label of `arcwright_requests_total`. Each code has one
/// [`Kind`], which decides the HTTP status and the gRPC code.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ErrorCode {
    /// Admin routes are off: no admin token is configured.
    AdminDisabled,
    /// A given tag is empty or has control characters.
    BadTag,
    /// More sentences in a batch than the limit.
    BatchTooLarge,
    /// The request body is larger than the limit.
    BodyTooLarge,
    /// Text, a token or a tag contains a control character.
    ControlCharacter,
    /// The parse did not finish within the deadline.
    DeadlineExceeded,
    /// A batch with no sentences.
    EmptyBatch,
    /// A request with no body.
    EmptyBody,
    /// Text with no words.
    EmptyText,
    /// A token that is empty or blank.
    EmptyToken,
    /// An empty token list.
    EmptyTokens,
    /// A fault of the service, not of the request.
    Internal,
    /// A model or alias name that breaks the naming rules.
    InvalidName,
    /// The body is not valid UTF-8.
    InvalidUtf8,
    /// The alias moved, but this replica could not load the version.
    LoadFailed,
    /// The body is not valid JSON of the expected shape.
    MalformedJson,
    /// A query parameter that is missing its value, malformed or out of range.
    BadQuery,
    /// The route exists, but not for this HTTP method.
    MethodNotAllowed,
    /// A sentence with neither text nor tokens.
    NoInput,
    /// No model is loaded yet.
    NoModel,
    /// No such route.
    NoRoute,
    /// The service is starting or draining.
    NotReady,
    /// Too many requests in flight (load shedding); retry later.
    Overloaded,
    /// A sentence with more tokens than the limit.
    SentenceTooLong,
    /// The model store could not be reached or read.
    StoreUnavailable,
    /// The number of tags differs from the number of tokens.
    TagsMismatch,
    /// Tags given with text (tags need tokens).
    TagsWithoutTokens,
    /// Both text and tokens given for one sentence.
    TextAndTokens,
    /// Text holding more sentences than the limit.
    TooManySentences,
    /// A missing or wrong admin token.
    Unauthenticated,
    /// A decoder name or value that is not known.
    UnknownDecoder,
    /// A model name that is not being served.
    UnknownModel,
    /// A version that is not in the store.
    UnknownVersion,
    /// A version whose files fail verification or whose schema is unknown.
    UnusableVersion,
}

impl ErrorCode {
    /// The code as clients see it.
    pub fn as_str(self) -> &'static str {
        match self {
            ErrorCode::AdminDisabled => "admin_disabled",
            ErrorCode::BadTag => "bad_tag",
            ErrorCode::BatchTooLarge => "batch_too_large",
            ErrorCode::BodyTooLarge => "body_too_large",
            ErrorCode::ControlCharacter => "control_character",
            ErrorCode::DeadlineExceeded => "deadline_exceeded",
            ErrorCode::EmptyBatch => "empty_batch",
            ErrorCode::EmptyBody => "empty_body",
            ErrorCode::EmptyText => "empty_text",
            ErrorCode::EmptyToken => "empty_token",
            ErrorCode::EmptyTokens => "empty_tokens",
            ErrorCode::Internal => "internal",
            ErrorCode::InvalidName => "invalid_name",
            ErrorCode::InvalidUtf8 => "invalid_utf8",
            ErrorCode::LoadFailed => "load_failed",
            ErrorCode::MalformedJson => "malformed_json",
            ErrorCode::BadQuery => "bad_query",
            ErrorCode::NoInput => "no_input",
            ErrorCode::NoModel => "no_model",
            ErrorCode::NoRoute => "no_route",
            ErrorCode::MethodNotAllowed => "method_not_allowed",
            ErrorCode::NotReady => "not_ready",
            ErrorCode::Overloaded => "overloaded",
            ErrorCode::SentenceTooLong => "sentence_too_long",
            ErrorCode::StoreUnavailable => "store_unavailable",
            ErrorCode::TagsMismatch => "tags_mismatch",
            ErrorCode::TagsWithoutTokens => "tags_without_tokens",
            ErrorCode::TextAndTokens => "text_and_tokens",
            ErrorCode::TooManySentences => "too_many_sentences",
            ErrorCode::Unauthenticated => "unauthenticated",
            ErrorCode::UnknownDecoder => "unknown_decoder",
            ErrorCode::UnknownModel => "unknown_model",
            ErrorCode::UnknownVersion => "unknown_version",
            ErrorCode::UnusableVersion => "unusable_version",
        }
    }

    pub fn kind(self) -> Kind {
        match self {
            ErrorCode::DeadlineExceeded => Kind::DeadlineExceeded,
            ErrorCode::Internal | ErrorCode::LoadFailed => Kind::Internal,
            ErrorCode::BadTag
            | ErrorCode::BatchTooLarge
            | ErrorCode::ControlCharacter
            | ErrorCode::EmptyBatch
            | ErrorCode::EmptyBody
            | ErrorCode::EmptyText
            | ErrorCode::EmptyToken
            | ErrorCode::EmptyTokens
            | ErrorCode::InvalidName
            | ErrorCode::InvalidUtf8
            | ErrorCode::MalformedJson
            | ErrorCode::BadQuery
            | ErrorCode::NoInput
            | ErrorCode::SentenceTooLong
            | ErrorCode::TagsMismatch
            | ErrorCode::TagsWithoutTokens
            | ErrorCode::TextAndTokens
            | ErrorCode::TooManySentences
            | ErrorCode::UnknownDecoder
            | ErrorCode::UnusableVersion => Kind::InvalidArgument,
            ErrorCode::NoRoute | ErrorCode::UnknownModel | ErrorCode::UnknownVersion => {
                Kind::NotFound
            }
            ErrorCode::BodyTooLarge => Kind::PayloadTooLarge,
            ErrorCode::MethodNotAllowed => Kind::MethodNotAllowed,
            ErrorCode::AdminDisabled => Kind::PermissionDenied,
            ErrorCode::Overloaded => Kind::ResourceExhausted,
            ErrorCode::Unauthenticated => Kind::Unauthenticated,
            ErrorCode::NoModel | ErrorCode::NotReady | ErrorCode::StoreUnavailable => {
                Kind::Unavailable
            }
        }
    }
}

impl std::fmt::Display for ErrorCode {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// An error with a stable machine-readable code and a message for people.
#[derive(Debug, Clone)]
pub struct ApiError {
    pub code: ErrorCode,
    pub message: String,
}

impl ApiError {
    pub fn new(code: ErrorCode, message: impl Into<String>) -> Self {
        ApiError {
            code,
            message: message.into(),
        }
    }

    pub fn kind(&self) -> Kind {
        self.code.kind()
    }

    pub fn http_status(&self) -> StatusCode {
        match self.kind() {
            Kind::InvalidArgument => StatusCode::BAD_REQUEST,
            Kind::NotFound => StatusCode::NOT_FOUND,
            Kind::Unauthenticated => StatusCode::UNAUTHORIZED,
            Kind::PermissionDenied => StatusCode::FORBIDDEN,
            Kind::PayloadTooLarge => StatusCode::PAYLOAD_TOO_LARGE,
            Kind::MethodNotAllowed => StatusCode::METHOD_NOT_ALLOWED,
            Kind::ResourceExhausted => StatusCode::TOO_MANY_REQUESTS,
            Kind::DeadlineExceeded => StatusCode::GATEWAY_TIMEOUT,
            Kind::Unavailable => StatusCode::SERVICE_UNAVAILABLE,
            Kind::Internal => StatusCode::INTERNAL_SERVER_ERROR,
        }
    }

    pub fn grpc_code(&self) -> tonic::Code {
        match self.kind() {
            Kind::InvalidArgument | Kind::PayloadTooLarge => tonic::Code::InvalidArgument,
            Kind::NotFound => tonic::Code::NotFound,
            Kind::MethodNotAllowed => tonic::Code::Unimplemented,
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

/// The body of every HTTP error reply.
#[derive(Debug, serde::Serialize, utoipa::ToSchema)]
pub struct ErrorResponse {
    error: ErrorDetail,
}

#[derive(Debug, serde::Serialize, utoipa::ToSchema)]
pub struct ErrorDetail {
    /// Machine-readable, stable (snake_case).
    code: &'static str,
    /// For people.
    message: String,
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let status = self.http_status();
        let body = ErrorResponse {
            error: ErrorDetail {
                code: self.code.as_str(),
                message: self.message,
            },
        };
        (status, axum::Json(body)).into_response()
    }
}

impl From<ApiError> for tonic::Status {
    fn from(e: ApiError) -> Self {
        tonic::Status::new(e.grpc_code(), format!("{}: {}", e.code, e.message))
    }
}

//! One error type for the HTTP API: [`ApiError`] owns its status code and its
//! RFC 9457 problem-details body (`application/problem+json`).
//!
//! Every problem body has `type`, `title`, `status`, `detail` and an `errors` array
//! (possibly empty). Each entry of `errors` names where the problem is — `pointer`
//! (an RFC 6901 JSON pointer into the request body, such as `/records/3/defective`),
//! `parameter` (a path or query parameter), `header`, or `line` and `column` (a CSV
//! body, `line` counted as in the file, the header being line 1) — with a
//! machine-readable `reason` and a `message` for people.
//!
//! Problem `type` URIs are relative references of the form `/problems/<slug>`; the
//! server itself answers `GET /problems/<slug>` with a short description, so the
//! reference resolves against the server that sent it. A 5xx never shows internal
//! text: the cause is logged with `tracing` and the client gets a generic detail.

use std::borrow::Cow;
use std::fmt;

use axum::http::StatusCode;
use axum::http::header::{self, HeaderName, HeaderValue};
use axum::response::{IntoResponse, Response};
use dispar_store::{RecordError, RecordProblem, StoreError};
use serde::Serialize;

/// Handlers return this; the error defaults to [`ApiError`].
pub type Result<T, E = ApiError> = std::result::Result<T, E>;

/// The media type of every error body.
pub const PROBLEM_JSON: &str = "application/problem+json";
/// Most errors listed in one problem (the `detail` says how many there were).
pub const MAX_LISTED_ERRORS: usize = 100;

/// The kinds of problem the API reports, each with its status, slug and title.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ProblemKind {
    /// 400: the body is not well-formed (JSON syntax, unreadable CSV).
    MalformedBody,
    /// 400: a request that cannot be understood for another reason.
    BadRequest,
    /// 401: no key, or a key that is unknown, malformed or revoked.
    Unauthorized,
    /// 403: a valid key whose role or sites do not allow the request.
    Forbidden,
    /// 404: no such resource.
    NotFound,
    /// 405: the path exists but not with this method.
    MethodNotAllowed,
    /// 406: the client accepts no representation we can produce.
    NotAcceptable,
    /// 409: a client revision number older than (or equal to) the stored one, with other
    /// counts.
    StaleRevision,
    /// 408: the body did not arrive within the time allowed for it (the pages' forms).
    BodyTimeout,
    /// 413: the body is larger than the configured limit.
    PayloadTooLarge,
    /// 414: the request's path and query are longer than the server reads.
    UriTooLong,
    /// 429: the API key sent more requests than its rate allows.
    RateLimited,
    /// 415: a body in a media type this endpoint does not take.
    UnsupportedMediaType,
    /// 422: well-formed input that breaks a rule; `errors` names each field.
    Validation,
    /// 422: an `Idempotency-Key` reused with a different body.
    IdempotencyMismatch,
    /// 500: a fault of ours; details are in the server log only.
    Internal,
    /// 503: the database is busy or unreachable, or the server is shutting down.
    Unavailable,
    /// 503: the request took longer than the configured timeout.
    Timeout,
}

impl ProblemKind {
    /// Every kind, for the `/problems/{slug}` pages and tests.
    pub const ALL: [ProblemKind; 18] = [
        ProblemKind::MalformedBody,
        ProblemKind::BadRequest,
        ProblemKind::Unauthorized,
        ProblemKind::Forbidden,
        ProblemKind::NotFound,
        ProblemKind::MethodNotAllowed,
        ProblemKind::NotAcceptable,
        ProblemKind::StaleRevision,
        ProblemKind::PayloadTooLarge,
        ProblemKind::UnsupportedMediaType,
        ProblemKind::Validation,
        ProblemKind::IdempotencyMismatch,
        ProblemKind::Internal,
        ProblemKind::Unavailable,
        ProblemKind::Timeout,
        ProblemKind::BodyTimeout,
        ProblemKind::UriTooLong,
        ProblemKind::RateLimited,
    ];

    /// The HTTP status of this kind.
    pub fn status(self) -> StatusCode {
        match self {
            ProblemKind::MalformedBody | ProblemKind::BadRequest => StatusCode::BAD_REQUEST,
            ProblemKind::Unauthorized => StatusCode::UNAUTHORIZED,
            ProblemKind::Forbidden => StatusCode::FORBIDDEN,
            ProblemKind::NotFound => StatusCode::NOT_FOUND,
            ProblemKind::MethodNotAllowed => StatusCode::METHOD_NOT_ALLOWED,
            ProblemKind::NotAcceptable => StatusCode::NOT_ACCEPTABLE,
            ProblemKind::StaleRevision => StatusCode::CONFLICT,
            ProblemKind::BodyTimeout => StatusCode::REQUEST_TIMEOUT,
            ProblemKind::PayloadTooLarge => StatusCode::PAYLOAD_TOO_LARGE,
            ProblemKind::UriTooLong => StatusCode::URI_TOO_LONG,
            ProblemKind::RateLimited => StatusCode::TOO_MANY_REQUESTS,
            ProblemKind::UnsupportedMediaType => StatusCode::UNSUPPORTED_MEDIA_TYPE,
            ProblemKind::Validation | ProblemKind::IdempotencyMismatch => {
                StatusCode::UNPROCESSABLE_ENTITY
            }
            ProblemKind::Internal => StatusCode::INTERNAL_SERVER_ERROR,
            ProblemKind::Unavailable | ProblemKind::Timeout => StatusCode::SERVICE_UNAVAILABLE,
        }
    }

    /// The last path segment of the problem `type` URI.
    pub fn slug(self) -> &'static str {
        match self {
            ProblemKind::MalformedBody => "malformed-body",
            ProblemKind::BadRequest => "bad-request",
            ProblemKind::Unauthorized => "unauthorized",
            ProblemKind::Forbidden => "forbidden",
            ProblemKind::NotFound => "not-found",
            ProblemKind::MethodNotAllowed => "method-not-allowed",
            ProblemKind::NotAcceptable => "not-acceptable",
            ProblemKind::StaleRevision => "stale-revision",
            ProblemKind::BodyTimeout => "body-timeout",
            ProblemKind::PayloadTooLarge => "payload-too-large",
            ProblemKind::UriTooLong => "uri-too-long",
            ProblemKind::RateLimited => "rate-limited",
            ProblemKind::UnsupportedMediaType => "unsupported-media-type",
            ProblemKind::Validation => "validation",
            ProblemKind::IdempotencyMismatch => "idempotency-key-reused",
            ProblemKind::Internal => "internal",
            ProblemKind::Unavailable => "unavailable",
            ProblemKind::Timeout => "timeout",
        }
    }

    /// The problem `type` URI, `/problems/<slug>`.
    pub fn type_uri(self) -> String {
        format!("/problems/{}", self.slug())
    }

    /// The short, fixed summary of this kind (RFC 9457 `title`).
    pub fn title(self) -> &'static str {
        match self {
            ProblemKind::MalformedBody => "Malformed request body",
            ProblemKind::BadRequest => "Bad request",
            ProblemKind::Unauthorized => "Missing or invalid API key",
            ProblemKind::Forbidden => "Not allowed for this API key",
            ProblemKind::NotFound => "Not found",
            ProblemKind::MethodNotAllowed => "Method not allowed",
            ProblemKind::NotAcceptable => "Not acceptable",
            ProblemKind::StaleRevision => "Stale revision",
            ProblemKind::BodyTimeout => "Request body too slow",
            ProblemKind::PayloadTooLarge => "Request body too large",
            ProblemKind::UriTooLong => "Request URI too long",
            ProblemKind::RateLimited => "Too many requests for this API key",
            ProblemKind::UnsupportedMediaType => "Unsupported media type",
            ProblemKind::Validation => "Invalid input",
            ProblemKind::IdempotencyMismatch => "Idempotency key reused with a different body",
            ProblemKind::Internal => "Internal server error",
            ProblemKind::Unavailable => "Service unavailable",
            ProblemKind::Timeout => "Request timed out",
        }
    }

    /// A paragraph for the `/problems/<slug>` page.
    pub fn description(self) -> &'static str {
        match self {
            ProblemKind::MalformedBody => {
                "The request body could not be read as the declared media type (for example a JSON syntax error or a CSV file whose rows have the wrong number of fields). Nothing was written. Fix the body and send it again."
            }
            ProblemKind::BadRequest => "The request could not be understood. Nothing was written.",
            ProblemKind::Unauthorized => {
                "The request has no `Authorization: Bearer <key>` header, or the key is unknown, malformed or revoked. Keys are created with `dispar keys create`."
            }
            ProblemKind::Forbidden => {
                "The API key is valid but its role does not allow this request, or it is an ingest key writing or reading a site it was not created for. Nothing was written."
            }
            ProblemKind::NotFound => "There is no resource at this path.",
            ProblemKind::MethodNotAllowed => {
                "The path exists but does not take this method; the `Allow` header lists the methods it takes."
            }
            ProblemKind::NotAcceptable => {
                "The `Accept` header asks for a representation this endpoint cannot produce."
            }
            ProblemKind::StaleRevision => {
                "The record carries a `revision` (the sending system's own number) older than or equal to the stored one, with different counts. The member `current_revision` holds the stored `revision`. Nothing was written."
            }
            ProblemKind::BodyTimeout => {
                "The request body did not arrive within the time the server allows for it (5 seconds for the pages' forms, which hold a few hundred bytes). Nothing was read or written. Send the whole body at once."
            }
            ProblemKind::RateLimited => {
                "The API key sent more requests a second than the server allows per key (`dispar serve --rate-limit`). Nothing was done. Retry after the time in `Retry-After`."
            }
            ProblemKind::UriTooLong => {
                "The request's path and query string are longer than the server reads (16 KiB). Every report parameter fits in far less; a request that needs more is likely a mistake in the client."
            }
            ProblemKind::PayloadTooLarge => {
                "The request body is larger than the server's limit (`dispar serve --max-body-bytes`). Split a batch into smaller ones."
            }
            ProblemKind::UnsupportedMediaType => {
                "The request body has a `Content-Type` this endpoint does not take. JSON endpoints take `application/json`; `POST /v1/counts` also takes `text/csv`."
            }
            ProblemKind::Validation => {
                "The body or a parameter is well-formed but breaks a rule: an unknown field, a missing or invalid value, defective above inspected, an unregistered site or line, and so on. Each entry of `errors` names the place (`pointer`, `parameter`, `header`, or `line` and `column` for CSV) and the reason. Nothing was written."
            }
            ProblemKind::IdempotencyMismatch => {
                "The `Idempotency-Key` was used before by this API key with a different request body. Use a new key for a new request. Nothing was written."
            }
            ProblemKind::Internal => {
                "The server failed. The cause is in the server log; nothing about it is shown here. Whether a write took effect can be checked by reading it back or retrying with the same `Idempotency-Key`."
            }
            ProblemKind::Unavailable => {
                "The database is busy or unreachable, or the server is shutting down. Retry after the time in `Retry-After`."
            }
            ProblemKind::Timeout => {
                "The request took longer than the server's limit (`dispar serve --request-timeout`). A write that timed out may or may not have been committed; retry it with the same `Idempotency-Key`, or read it back."
            }
        }
    }

    /// The kind whose slug is `slug`.
    pub fn from_slug(slug: &str) -> Option<ProblemKind> {
        ProblemKind::ALL.into_iter().find(|k| k.slug() == slug)
    }

    /// The kind used when some layer answered `status` without a problem body.
    pub fn for_status(status: StatusCode) -> ProblemKind {
        match status.as_u16() {
            401 => ProblemKind::Unauthorized,
            403 => ProblemKind::Forbidden,
            404 => ProblemKind::NotFound,
            405 => ProblemKind::MethodNotAllowed,
            406 => ProblemKind::NotAcceptable,
            408 => ProblemKind::BodyTimeout,
            409 => ProblemKind::StaleRevision,
            413 => ProblemKind::PayloadTooLarge,
            414 => ProblemKind::UriTooLong,
            429 => ProblemKind::RateLimited,
            415 => ProblemKind::UnsupportedMediaType,
            422 => ProblemKind::Validation,
            503 => ProblemKind::Unavailable,
            s if s >= 500 => ProblemKind::Internal,
            _ => ProblemKind::BadRequest,
        }
    }
}

/// One entry of a problem's `errors` array: where, why (machine-readable), and words.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct ErrorItem {
    /// RFC 6901 JSON pointer into the request body.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pointer: Option<String>,
    /// Name of the path or query parameter.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub parameter: Option<String>,
    /// Name of the request header.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub header: Option<String>,
    /// Line of a CSV body (the header is line 1; a quoted field may span lines, and
    /// the line given is where the record starts).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub line: Option<u64>,
    /// Column name of a CSV body.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub column: Option<String>,
    /// Machine-readable reason (kebab-case).
    pub reason: Cow<'static, str>,
    /// Plain words for a person.
    pub message: String,
}

impl ErrorItem {
    fn bare(reason: impl Into<Cow<'static, str>>, message: impl Into<String>) -> Self {
        Self {
            pointer: None,
            parameter: None,
            header: None,
            line: None,
            column: None,
            reason: reason.into(),
            message: message.into(),
        }
    }

    /// An error at a JSON pointer into the body.
    pub fn pointer(
        pointer: impl Into<String>,
        reason: impl Into<Cow<'static, str>>,
        message: impl Into<String>,
    ) -> Self {
        Self {
            pointer: Some(pointer.into()),
            ..Self::bare(reason, message)
        }
    }

    /// An error in a path or query parameter.
    pub fn parameter(
        name: impl Into<String>,
        reason: impl Into<Cow<'static, str>>,
        message: impl Into<String>,
    ) -> Self {
        Self {
            parameter: Some(name.into()),
            ..Self::bare(reason, message)
        }
    }

    /// An error in a request header.
    pub fn header(
        name: impl Into<String>,
        reason: impl Into<Cow<'static, str>>,
        message: impl Into<String>,
    ) -> Self {
        Self {
            header: Some(name.into()),
            ..Self::bare(reason, message)
        }
    }

    /// An error in a CSV body at `line` (1-based, header = 1), optionally in `column`.
    pub fn csv(
        line: u64,
        column: Option<String>,
        reason: impl Into<Cow<'static, str>>,
        message: impl Into<String>,
    ) -> Self {
        Self {
            line: Some(line),
            column,
            ..Self::bare(reason, message)
        }
    }

    /// An error about the whole request.
    pub fn general(reason: impl Into<Cow<'static, str>>, message: impl Into<String>) -> Self {
        Self::bare(reason, message)
    }
}

/// An API error: a problem kind, the words for this occurrence, the field errors,
/// extra members, extra headers, and (for 5xx) the logged cause.
pub struct ApiError {
    kind: ProblemKind,
    detail: String,
    errors: Vec<ErrorItem>,
    extensions: serde_json::Map<String, serde_json::Value>,
    headers: Vec<(HeaderName, HeaderValue)>,
    cause: Option<Box<dyn std::error::Error + Send + Sync>>,
}

impl fmt::Debug for ApiError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("ApiError")
            .field("kind", &self.kind)
            .field("detail", &self.detail)
            .field("errors", &self.errors)
            .field("cause", &self.cause.as_ref().map(|c| c.to_string()))
            .finish_non_exhaustive()
    }
}

impl fmt::Display for ApiError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{} ({}): {}",
            self.kind.title(),
            self.kind.status(),
            self.detail
        )
    }
}

impl ApiError {
    /// A problem of `kind` with `detail` words for this occurrence.
    pub fn new(kind: ProblemKind, detail: impl Into<String>) -> Self {
        Self {
            kind,
            detail: detail.into(),
            errors: Vec::new(),
            extensions: serde_json::Map::new(),
            headers: Vec::new(),
            cause: None,
        }
    }

    /// 422 with the given field errors.
    pub fn validation(detail: impl Into<String>, errors: Vec<ErrorItem>) -> Self {
        Self::new(ProblemKind::Validation, detail).with_errors(errors)
    }

    /// 404 for the named resource.
    pub fn not_found(detail: impl Into<String>) -> Self {
        Self::new(ProblemKind::NotFound, detail)
    }

    /// 403 with the reason.
    pub fn forbidden(detail: impl Into<String>) -> Self {
        Self::new(ProblemKind::Forbidden, detail).with_header(
            header::WWW_AUTHENTICATE,
            "Bearer realm=\"dispar\", error=\"insufficient_scope\"",
        )
    }

    /// 500; `cause` is logged, never shown.
    pub fn internal(cause: impl Into<Box<dyn std::error::Error + Send + Sync>>) -> Self {
        let mut e = Self::new(
            ProblemKind::Internal,
            "The server failed to handle the request; the cause is in the server log.",
        );
        e.cause = Some(cause.into());
        e
    }

    /// 503 with `Retry-After: seconds`.
    pub fn unavailable(detail: impl Into<String>, retry_after_seconds: u32) -> Self {
        let mut e = Self::new(ProblemKind::Unavailable, detail);
        if let Ok(v) = HeaderValue::from_str(&retry_after_seconds.to_string()) {
            e.headers.push((header::RETRY_AFTER, v));
        }
        e
    }

    /// Adds a `Retry-After` of `seconds`.
    #[must_use]
    pub fn with_retry_after(mut self, seconds: u32) -> Self {
        if let Ok(v) = HeaderValue::from_str(&seconds.to_string()) {
            self.headers.push((header::RETRY_AFTER, v));
        }
        self
    }

    /// Adds field errors.
    #[must_use]
    pub fn with_errors(mut self, errors: Vec<ErrorItem>) -> Self {
        self.errors.extend(errors);
        self
    }

    /// Adds one field error.
    #[must_use]
    pub fn with_error(mut self, error: ErrorItem) -> Self {
        self.errors.push(error);
        self
    }

    /// Adds an extension member to the body (RFC 9457 section 3.2).
    #[must_use]
    pub fn with_extension(mut self, name: &str, value: impl Into<serde_json::Value>) -> Self {
        self.extensions.insert(name.to_owned(), value.into());
        self
    }

    /// Adds a response header.
    #[must_use]
    pub fn with_header(mut self, name: HeaderName, value: &'static str) -> Self {
        self.headers.push((name, HeaderValue::from_static(value)));
        self
    }

    /// Records the underlying cause (logged for 5xx, otherwise at debug level).
    #[must_use]
    pub fn with_cause(
        mut self,
        cause: impl Into<Box<dyn std::error::Error + Send + Sync>>,
    ) -> Self {
        self.cause = Some(cause.into());
        self
    }

    /// The kind of problem.
    pub fn kind(&self) -> ProblemKind {
        self.kind
    }

    /// The HTTP status.
    pub fn status(&self) -> StatusCode {
        self.kind.status()
    }

    /// The field errors.
    pub fn errors(&self) -> &[ErrorItem] {
        &self.errors
    }

    /// The problem body as JSON.
    pub fn body(&self) -> serde_json::Value {
        serde_json::to_value(self.problem()).unwrap_or_default()
    }

    fn problem(&self) -> ProblemBody<'_> {
        ProblemBody {
            type_uri: self.kind.type_uri(),
            title: self.kind.title(),
            status: self.kind.status().as_u16(),
            detail: &self.detail,
            errors: &self.errors,
            extensions: &self.extensions,
        }
    }
}

/// The serialized problem, members in the order RFC 9457 lists them.
#[derive(Serialize)]
struct ProblemBody<'a> {
    #[serde(rename = "type")]
    type_uri: String,
    title: &'static str,
    status: u16,
    detail: &'a str,
    errors: &'a [ErrorItem],
    #[serde(flatten)]
    extensions: &'a serde_json::Map<String, serde_json::Value>,
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let status = self.kind.status();
        if status.is_server_error() {
            match &self.cause {
                Some(cause) => {
                    tracing::error!(problem = self.kind.slug(), error = %cause, "request failed")
                }
                None => {
                    tracing::warn!(problem = self.kind.slug(), detail = %self.detail, "request failed")
                }
            }
        } else if let Some(cause) = &self.cause {
            tracing::debug!(problem = self.kind.slug(), error = %cause, "request refused");
        }
        let body = serde_json::to_vec(&self.problem()).unwrap_or_default();
        let mut response = (status, body).into_response();
        let headers = response.headers_mut();
        headers.insert(header::CONTENT_TYPE, HeaderValue::from_static(PROBLEM_JSON));
        for (name, value) in self.headers {
            headers.append(name, value);
        }
        response
    }
}

impl From<dispar_core::error::ValidationError> for ApiError {
    /// Field errors of a JSON body; the core's field paths become JSON pointers.
    fn from(e: dispar_core::error::ValidationError) -> Self {
        let errors = e
            .into_errors()
            .into_iter()
            .map(field_error_to_pointer)
            .collect();
        ApiError::validation("The request body has invalid fields.", errors)
    }
}

/// The one mapping of store errors to API errors, for every endpoint without a more
/// specific one. Refused records are named as fields of a record whose key is in the
/// URL; a batch names its records itself with [`rejected_records`].
impl From<StoreError> for ApiError {
    fn from(e: StoreError) -> Self {
        match e {
            StoreError::NotFound { what, key } => {
                ApiError::not_found(format!("There is no {what} {key}."))
            }
            StoreError::UnknownSite { site } => ApiError::validation(
                format!("Site {site} is not registered."),
                vec![ErrorItem::parameter(
                    "site",
                    "unknown-site",
                    format!("site {site} is not registered"),
                )],
            ),
            StoreError::Rejected(list) => rejected_records(list, |_, field, reason, message| {
                url_record_item(field, reason, message)
            }),
            StoreError::IdempotencyMismatch => ApiError::new(
                ProblemKind::IdempotencyMismatch,
                "This Idempotency-Key was already used by this API key with a different body; nothing was written.",
            )
            .with_error(ErrorItem::header(
                "idempotency-key",
                "reused",
                "use a new key for a new request",
            )),
            StoreError::BadCursor => ApiError::validation(
                "The cursor is not one this server gave out.",
                vec![ErrorItem::parameter(
                    "cursor",
                    "invalid-cursor",
                    "use next_cursor unchanged",
                )],
            ),
            StoreError::Constraint { name } => {
                tracing::warn!(constraint = %name, "a database constraint refused a value the domain accepted");
                ApiError::validation(
                    "A value was refused by the database.",
                    // The constraint's name is logged above, not shown: it is internal.
                    vec![ErrorItem::general(
                        "constraint",
                        "a stored value broke a database rule",
                    )],
                )
            }
            StoreError::Busy | StoreError::WriteConflict => ApiError::unavailable("The database is busy; retry shortly.", 1),
            e @ (StoreError::Unsupported(_) | StoreError::Internal(_)) => ApiError::internal(e),
        }
    }
}

/// The error item for `field` of the one record whose key is in the URL: the key's
/// parts are path parameters, the rest is in the body.
pub fn url_record_item(field: &str, reason: &'static str, message: String) -> ErrorItem {
    match field {
        "site" | "line" => ErrorItem::parameter(field, reason, message),
        _ => ErrorItem::pointer(format!("/{field}"), reason, message),
    }
}

/// A refused write as 422 (unknown site or line, out of range) or 409 (stale revision
/// only), naming each refused record (at most [`MAX_LISTED_ERRORS`]) with
/// `item(index, field, reason, message)`.
pub fn rejected_records(
    list: Vec<RecordError>,
    item: impl Fn(usize, &str, &'static str, String) -> ErrorItem,
) -> ApiError {
    let total = list.len();
    let only_conflicts = list
        .iter()
        .all(|r| matches!(r.problem, RecordProblem::Conflict { .. }));
    let first_conflict = list.iter().find_map(|r| match r.problem {
        RecordProblem::Conflict {
            current_revision, ..
        } => Some(current_revision),
        _ => None,
    });
    let items: Vec<ErrorItem> = list
        .into_iter()
        .take(MAX_LISTED_ERRORS)
        .map(|RecordError { index, problem }| match problem {
            RecordProblem::UnknownSite { site } => item(
                index,
                "site",
                "unknown-site",
                format!("site {site} is not registered"),
            ),
            RecordProblem::UnknownLine { site, line } => item(
                index,
                "line",
                "unknown-line",
                format!("line {line} is not registered at site {site}"),
            ),
            RecordProblem::Conflict {
                current_revision, ..
            } => item(
                index,
                "revision",
                "stale-revision",
                format!(
                    "revision is not newer than the current revision {current_revision}, and the counts differ"
                ),
            ),
            RecordProblem::OutOfRange { field } => item(
                index,
                &field,
                "too-large",
                format!("{field} is out of range"),
            ),
        })
        .collect();
    let suffix = if total > MAX_LISTED_ERRORS {
        format!(" The first {MAX_LISTED_ERRORS} of {total} are listed.")
    } else {
        String::new()
    };
    if only_conflicts {
        let current = first_conflict.unwrap_or_default();
        ApiError::new(
            ProblemKind::StaleRevision,
            format!(
                "{total} record(s) carry a revision not newer than the stored one (current revision {current}); nothing was written.{suffix}"
            ),
        )
        .with_extension("current_revision", current)
        .with_errors(items)
    } else {
        ApiError::validation(
            format!("{total} record(s) were refused; nothing was written.{suffix}"),
            items,
        )
    }
}

/// A core validation error as a 422 where fields named in `path_params` are path
/// parameters (`parameter`) and every other field is in the JSON body (`pointer`).
pub fn validation_with_params(
    e: dispar_core::error::ValidationError,
    path_params: &[&str],
) -> ApiError {
    let mut in_params = false;
    let mut in_body = false;
    let errors = e
        .into_errors()
        .into_iter()
        .map(|fe| {
            if path_params.contains(&fe.field.as_str()) {
                in_params = true;
                ErrorItem::parameter(fe.field, fe.reason, fe.message)
            } else {
                in_body = true;
                field_error_to_pointer(fe)
            }
        })
        .collect();
    let detail = match (in_params, in_body) {
        (true, false) => "The path has invalid parameters.",
        (false, _) => "The request body has invalid fields.",
        (true, true) => "The path and the request body have invalid values.",
    };
    ApiError::validation(detail, errors)
}

/// A core [`dispar_core::error::FieldError`] as an [`ErrorItem`] with a JSON pointer.
pub fn field_error_to_pointer(e: dispar_core::error::FieldError) -> ErrorItem {
    let pointer = if e.field.starts_with('/') || e.field.is_empty() {
        e.field
    } else {
        format!("/{}", e.field)
    };
    ErrorItem::pointer(pointer, e.reason, e.message)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_kind_has_a_distinct_slug_and_round_trips() {
        for k in ProblemKind::ALL {
            assert_eq!(ProblemKind::from_slug(k.slug()), Some(k), "{k:?}");
            assert_eq!(
                ProblemKind::ALL
                    .iter()
                    .filter(|o| o.slug() == k.slug())
                    .count(),
                1
            );
        }
    }

    #[test]
    fn a_problem_body_has_the_rfc_9457_members_and_an_errors_array() {
        let e = ApiError::validation(
            "bad",
            vec![ErrorItem::pointer(
                "/records/3/defective",
                "exceeds-inspected",
                "too many",
            )],
        )
        .with_extension("current_revision", 4);
        let b = e.body();
        assert_eq!(b["type"], "/problems/validation");
        assert_eq!(b["title"], "Invalid input");
        assert_eq!(b["status"], 422);
        assert_eq!(b["detail"], "bad");
        assert_eq!(b["errors"][0]["pointer"], "/records/3/defective");
        assert_eq!(b["errors"][0]["reason"], "exceeds-inspected");
        assert!(b["errors"][0].get("line").is_none());
        assert_eq!(b["current_revision"], 4);
    }

    #[test]
    fn an_internal_error_never_shows_its_cause() {
        let e = ApiError::internal("database file /secret/path is locked by pid 42");
        let text = e.body().to_string();
        assert!(!text.contains("secret"), "{text}");
        assert_eq!(e.status(), StatusCode::INTERNAL_SERVER_ERROR);
    }
}

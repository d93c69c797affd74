//! Operations: `/livez`, `/readyz`, `/metrics`, the `/problems/{slug}` pages,
//! `/openapi.yaml` (the API contract), and the middleware every request passes
//! (metrics, timeout, problem bodies for errors produced outside our handlers).
//! The metric names and the recorder are in [`crate::telemetry`].

use std::time::{Duration, Instant};

use axum::Router;
use axum::extract::{MatchedPath, Request, State};
use axum::http::header::{self, HeaderValue};
use axum::http::{Method, StatusCode};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use axum::routing::get;

use crate::error::{ApiError, PROBLEM_JSON, ProblemKind};
use crate::extract::Segments;
use crate::state::AppState;
use crate::telemetry::{IN_FLIGHT, REQUEST_DURATION, REQUESTS_TOTAL};

/// The operations routes (no key needed).
pub fn router() -> Router<AppState> {
    Router::new()
        .route("/livez", get(livez))
        .route("/readyz", get(readyz))
        .route("/metrics", get(render_metrics))
        .route("/problems/{slug}", get(problem_page))
        .route("/openapi.yaml", get(openapi_yaml))
}

/// The API contract (`openapi.yaml` at the top of the repository), compiled in.
pub const OPENAPI_YAML: &str = include_str!("../../../openapi.yaml");

/// `GET /openapi.yaml`: the contract this server was built with (no key needed).
async fn openapi_yaml() -> impl IntoResponse {
    (
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/yaml"),
        )],
        OPENAPI_YAML,
    )
}

/// 200 while the process runs.
async fn livez() -> impl IntoResponse {
    axum::Json(serde_json::json!({"status": "ok"}))
}

/// 200 when the database answers within 2 s and shutdown has not begun; else 503.
async fn readyz(State(state): State<AppState>) -> Result<impl IntoResponse, ApiError> {
    if state.is_shutting_down() {
        return Err(ApiError::unavailable("The server is shutting down.", 5));
    }
    match tokio::time::timeout(Duration::from_secs(2), state.store().ping()).await {
        Ok(Ok(())) => Ok(axum::Json(serde_json::json!({"status": "ready"}))),
        Ok(Err(e)) => {
            tracing::warn!(error = %e, "readiness check: database ping failed");
            Err(ApiError::unavailable("The database does not answer.", 5))
        }
        Err(_) => {
            tracing::warn!("readiness check: database ping timed out");
            Err(ApiError::unavailable(
                "The database does not answer in time.",
                5,
            ))
        }
    }
}

async fn render_metrics(State(state): State<AppState>) -> impl IntoResponse {
    (
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("text/plain; version=0.0.4; charset=utf-8"),
        )],
        state.metrics().render(),
    )
}

/// A short HTML page describing a problem type (rendered like the other pages, so
/// with their escaping, style sheet and headers).
async fn problem_page(Segments(slug): Segments<String>) -> Result<Response, ApiError> {
    let Some(kind) = ProblemKind::from_slug(&slug) else {
        return Err(ApiError::not_found(format!(
            "There is no problem type {slug:?}."
        )));
    };
    Ok(crate::page::html(
        StatusCode::OK,
        crate::page::render::render_problem_type(
            kind.title(),
            kind.status().as_u16(),
            &kind.type_uri(),
            kind.description(),
        ),
    ))
}

/// Fallback for unknown paths: 404 problem.
pub async fn not_found(method: Method, uri: axum::http::Uri) -> ApiError {
    ApiError::not_found(format!("There is no resource at {method} {}.", uri.path()))
}

/// The `method` label of a request: the methods of RFC 9110 by name, every other token
/// as `other`. Any token is a valid method, and a label per token would let anyone grow
/// the metrics (and the `/metrics` body) without bound.
fn method_label(method: &Method) -> &'static str {
    const KNOWN: [(Method, &str); 9] = [
        (Method::GET, "GET"),
        (Method::HEAD, "HEAD"),
        (Method::POST, "POST"),
        (Method::PUT, "PUT"),
        (Method::DELETE, "DELETE"),
        (Method::PATCH, "PATCH"),
        (Method::OPTIONS, "OPTIONS"),
        (Method::CONNECT, "CONNECT"),
        (Method::TRACE, "TRACE"),
    ];
    KNOWN
        .iter()
        .find(|(m, _)| m == method)
        .map_or("other", |(_, name)| name)
}

/// Middleware: records request count, latency and in-flight gauge by route template.
pub async fn track_metrics(request: Request, next: Next) -> Response {
    let route = request
        .extensions()
        .get::<MatchedPath>()
        .map_or_else(|| "unmatched".to_owned(), |p| p.as_str().to_owned());
    let method = method_label(request.method());
    let start = Instant::now();
    let gauge = metrics::gauge!(IN_FLIGHT);
    gauge.increment(1.0);
    let response = next.run(request).await;
    gauge.decrement(1.0);
    let status = response.status().as_u16().to_string();
    metrics::counter!(REQUESTS_TOTAL, "method" => method, "route" => route.clone(), "status" => status)
        .increment(1);
    metrics::histogram!(REQUEST_DURATION, "method" => method, "route" => route)
        .record(start.elapsed().as_secs_f64());
    response
}

/// Middleware: answers 503 `timeout` when the handler takes longer than the limit.
///
/// The handler's future is dropped; a write in progress is rolled back by the store,
/// unless its commit had already been handed to SQLite, which is why the problem says
/// the write may or may not have happened.
pub async fn timeout(State(state): State<AppState>, request: Request, next: Next) -> Response {
    let limit = state.limits().request_timeout;
    match tokio::time::timeout(limit, next.run(request)).await {
        Ok(response) => response,
        Err(_) => ApiError::new(
            ProblemKind::Timeout,
            format!("The request took longer than {} ms.", limit.as_millis()),
        )
        .into_response(),
    }
}

/// The longest path and query the server reads (bytes). hyper itself answers a bare 414
/// only above 64 KiB; below that this limit answers with a problem body.
pub const MAX_URI_BYTES: usize = 16 * 1024;

/// Middleware: 414 `uri-too-long` for a path and query longer than [`MAX_URI_BYTES`].
pub async fn limit_uri(request: Request, next: Next) -> Response {
    let length = request
        .uri()
        .path_and_query()
        .map_or(0, |p| p.as_str().len());
    if length > MAX_URI_BYTES {
        return ApiError::new(
            ProblemKind::UriTooLong,
            format!("The path and query hold {length} bytes; at most {MAX_URI_BYTES} are read."),
        )
        .into_response();
    }
    next.run(request).await
}

/// Middleware: gives error responses of the framework a problem body. Our handlers
/// already answer with `application/problem+json` (and the HTML pages with HTML);
/// this catches the rest — bodiless or `text/plain` errors such as axum's 405, a
/// panic caught by `CatchPanicLayer`, a body-limit layer — keeping their headers.
pub async fn problem_bodies(request: Request, next: Next) -> Response {
    let response = next.run(request).await;
    let status = response.status();
    if !(status.is_client_error() || status.is_server_error()) {
        return response;
    }
    // Framework and layer errors come without a body type or as text/plain; anything
    // else (our problems, the HTML pages' own error pages) is already meant as it is.
    let from_framework = match response.headers().get(header::CONTENT_TYPE) {
        None => true,
        Some(v) => v.as_bytes().starts_with(b"text/plain"),
    };
    if !from_framework {
        return response;
    }
    let kind = ProblemKind::for_status(status);
    let detail = match status {
        StatusCode::METHOD_NOT_ALLOWED => {
            "This path does not take this method; see the Allow header.".to_owned()
        }
        s if s.is_server_error() => {
            "The server failed to handle the request; the cause is in the server log.".to_owned()
        }
        s => s.canonical_reason().unwrap_or("Request refused").to_owned(),
    };
    let mut body = ApiError::new(kind, detail).body();
    // Keep the status that was chosen (e.g. 429 from a layer); the body says the same.
    body["status"] = status.as_u16().into();
    let (mut parts, _) = response.into_parts();
    parts.headers.remove(header::CONTENT_LENGTH);
    parts
        .headers
        .insert(header::CONTENT_TYPE, HeaderValue::from_static(PROBLEM_JSON));
    Response::from_parts(
        parts,
        axum::body::Body::from(serde_json::to_vec(&body).unwrap_or_default()),
    )
}

#[cfg(test)]
mod method_label_tests {
    use super::*;

    #[test]
    fn made_up_methods_share_one_label() {
        assert_eq!(method_label(&Method::GET), "GET");
        assert_eq!(method_label(&Method::PATCH), "PATCH");
        for token in ["FOO", "get", "X-1", "PROPFIND"] {
            let m = Method::from_bytes(token.as_bytes()).expect("a valid token");
            assert_eq!(method_label(&m), "other", "{token}");
        }
    }
}

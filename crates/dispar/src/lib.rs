//! The dispar HTTP service: an axum [`app`] over a [`dispar_store::Store`], and
//! [`serve`] with graceful shutdown.
//!
//! Modules, by resource and then by concern:
//!
//! - [`sites`]: the registry of sites and lines (`/v1/sites`);
//! - [`counts`]: daily count records, one at a time or in batches (`/v1/counts`);
//! - [`reports`]: period reports and series (`/v1/reports`), and the
//!   [`reports::ReportService`] that computes every report;
//! - [`page`]: the HTML pages for people (sign-in, report, series);
//! - [`auth`]: API keys and the [`auth::Caller`] of a request;
//! - [`ops`]: probes, `/metrics`, problem pages, `/openapi.yaml`, and the middleware;
//! - [`error`]: the one error type, [`ApiError`], and the mapping of store errors;
//! - [`extract`]: the extractors that keep every refusal in the problem-details shape;
//! - [`state`]: the [`AppState`] every handler shares, and the [`Limits`];
//! - [`gate`]: the key cache and the rate limit per key;
//! - [`listen`]: the accept loop (header timeout, connection cap, draining);
//! - [`telemetry`]: logging setup, the metrics recorder and the metric names.
//!
//! The binary (`main.rs`, with its subcommands in `cli/`) adds the command line.

#![cfg_attr(test, allow(clippy::unwrap_used))]

pub mod auth;
pub mod counts;
pub mod error;
pub mod extract;
pub mod gate;
pub mod listen;
pub mod ops;
pub mod page;
pub mod reports;
pub mod sites;
pub mod state;
pub mod telemetry;

use std::future::Future;

use axum::Router;
use axum::extract::{DefaultBodyLimit, MatchedPath};
use axum::http::Request;
use axum::middleware::{from_fn, from_fn_with_state};
use tokio::net::TcpListener;
use tower::limit::GlobalConcurrencyLimitLayer;
use tower_http::LatencyUnit;
use tower_http::catch_panic::CatchPanicLayer;
use tower_http::request_id::{MakeRequestUuid, PropagateRequestIdLayer, SetRequestIdLayer};
use tower_http::trace::{DefaultOnResponse, TraceLayer};

pub use crate::error::{ApiError, Result};
pub use crate::state::{AppState, Limits};

/// The whole HTTP application: `/v1` resources behind the concurrency limit, the pages
/// behind their own (smaller) budget with their form bodies read first, the operations
/// routes, and the layers every request passes (outermost first):
/// problem bodies for any error, request id, tracing, metrics, panic catching,
/// timeout, body size limit.
pub fn app(state: AppState) -> Router {
    let limits = state.limits();
    let v1 = Router::new()
        .merge(sites::router())
        .merge(counts::router())
        .merge(reports::router())
        .layer(GlobalConcurrencyLimitLayer::new(limits.max_concurrency));
    // Layers added last run first: the form body is read before a page slot is taken.
    let pages = page::router()
        .layer(GlobalConcurrencyLimitLayer::new(page::concurrency_budget(
            limits.max_concurrency,
        )))
        .layer(from_fn(page::read_form_body));
    let trace = TraceLayer::new_for_http()
        .make_span_with(|request: &Request<_>| {
            let request_id = request
                .headers()
                .get("x-request-id")
                .and_then(|v| v.to_str().ok())
                .unwrap_or("");
            let route = request
                .extensions()
                .get::<MatchedPath>()
                .map_or("unmatched", MatchedPath::as_str);
            tracing::info_span!(
                "request",
                method = %request.method(),
                path = %request.uri().path(),
                route,
                request_id,
                key_id = tracing::field::Empty,
            )
        })
        .on_response(
            DefaultOnResponse::new()
                .level(tracing::Level::INFO)
                .latency_unit(LatencyUnit::Micros),
        );
    Router::new()
        .merge(ops::router())
        .merge(v1)
        .merge(pages)
        .fallback(ops::not_found)
        .layer(DefaultBodyLimit::max(limits.max_body_bytes))
        .layer(from_fn_with_state(state.clone(), ops::timeout))
        .layer(from_fn(ops::limit_uri))
        .layer(CatchPanicLayer::new())
        .layer(from_fn(ops::track_metrics))
        .layer(PropagateRequestIdLayer::x_request_id())
        .layer(trace)
        .layer(SetRequestIdLayer::x_request_id(MakeRequestUuid))
        .layer(from_fn(ops::problem_bodies))
        .with_state(state)
}

/// Serves [`app`] on `listener` until `shutdown` completes, then stops accepting,
/// lets in-flight requests finish (each bounded by the request timeout), marks the
/// server not ready, and closes the store.
pub async fn serve<F>(listener: TcpListener, state: AppState, shutdown: F) -> std::io::Result<()>
where
    F: Future<Output = ()> + Send + 'static,
{
    let router = app(state.clone());
    let metrics = state.metrics().clone();
    let upkeep = tokio::spawn(async move {
        let mut tick = tokio::time::interval(std::time::Duration::from_secs(5));
        loop {
            tick.tick().await;
            metrics.run_upkeep();
        }
    });
    let purge = tokio::spawn(purge_idempotency(state.clone()));
    let flag = state.clone();
    let limits = state.limits();
    let result = listen::serve_connections(listener, router, &limits, async move {
        shutdown.await;
        flag.begin_shutdown();
        tracing::info!("shutdown requested; finishing in-flight requests");
    })
    .await;
    upkeep.abort();
    purge.abort();
    state.store().close().await;
    tracing::info!("server stopped");
    result
}

/// Hourly: forgets batch answers older than the retention, so the idempotency table
/// does not grow without bound. A failed purge is logged and tried again next hour.
async fn purge_idempotency(state: AppState) {
    let retention = state.limits().idempotency_retention;
    let mut tick = tokio::time::interval(std::time::Duration::from_secs(3600));
    loop {
        tick.tick().await;
        let Ok(age) = time::Duration::try_from(retention) else {
            return;
        };
        let before = time::OffsetDateTime::now_utc() - age;
        match state.store().purge_idempotency(before).await {
            Ok(0) => {}
            Ok(n) => tracing::info!(purged = n, "forgot old idempotency answers"),
            Err(e) => tracing::warn!(error = %e, "idempotency purge failed"),
        }
    }
}

/// Completes on SIGTERM or Ctrl-C (SIGINT).
pub async fn shutdown_signal() {
    let ctrl_c = async {
        if let Err(e) = tokio::signal::ctrl_c().await {
            tracing::error!(error = %e, "cannot listen for Ctrl-C");
            std::future::pending::<()>().await;
        }
    };
    #[cfg(unix)]
    let terminate = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(e) => {
                tracing::error!(error = %e, "cannot listen for SIGTERM");
                std::future::pending::<()>().await;
            }
        }
    };
    #[cfg(not(unix))]
    let terminate = std::future::pending::<()>();
    tokio::select! {
        () = ctrl_c => tracing::info!("received Ctrl-C"),
        () = terminate => tracing::info!("received SIGTERM"),
    }
}

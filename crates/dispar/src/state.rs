//! The state every handler shares: the store, the report service (with its cache and
//! CPU slots), the pages' state, the metrics handle, the limits and the shutdown
//! flag. Nothing of it lives in a global or in a request extension.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

use axum::extract::FromRef;
use dispar_store::Store;
use metrics_exporter_prometheus::PrometheusHandle;

use crate::page::state::PageState;
use crate::reports::service::ReportService;

/// Request limits of the server (from `dispar serve` flags).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Limits {
    /// Largest accepted request body, in bytes (413 above it).
    pub max_body_bytes: usize,
    /// Longest time a request may take (503 `timeout` after it).
    pub request_timeout: Duration,
    /// Most `/v1` requests handled at once; more wait for a slot (within the timeout).
    pub max_concurrency: usize,
    /// Most records in one batch (422 above it).
    pub max_batch_records: usize,
    /// How long a batch answer stays replayable under its `Idempotency-Key`; older
    /// answers are purged hourly, after which the same key starts afresh.
    pub idempotency_retention: Duration,
    /// How long a client may take to send a request's headers, and how long an idle
    /// keep-alive connection waits for the next request, before it is closed.
    pub header_timeout: Duration,
    /// Most open client connections; more wait in the listen backlog until one closes.
    pub max_connections: usize,
    /// Requests per second per API key (a burst of twice that); 0 turns the limit off.
    pub rate_limit: u32,
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            max_body_bytes: 16 * 1024 * 1024,
            request_timeout: Duration::from_secs(30),
            max_concurrency: 64,
            max_batch_records: 10_000,
            idempotency_retention: Duration::from_secs(7 * 24 * 3600),
            header_timeout: Duration::from_secs(10),
            max_connections: 1024,
            rate_limit: 1000,
        }
    }
}

/// Shared state, cheap to clone.
#[derive(Debug, Clone)]
pub struct AppState {
    inner: Arc<Inner>,
}

#[derive(Debug)]
struct Inner {
    store: Arc<dyn Store>,
    reports: ReportService,
    pages: Arc<PageState>,
    metrics: PrometheusHandle,
    limits: Limits,
    gate: crate::gate::Gate,
    shutting_down: AtomicBool,
}

impl AppState {
    /// State over `store` with `limits`; metrics go to the process-wide recorder.
    /// Reports are bounded by the request timeout.
    pub fn new(store: Arc<dyn Store>, limits: Limits) -> Self {
        Self {
            inner: Arc::new(Inner {
                reports: ReportService::new(store.clone(), Some(limits.request_timeout)),
                pages: Arc::new(PageState::new()),
                store,
                metrics: crate::telemetry::metrics_handle(),
                limits,
                gate: crate::gate::Gate::default(),
                shutting_down: AtomicBool::new(false),
            }),
        }
    }

    /// The store.
    pub fn store(&self) -> &Arc<dyn Store> {
        &self.inner.store
    }

    /// The one owner of report computation (and of the report cache).
    pub fn reports(&self) -> &ReportService {
        &self.inner.reports
    }

    /// The pages' sessions and look-ups.
    pub fn pages(&self) -> &Arc<PageState> {
        &self.inner.pages
    }

    /// The Prometheus handle (renders `/metrics`).
    pub fn metrics(&self) -> &PrometheusHandle {
        &self.inner.metrics
    }

    /// The limits.
    pub fn limits(&self) -> Limits {
        self.inner.limits
    }

    /// The key cache and the per-key rate limit.
    pub fn gate(&self) -> &crate::gate::Gate {
        &self.inner.gate
    }

    /// Marks the server as shutting down: `/readyz` answers 503 from now on.
    pub fn begin_shutdown(&self) {
        self.inner.shutting_down.store(true, Ordering::SeqCst);
    }

    /// True once shutdown has begun.
    pub fn is_shutting_down(&self) -> bool {
        self.inner.shutting_down.load(Ordering::SeqCst)
    }
}

/// The page handlers take their own state as `State<Arc<PageState>>`.
impl FromRef<AppState> for Arc<PageState> {
    fn from_ref(state: &AppState) -> Self {
        state.pages().clone()
    }
}

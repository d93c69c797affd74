//! What the server tells its operators: logs and metrics.
//!
//! Logs go to standard error as text or as one JSON object per line, filtered by
//! `RUST_LOG` (default `info`); see [`init`].
//!
//! Metrics (Prometheus text format, `GET /metrics`, no key needed), recorded into the
//! process-wide recorder of [`metrics_handle`]:
//! - `dispar_http_requests_total{method, route, status}` — `route` is the route
//!   template (`/v1/sites/{site}`), or `unmatched`, so the label set stays small;
//! - `dispar_http_request_duration_seconds{method, route}` — a histogram;
//! - `dispar_http_requests_in_flight` — a gauge;
//! - `dispar_records_written_total{outcome}` — count records by `created`,
//!   `corrected`, `unchanged`, counted after the commit returned;
//! - `dispar_report_cache_total{result}` — report answers by `hit`, `miss`,
//!   `not_modified`.

use std::str::FromStr;
use std::sync::OnceLock;

use metrics_exporter_prometheus::{Matcher, PrometheusBuilder, PrometheusHandle};
use tracing_subscriber::EnvFilter;

/// How log lines are written.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, clap::ValueEnum)]
pub enum LogFormat {
    /// Human-readable lines.
    #[default]
    Text,
    /// One JSON object per line, for log collectors.
    Json,
}

impl FromStr for LogFormat {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "text" => Ok(LogFormat::Text),
            "json" => Ok(LogFormat::Json),
            other => Err(format!(
                "unknown log format {other:?}; expected text or json"
            )),
        }
    }
}

/// Counter of requests.
pub const REQUESTS_TOTAL: &str = "dispar_http_requests_total";
/// Histogram of request latency in seconds.
pub const REQUEST_DURATION: &str = "dispar_http_request_duration_seconds";
/// Gauge of requests being handled.
pub const IN_FLIGHT: &str = "dispar_http_requests_in_flight";
/// Counter of count records by outcome.
pub const RECORDS_WRITTEN: &str = "dispar_records_written_total";
/// Counter of report answers by cache outcome.
pub const CACHE_TOTAL: &str = "dispar_report_cache_total";

const LATENCY_BUCKETS: [f64; 14] = [
    0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0,
];

/// The process-wide Prometheus recorder's handle, installed on first use.
///
/// The `metrics` macros write to one global recorder, which a process can install only
/// once; so its handle is kept here, for every `AppState` of the process (tests build
/// many), rather than in one of them.
///
/// If another recorder was installed first (not done anywhere in dispar), metrics are
/// rendered from a recorder of our own that nothing writes to, and a warning is logged.
pub fn metrics_handle() -> PrometheusHandle {
    static HANDLE: OnceLock<PrometheusHandle> = OnceLock::new();
    HANDLE
        .get_or_init(|| {
            let builder = || {
                PrometheusBuilder::new()
                    .set_buckets_for_metric(Matcher::Full(REQUEST_DURATION.to_owned()), &LATENCY_BUCKETS)
            };
            match builder().and_then(PrometheusBuilder::install_recorder) {
                Ok(handle) => {
                    metrics::describe_counter!(REQUESTS_TOTAL, "HTTP requests by method, route template and status");
                    metrics::describe_histogram!(
                        REQUEST_DURATION,
                        metrics::Unit::Seconds,
                        "HTTP request latency by method and route template"
                    );
                    metrics::describe_gauge!(IN_FLIGHT, "HTTP requests being handled");
                    metrics::describe_counter!(
                        RECORDS_WRITTEN,
                        "Count records in committed writes, by outcome (created, corrected, unchanged)"
                    );
                    metrics::describe_counter!(
                        CACHE_TOTAL,
                        "Report answers by cache outcome (hit, miss, not_modified)"
                    );
                    handle
                }
                Err(e) => {
                    tracing::warn!(error = %e, "could not install the metrics recorder; /metrics will be empty");
                    PrometheusBuilder::new().build_recorder().handle()
                }
            }
        })
        .clone()
}

/// Counts records of a committed write.
pub fn count_records(created: usize, corrected: usize, unchanged: usize) {
    for (outcome, n) in [
        ("created", created),
        ("corrected", corrected),
        ("unchanged", unchanged),
    ] {
        if n > 0 {
            metrics::counter!(RECORDS_WRITTEN, "outcome" => outcome).increment(n as u64);
        }
    }
}

/// Installs the global subscriber. Calling it again does nothing.
pub fn init(format: LogFormat) {
    let filter = EnvFilter::try_from_default_env().unwrap_or_else(|_| EnvFilter::new("info"));
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()));
    let result = match format {
        LogFormat::Text => builder.try_init(),
        LogFormat::Json => builder
            .json()
            .with_current_span(true)
            .with_span_list(false)
            .try_init(),
    };
    // An error means a subscriber is already installed (tests); keep that one.
    drop(result);
}

//! Period reports: `GET /v1/reports` (one period) and `GET /v1/reports/series`
//! (per-period verdicts over a range).
//!
//! # Parameters
//!
//! `period` (reports; `2026-03-14`, `2026-W11`, `2026-03`, `2026-Q1`, `2026`,
//! `2026-03-01..2026-03-20`) or `from` and `to` (series; two periods of the same
//! kind, at most [`spec::MAX_SERIES_PERIODS`] periods); `level` = `site` (default),
//! `line` (the lines of the site given by `site`), `all-lines`; filters `site` and
//! `product`; `alpha`, `method`, `pairwise`, `adjust`, `resamples`,
//! `min_difference`, `overdispersion` as in `dispar analyze`; `as_of` (RFC 3339: the
//! data as they stood then). Every bad parameter is named in one 422 problem
//! (`errors[].parameter`); an unknown parameter is a 422 too. A `site` that is not
//! registered is a 422 with reason `unknown_site` on `site` (a filter is not a
//! resource, so not a 404); an unknown `product` simply matches no data.
//!
//! # Who may ask
//!
//! Read and admin keys: any report. An ingest key: only reports confined to one of
//! its own sites, that is with `site=` naming it (any level: `level=line&site=S1`
//! compares S1's lines); without `site=`, or with another site, it is 403. The same
//! rule as the count listing.
//!
//! # Caching
//!
//! Every answer carries a weak `ETag` derived from the normalized request (parameters
//! as parsed, so `alpha=0.05` and `alpha=0.050` are one request) and the store's data
//! version, which every write bumps, and `Cache-Control: private, no-cache`. A request
//! whose `If-None-Match` holds the current tag gets 304 after one cheap read of the
//! data version: no sums, no statistics (`If-None-Match: *` is answered 304 only once the
//! request proved valid, RFC 9110 section 13.1.2). Rendered bodies are kept in a bounded
//! in-memory [`cache::ReportCache`] (per server instance) under the same key, so a
//! repeated request is served without recomputing; a write makes every older entry
//! unreachable. `as_of` reports are keyed the same way (the registered groups and
//! their names, which an `as_of` report also shows, are current, not historical).
//! The counter `dispar_report_cache_total{result="hit|miss|not_modified"}` counts the
//! outcomes, and a `Server-Timing` header says where a computed answer spent its time
//! (`db`, `stats`, `json`, in milliseconds) or that it came from the cache.

pub mod cache;
pub mod compute;
pub mod spec;

use std::future::Future;
use std::sync::Arc;
use std::time::Instant;

use axum::body::Bytes;
use axum::extract::State;
use axum::http::StatusCode;
use axum::http::header::{self, HeaderMap, HeaderValue};
use axum::response::{IntoResponse, Response};
use axum::routing::get;
use axum::{Extension, Router};
use dispar_core::error::FieldError;
use dispar_core::period::{Granularity, Period};
use dispar_core::report::model::ParametersEcho;
use dispar_core::report::{Filters, LevelKind, SeriesPoint};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::auth::Caller;
use crate::error::{ApiError, ErrorItem, Result};
use crate::extract::ApiQuery;
use crate::state::AppState;
use crate::telemetry::CACHE_TOTAL;

pub use self::cache::ReportCache;
pub use self::spec::{RawQuery, ReportSpec};

/// The report routes, with their own cache (one per application instance).
pub fn router() -> Router<AppState> {
    Router::new()
        .route("/v1/reports", get(get_report))
        .route("/v1/reports/series", get(get_series))
        .layer(Extension(Arc::new(ReportCache::default())))
}

/// The query of `GET /v1/reports`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ReportQuery {
    period: Option<String>,
    level: Option<String>,
    site: Option<String>,
    product: Option<String>,
    alpha: Option<String>,
    method: Option<String>,
    pairwise: Option<String>,
    adjust: Option<String>,
    resamples: Option<String>,
    min_difference: Option<String>,
    overdispersion: Option<String>,
    as_of: Option<String>,
}

/// The query of `GET /v1/reports/series`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct SeriesQuery {
    from: Option<String>,
    to: Option<String>,
    level: Option<String>,
    site: Option<String>,
    product: Option<String>,
    alpha: Option<String>,
    method: Option<String>,
    pairwise: Option<String>,
    adjust: Option<String>,
    resamples: Option<String>,
    min_difference: Option<String>,
    overdispersion: Option<String>,
    as_of: Option<String>,
}

/// A 422 naming each bad query parameter.
fn params_error(errors: Vec<FieldError>) -> ApiError {
    ApiError::validation(
        "The query string has invalid parameters.",
        errors
            .into_iter()
            .map(|e| ErrorItem::parameter(e.field, e.reason, e.message))
            .collect(),
    )
}

/// Read and admin keys may ask for any report; an ingest key only with `site=` one of
/// its sites.
fn authorize(caller: &Caller, site: Option<&str>) -> Result<()> {
    match site {
        Some(site) => caller.require_read_site(site),
        None => caller.require_read_all().map_err(|_| {
            ApiError::forbidden(
                "An ingest key may read reports of its own sites only: name one with `site=`.",
            )
        }),
    }
}

/// The weak entity tag of `key` at data `version`.
pub fn etag(key: &str, version: u64) -> String {
    let mut h = Sha256::new();
    h.update(concat!("dispar ", env!("CARGO_PKG_VERSION"), "\n").as_bytes());
    h.update(key.as_bytes());
    h.update(format!("\n{version}").as_bytes());
    let digest = h.finalize();
    format!("W/\"{}\"", hex::encode(&digest[..16]))
}

/// What `If-None-Match` asks for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum NoneMatch {
    /// No header, or no listed tag matches.
    No,
    /// The header lists `tag` (weak comparison, RFC 9110 section 13.1.2).
    Tag,
    /// The header is `*`: true only when the request has a current representation,
    /// so it is answered 304 only after the request proved valid.
    Any,
}

/// Compares `If-None-Match` with `tag`.
fn none_match(headers: &HeaderMap, tag: &str) -> NoneMatch {
    let opaque = tag.trim_start_matches("W/");
    let mut any = false;
    for t in headers
        .get_all(header::IF_NONE_MATCH)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(','))
        .map(str::trim)
    {
        if t.trim_start_matches("W/") == opaque {
            return NoneMatch::Tag;
        }
        any |= t == "*";
    }
    if any { NoneMatch::Any } else { NoneMatch::No }
}

/// `304 Not Modified` with the cache headers of `tag`.
fn not_modified(tag: &str) -> Response {
    count("not_modified");
    let mut response = StatusCode::NOT_MODIFIED.into_response();
    cache_headers(&mut response, tag);
    response
}

fn cache_headers(response: &mut Response, tag: &str) {
    let headers = response.headers_mut();
    if let Ok(v) = HeaderValue::from_str(tag) {
        headers.insert(header::ETAG, v);
    }
    headers.insert(
        header::CACHE_CONTROL,
        HeaderValue::from_static("private, no-cache"),
    );
}

fn json_response(body: Bytes, tag: &str) -> Response {
    let mut response = (
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/json"),
        )],
        body,
    )
        .into_response();
    cache_headers(&mut response, tag);
    response
}

fn count(result: &'static str) {
    metrics::counter!(CACHE_TOTAL, "result" => result).increment(1);
}

/// What a computation hands back: the body, the data version it was read at, and
/// whether it may be cached (a series read across a write is not).
struct Computed {
    body: Bytes,
    version: u64,
    cacheable: bool,
    /// Milliseconds spent reading the sums and computing the body.
    timing: Timing,
}

/// Where a cache miss spent its time, sent as `Server-Timing` (W3C Server Timing):
/// `db` (sums and names from the store), `stats` (the report builder), `json`
/// (serialization).
#[derive(Debug, Clone, Copy, Default)]
struct Timing {
    db: f64,
    stats: f64,
    json: f64,
}

impl Timing {
    fn header(&self) -> String {
        format!(
            "db;dur={:.2}, stats;dur={:.2}, json;dur={:.2}",
            self.db, self.stats, self.json
        )
    }
}

fn ms_since(t: Instant) -> f64 {
    t.elapsed().as_secs_f64() * 1e3
}

fn server_timing(response: &mut Response, value: &str) {
    if let Ok(v) = HeaderValue::from_str(value) {
        response.headers_mut().insert("server-timing", v);
    }
}

/// The conditional-request and cache logic shared by both endpoints: 304 when the
/// client's tag is current, the cached body when there is one, else `compute`.
async fn respond<F, Fut>(
    state: &AppState,
    cache: &ReportCache,
    headers: &HeaderMap,
    key: &str,
    compute: F,
) -> Result<Response>
where
    F: FnOnce() -> Fut,
    Fut: Future<Output = Result<Computed>>,
{
    let version = state.store().data_version().await.map_err(ApiError::from)?;
    let tag = etag(key, version);
    let wanted = none_match(headers, &tag);
    if wanted == NoneMatch::Tag {
        return Ok(not_modified(&tag));
    }
    if let Some(body) = cache.get(key, version) {
        if wanted == NoneMatch::Any {
            return Ok(not_modified(&tag));
        }
        count("hit");
        let mut response = json_response(body, &tag);
        server_timing(&mut response, "cache;desc=hit");
        return Ok(response);
    }
    count("miss");
    let computed = compute().await?;
    if computed.cacheable {
        cache.insert(key, computed.version, computed.body.clone());
    }
    if wanted == NoneMatch::Any {
        return Ok(not_modified(&etag(key, computed.version)));
    }
    let timing = computed.timing.header();
    let mut response = json_response(computed.body, &etag(key, computed.version));
    server_timing(&mut response, &timing);
    Ok(response)
}

/// Runs CPU-bound work (statistics, serialization) off the async workers.
async fn blocking<T: Send + 'static>(
    deadline: Option<Instant>,
    work: impl FnOnce() -> serde_json::Result<T> + Send + 'static,
) -> Result<T> {
    heavy(deadline, work).await?.map_err(ApiError::internal)
}

/// Runs CPU-bound report work on the blocking pool, at most one job per core at a
/// time (a queue of expensive requests waits here, cancellably, instead of piling up
/// threads), and answers 503 `timeout` when the work ended past its deadline: the
/// statistics give up at the deadline, and a cut-short report is never shown or cached.
pub(crate) async fn heavy<T: Send + 'static>(
    deadline: Option<Instant>,
    work: impl FnOnce() -> T + Send + 'static,
) -> Result<T> {
    static SLOTS: std::sync::OnceLock<Arc<tokio::sync::Semaphore>> = std::sync::OnceLock::new();
    let slots = SLOTS.get_or_init(|| {
        let cores = std::thread::available_parallelism().map_or(2, std::num::NonZeroUsize::get);
        Arc::new(tokio::sync::Semaphore::new(cores))
    });
    let permit = slots
        .clone()
        .acquire_owned()
        .await
        .map_err(ApiError::internal)?;
    let out = tokio::task::spawn_blocking(move || {
        let out = work();
        drop(permit);
        out
    })
    .await
    .map_err(ApiError::internal)?;
    if deadline.is_some_and(|d| Instant::now() >= d) {
        return Err(ApiError::new(
            crate::error::ProblemKind::Timeout,
            "The report took longer than this server allows; ask for a shorter period, fewer resamples or method=auto.",
        ));
    }
    Ok(out)
}

async fn get_report(
    State(state): State<AppState>,
    Extension(cache): Extension<Arc<ReportCache>>,
    caller: Caller,
    headers: HeaderMap,
    ApiQuery(q): ApiQuery<ReportQuery>,
) -> Result<Response> {
    authorize(&caller, q.site.as_deref())?;
    let raw = RawQuery {
        period: q.period.as_deref(),
        from: None,
        to: None,
        level: q.level.as_deref(),
        site: q.site.as_deref(),
        product: q.product.as_deref(),
        alpha: q.alpha.as_deref(),
        method: q.method.as_deref(),
        pairwise: q.pairwise.as_deref(),
        adjust: q.adjust.as_deref(),
        resamples: q.resamples.as_deref(),
        min_difference: q.min_difference.as_deref(),
        overdispersion: q.overdispersion.as_deref(),
        as_of: q.as_of.as_deref(),
    };
    let (spec, period) = ReportSpec::parse_report(&raw).map_err(params_error)?;
    let spec = spec.until(state.limits().request_timeout);
    let key = format!("report&period={period}&{}", spec.key());
    let store = state.store().clone();
    respond(&state, &cache, &headers, &key, || async move {
        let started = Instant::now();
        let loaded = compute::load(store.as_ref(), &spec, &period, compute::Detail::Report)
            .await
            .map_err(ApiError::from)?;
        let db = ms_since(started);
        let version = loaded.data_version;
        let deadline = spec.deadline;
        let (body, stats, json) = blocking(deadline, move || {
            let started = Instant::now();
            let report = compute::build(&spec, period, &loaded.groups);
            let stats = ms_since(started);
            let started = Instant::now();
            let body = compute::to_json(&report)?;
            Ok((body, stats, ms_since(started)))
        })
        .await?;
        Ok(Computed {
            body: Bytes::from(body),
            version,
            cacheable: true,
            timing: Timing { db, stats, json },
        })
    })
    .await
}

/// The body of `GET /v1/reports/series`.
#[derive(Debug, Serialize)]
struct Series {
    from: Period,
    to: Period,
    granularity: Granularity,
    level: LevelKind,
    #[serde(skip_serializing_if = "Filters::is_empty")]
    filters: Filters,
    parameters: ParametersEcho,
    periods: Vec<SeriesPoint>,
    cautions: Vec<String>,
}

async fn get_series(
    State(state): State<AppState>,
    Extension(cache): Extension<Arc<ReportCache>>,
    caller: Caller,
    headers: HeaderMap,
    ApiQuery(q): ApiQuery<SeriesQuery>,
) -> Result<Response> {
    authorize(&caller, q.site.as_deref())?;
    let raw = RawQuery {
        period: None,
        from: q.from.as_deref(),
        to: q.to.as_deref(),
        level: q.level.as_deref(),
        site: q.site.as_deref(),
        product: q.product.as_deref(),
        alpha: q.alpha.as_deref(),
        method: q.method.as_deref(),
        pairwise: q.pairwise.as_deref(),
        adjust: q.adjust.as_deref(),
        resamples: q.resamples.as_deref(),
        min_difference: q.min_difference.as_deref(),
        overdispersion: q.overdispersion.as_deref(),
        as_of: q.as_of.as_deref(),
    };
    let (spec, periods) = ReportSpec::parse_series(&raw).map_err(params_error)?;
    let spec = spec.until(state.limits().request_timeout);
    let (Some(&from), Some(&to)) = (periods.first(), periods.last()) else {
        return Err(params_error(vec![FieldError::new(
            "to",
            "empty_series",
            "the series holds no period",
        )]));
    };
    let key = format!("series&from={from}&to={to}&{}", spec.key());
    let store = state.store().clone();
    respond(&state, &cache, &headers, &key, || async move {
        let started = Instant::now();
        let mut loads = Vec::with_capacity(periods.len());
        for p in &periods {
            loads.push(
                compute::load(store.as_ref(), &spec, p, compute::Detail::Summary)
                    .await
                    .map_err(ApiError::from)?,
            );
        }
        // Each period is its own read; a write in between makes the versions differ.
        // Such a body is answered with the oldest version's tag and not cached.
        let version = loads.iter().map(|l| l.data_version).min().unwrap_or(0);
        let cacheable = loads.iter().all(|l| l.data_version == version);
        let db = ms_since(started);
        let deadline = spec.deadline;
        let (body, stats, json) = blocking(deadline, move || {
            let started = Instant::now();
            let points = periods
                .iter()
                .zip(&loads)
                .map(|(p, l)| compute::summary(&spec, *p, &l.groups))
                .collect();
            let stats = ms_since(started);
            let started = Instant::now();
            let body = serde_json::to_vec(&Series {
                from,
                to,
                granularity: from.granularity(),
                level: spec.level.kind(),
                filters: spec.filters.clone(),
                parameters: compute::echo(&spec),
                periods: points,
                cautions: compute::cautions(),
            })?;
            Ok((body, stats, ms_since(started)))
        })
        .await?;
        Ok(Computed {
            body: Bytes::from(body),
            version,
            cacheable,
            timing: Timing { db, stats, json },
        })
    })
    .await
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn if_none_match_compares_weakly_and_accepts_lists_and_star() {
        let tag = etag("k", 7);
        assert!(tag.starts_with("W/\"") && tag.ends_with('"'), "{tag}");
        let strong = tag.trim_start_matches("W/").to_owned();
        for (sent, expected) in [
            (tag.clone(), NoneMatch::Tag),
            (strong.clone(), NoneMatch::Tag),
            (format!("\"other\", {tag}"), NoneMatch::Tag),
            (format!("*, {tag}"), NoneMatch::Tag),
            ("*".to_owned(), NoneMatch::Any),
            ("\"other\", *".to_owned(), NoneMatch::Any),
        ] {
            let mut h = HeaderMap::new();
            h.insert(header::IF_NONE_MATCH, HeaderValue::from_str(&sent).unwrap());
            assert_eq!(none_match(&h, &tag), expected, "{sent}");
        }
        let mut h = HeaderMap::new();
        h.insert(
            header::IF_NONE_MATCH,
            HeaderValue::from_str(&etag("k", 8)).unwrap(),
        );
        assert_eq!(none_match(&h, &tag), NoneMatch::No);
        assert_eq!(none_match(&HeaderMap::new(), &tag), NoneMatch::No);
    }

    #[test]
    fn the_tag_changes_with_the_key_and_the_version() {
        assert_eq!(etag("a", 1), etag("a", 1));
        assert_ne!(etag("a", 1), etag("a", 2));
        assert_ne!(etag("a", 1), etag("b", 1));
    }
}

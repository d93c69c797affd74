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
//! registered is a 422 with reason `unknown-site` on `site` (a filter is not a
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
//! request proved valid, RFC 9110 section 13.1.2). Computed reports are kept in the
//! bounded in-memory cache of the [`ReportService`] (per server instance, shared with
//! the pages) under the same key, so a repeated request is served without
//! recomputing; a write makes every older entry unreachable. `as_of` reports are keyed
//! the same way (the registered groups and their names, which an `as_of` report also
//! shows, are current, not historical). The counter
//! `dispar_report_cache_total{result="hit|miss|not_modified"}` counts the outcomes
//! (hits and misses of the pages too), and a `Server-Timing` header says where a
//! computed answer spent its time (`db`, `stats`, `json`, in milliseconds) or that it
//! came from the cache.

pub mod cache;
pub mod compute;
pub mod cost;
pub mod params;
pub mod service;
pub mod spec;

use axum::Router;
use axum::extract::State;
use axum::http::header::{self, HeaderMap, HeaderValue};
use axum::http::{StatusCode, Uri};
use axum::response::{IntoResponse, Response};
use axum::routing::get;
use dispar_core::error::FieldError;
use sha2::{Digest, Sha256};

use crate::auth::Caller;
use crate::error::{ApiError, ErrorItem, Result};
use crate::extract::query_of;
use crate::state::AppState;
use crate::telemetry::CACHE_TOTAL;

pub use self::params::{REPORT_PARAMETERS, ReportParams, SERIES_PARAMETERS};
pub use self::service::{Answer, ReportError, ReportService, Series, Timing};
pub use self::spec::{ReportSpec, Span};

/// The report routes.
pub fn router() -> Router<AppState> {
    Router::new()
        .route("/v1/reports", get(get_report))
        .route("/v1/reports/series", get(get_series))
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
    metrics::counter!(CACHE_TOTAL, "result" => "not_modified").increment(1);
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

/// The `Server-Timing` value (W3C Server Timing) of an answer: where a computed one
/// spent its time, or that it came from the cache.
fn server_timing(timing: Option<Timing>) -> String {
    match timing {
        None => "cache;desc=hit".to_owned(),
        Some(t) => format!(
            "db;dur={:.2}, stats;dur={:.2}, json;dur={:.2}",
            t.db, t.stats, t.json
        ),
    }
}

/// The answer to a request whose `If-None-Match` was `wanted`: 304 for `*` (the
/// request proved valid), else the JSON body.
fn respond<T>(wanted: NoneMatch, key: &str, answer: Answer<T>) -> Response {
    let tag = etag(key, answer.version);
    if wanted == NoneMatch::Any {
        return not_modified(&tag);
    }
    let mut response = (
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/json"),
        )],
        answer.body,
    )
        .into_response();
    cache_headers(&mut response, &tag);
    if let Ok(v) = HeaderValue::from_str(&server_timing(answer.timing)) {
        response.headers_mut().insert("server-timing", v);
    }
    response
}

async fn get_report(
    State(state): State<AppState>,
    caller: Caller,
    headers: HeaderMap,
    uri: Uri,
) -> Result<Response> {
    let q: ReportParams = query_of(uri.query().unwrap_or(""), REPORT_PARAMETERS)?;
    authorize(&caller, q.site.as_deref())?;
    let (spec, period) = ReportSpec::parse_report(&q).map_err(params_error)?;
    let key = service::report_key(&spec, period);
    let reports = state.reports();
    // One cheap read decides a conditional request before anything is computed: the
    // data version of what this report reads (its days, baseline window and sites).
    let version = reports.report_version(&spec, period).await?;
    let wanted = none_match(&headers, &etag(&key, version));
    if wanted == NoneMatch::Tag {
        return Ok(not_modified(&etag(&key, version)));
    }
    let answer = reports
        .report_at(version, &spec, period, Some(caller.key_id))
        .await?;
    Ok(respond(wanted, &key, answer))
}

async fn get_series(
    State(state): State<AppState>,
    caller: Caller,
    headers: HeaderMap,
    uri: Uri,
) -> Result<Response> {
    let q: ReportParams = query_of(uri.query().unwrap_or(""), SERIES_PARAMETERS)?;
    authorize(&caller, q.site.as_deref())?;
    let (spec, span) = ReportSpec::parse_series(&q).map_err(params_error)?;
    let key = service::series_key(&spec, &span);
    let reports = state.reports();
    let version = reports.series_version(&spec, &span).await?;
    let wanted = none_match(&headers, &etag(&key, version));
    if wanted == NoneMatch::Tag {
        return Ok(not_modified(&etag(&key, version)));
    }
    let answer = reports
        .series_at(version, &spec, &span, Some(caller.key_id))
        .await?;
    Ok(respond(wanted, &key, answer))
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

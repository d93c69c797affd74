//! Daily count records.
//!
//! - `PUT /v1/sites/{site}/lines/{line}/days/{date}[?product=P]` — one record at its
//!   natural key (admin, or an ingest key of the site); `GET` on the same path reads
//!   the current record;
//! - `POST /v1/counts` — a batch, JSON (`{"records": [...]}`) or CSV (`text/csv`,
//!   see [`csv_batch`]); all-or-nothing; optional `Idempotency-Key`;
//! - `GET /v1/counts?site=&line=&product=&from=&to=&cursor=&limit=` — current
//!   records, cursor-paginated (limit 1..=1000, default 100);
//! - `GET /v1/sites/{site}/lines/{line}/days/{date}/revisions[?product=P]` — the
//!   append-only history, oldest first.
//!
//! Write answers: 201 when a record was created (for a batch: at least one), else 200;
//! `outcome` says `created`, `corrected` or `unchanged`. The answer is sent only after
//! the store's commit returned.

pub mod csv_batch;

use axum::extract::State;
use axum::http::StatusCode;
use axum::http::header::{self, HeaderMap, HeaderName, HeaderValue};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post, put};
use axum::{Json, Router};
use dispar_core::code::{LineCode, ProductCode, SiteCode};
use dispar_core::date::{format_date, parse_date_field};
use dispar_core::error::{FieldError, ValidationError};
use dispar_core::record::{CountRecord, CountRecordInput, CountsInput, RecordKey};
use dispar_store::{
    BatchOutcome, BatchResult, CountFilter, Idempotency, MAX_PAGE, StoreError, StoredAnswer,
    StoredRecord, WriteOutcome, WriteStatus,
};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::auth::Caller;
use crate::error::{
    ApiError, ErrorItem, MAX_LISTED_ERRORS, Result, rejected_records, url_record_item,
    validation_with_params,
};
use crate::extract::Segments;
use crate::extract::{ApiQuery, Body, MediaType, from_value, parse_json, unsupported};
use crate::state::AppState;

/// The header that makes a batch idempotent.
pub const IDEMPOTENCY_KEY: HeaderName = HeaderName::from_static("idempotency-key");
/// The header set on a replayed answer.
pub const IDEMPOTENT_REPLAYED: HeaderName = HeaderName::from_static("idempotent-replayed");
/// Longest accepted `Idempotency-Key`.
pub const MAX_IDEMPOTENCY_KEY_LEN: usize = 255;
/// Default page size of `GET /v1/counts`.
pub const DEFAULT_PAGE: u32 = 100;

/// The count routes.
pub fn router() -> Router<AppState> {
    Router::new()
        .route("/v1/counts", post(post_batch).get(list_counts))
        .route(
            "/v1/sites/{site}/lines/{line}/days/{date}",
            put(put_day).get(get_day),
        )
        .route(
            "/v1/sites/{site}/lines/{line}/days/{date}/revisions",
            get(revisions),
        )
}

fn outcome_word(s: WriteStatus) -> &'static str {
    match s {
        WriteStatus::Created => "created",
        WriteStatus::Corrected => "corrected",
        WriteStatus::Unchanged => "unchanged",
    }
}

/// A record as the API shows it.
#[derive(Debug, Serialize)]
pub struct RecordView {
    site: String,
    line: String,
    date: String,
    product: Option<String>,
    inspected: u64,
    defective: u64,
    defects: serde_json::Map<String, serde_json::Value>,
    /// The sending system's own revision number, if it sent one.
    revision: Option<u64>,
}

impl From<&CountRecord> for RecordView {
    fn from(r: &CountRecord) -> Self {
        Self {
            site: r.site().as_str().to_owned(),
            line: r.line().as_str().to_owned(),
            date: format_date(r.date()),
            product: r.product().map(|p| p.as_str().to_owned()),
            inspected: r.inspected(),
            defective: r.defective(),
            defects: r
                .defects()
                .iter()
                .map(|(k, v)| (k.as_str().to_owned(), (*v).into()))
                .collect(),
            revision: r.revision,
        }
    }
}

/// A stored record: the record, the sequence number of its stored revision, when and by
/// which key.
#[derive(Debug, Serialize)]
pub struct StoredView {
    #[serde(flatten)]
    record: RecordView,
    /// dispar's own number of this stored revision: unique in the store, never reused,
    /// larger for later writes. Not the client's `revision`.
    sequence: i64,
    recorded_at: String,
    api_key_id: Option<i64>,
}

fn rfc3339(t: time::OffsetDateTime) -> String {
    t.format(&time::format_description::well_known::Rfc3339)
        .unwrap_or_default()
}

impl From<&StoredRecord> for StoredView {
    fn from(s: &StoredRecord) -> Self {
        Self {
            record: RecordView::from(&s.record),
            sequence: s.revision_id,
            recorded_at: rfc3339(s.recorded_at),
            api_key_id: s.api_key_id,
        }
    }
}

// ---------------------------------------------------------------- PUT one day

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ProductQuery {
    product: Option<String>,
}

#[derive(Serialize)]
struct DayWritten {
    outcome: &'static str,
    #[serde(flatten)]
    record: RecordView,
    sequence: i64,
}

async fn put_day(
    State(state): State<AppState>,
    caller: Caller,
    Segments((site, line, date)): Segments<(String, String, String)>,
    ApiQuery(query): ApiQuery<ProductQuery>,
    body: Body,
) -> Result<Response> {
    caller.require_write_site(&site)?;
    let input: CountsInput = body.json()?;
    let record = CountRecord::from_parts(&site, &line, &date, query.product.as_deref(), input)
        .map_err(|e| validation_with_params(e, &["site", "line", "date", "product"]))?;
    let outcome = state
        .store()
        .put_record(&record, Some(caller.key_id))
        .await
        .map_err(|e| record_errors(e, &Place::Url))?;
    crate::telemetry::count_records(
        usize::from(outcome.status == WriteStatus::Created),
        usize::from(outcome.status == WriteStatus::Corrected),
        usize::from(outcome.status == WriteStatus::Unchanged),
    );
    tracing::debug!(key = %record.key, outcome = outcome_word(outcome.status), "record written");
    let mut view = RecordView::from(&record);
    view.revision = outcome.plant_revision;
    let status = if outcome.status == WriteStatus::Created {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    let body = DayWritten {
        outcome: outcome_word(outcome.status),
        record: view,
        sequence: outcome.revision_id,
    };
    let mut response = (status, Json(body)).into_response();
    if status == StatusCode::CREATED
        && let Ok(v) = HeaderValue::from_str(&day_path(&record.key))
    {
        response.headers_mut().insert(header::LOCATION, v);
    }
    Ok(response)
}

fn day_path(key: &RecordKey) -> String {
    let mut path = format!(
        "/v1/sites/{}/lines/{}/days/{}",
        key.site(),
        key.line(),
        format_date(key.date())
    );
    if let Some(p) = key.product() {
        path.push_str("?product=");
        path.push_str(p.as_str());
    }
    path
}

/// The natural key from path parameters and `product`; errors name the parameter.
fn key_from_params(site: &str, line: &str, date: &str, product: Option<&str>) -> Result<RecordKey> {
    let mut errors = Vec::new();
    let site = SiteCode::parse_field(site, "site")
        .map_err(|e| errors.push(e))
        .ok();
    let line = LineCode::parse_field(line, "line")
        .map_err(|e| errors.push(e))
        .ok();
    let date = parse_date_field(date, "date")
        .map_err(|e| errors.push(e))
        .ok();
    let product = match product {
        Some(p) => ProductCode::parse_field(p, "product")
            .map(Some)
            .map_err(|e| errors.push(e))
            .ok(),
        None => Some(None),
    };
    match (site, line, date, product) {
        (Some(site), Some(line), Some(date), Some(product)) if errors.is_empty() => {
            RecordKey::new(site, line, product, date).map_err(|e| params_error(vec![e]))
        }
        _ => Err(params_error(errors)),
    }
}

fn params_error(errors: Vec<FieldError>) -> ApiError {
    ApiError::validation(
        "The path or query has invalid parameters.",
        errors
            .into_iter()
            .map(|e| ErrorItem::parameter(e.field, e.reason, e.message))
            .collect(),
    )
}

async fn get_day(
    State(state): State<AppState>,
    caller: Caller,
    Segments((site, line, date)): Segments<(String, String, String)>,
    ApiQuery(query): ApiQuery<ProductQuery>,
) -> Result<Json<StoredView>> {
    caller.require_read_site(&site)?;
    let key = key_from_params(&site, &line, &date, query.product.as_deref())?;
    match state
        .store()
        .get_record(&key)
        .await
        .map_err(ApiError::from)?
    {
        Some(stored) => Ok(Json(StoredView::from(&stored))),
        None => Err(ApiError::not_found(format!("There is no record at {key}."))),
    }
}

#[derive(Serialize)]
struct RevisionView {
    /// 1 for the first revision of this key, 2 for the next, ...
    number: usize,
    #[serde(flatten)]
    stored: StoredView,
}

#[derive(Serialize)]
struct History {
    site: String,
    line: String,
    date: String,
    product: Option<String>,
    revisions: Vec<RevisionView>,
}

async fn revisions(
    State(state): State<AppState>,
    caller: Caller,
    Segments((site, line, date)): Segments<(String, String, String)>,
    ApiQuery(query): ApiQuery<ProductQuery>,
) -> Result<Json<History>> {
    caller.require_read_site(&site)?;
    let key = key_from_params(&site, &line, &date, query.product.as_deref())?;
    let history = state
        .store()
        .record_history(&key)
        .await
        .map_err(ApiError::from)?;
    if history.is_empty() {
        return Err(ApiError::not_found(format!("There is no record at {key}.")));
    }
    Ok(Json(History {
        site: key.site().as_str().to_owned(),
        line: key.line().as_str().to_owned(),
        date: format_date(key.date()),
        product: key.product().map(|p| p.as_str().to_owned()),
        revisions: history
            .iter()
            .enumerate()
            .map(|(i, s)| RevisionView {
                number: i + 1,
                stored: StoredView::from(s),
            })
            .collect(),
    }))
}

// ---------------------------------------------------------------- listing

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ListQuery {
    site: Option<String>,
    line: Option<String>,
    product: Option<String>,
    from: Option<String>,
    to: Option<String>,
    cursor: Option<String>,
    limit: Option<String>,
}

#[derive(Serialize)]
struct Page {
    records: Vec<StoredView>,
    next_cursor: Option<String>,
}

async fn list_counts(
    State(state): State<AppState>,
    caller: Caller,
    ApiQuery(q): ApiQuery<ListQuery>,
) -> Result<Response> {
    match &q.site {
        Some(site) => caller.require_read_site(site)?,
        None => caller.require_read_all().map_err(|_| {
            ApiError::forbidden("An ingest key must name one of its sites with `site=`.")
        })?,
    }
    let mut errors: Vec<FieldError> = Vec::new();
    fn take<T>(errors: &mut Vec<FieldError>, r: Result<T, FieldError>) -> Option<T> {
        r.map_err(|e| errors.push(e)).ok()
    }
    let e = &mut errors;
    let site = q
        .site
        .as_deref()
        .and_then(|s| take(e, SiteCode::parse_field(s, "site")));
    let line = q
        .line
        .as_deref()
        .and_then(|s| take(e, LineCode::parse_field(s, "line")));
    let product = q
        .product
        .as_deref()
        .and_then(|s| take(e, ProductCode::parse_field(s, "product")));
    let from = q
        .from
        .as_deref()
        .and_then(|s| take(e, parse_date_field(s, "from")));
    let to =
        q.to.as_deref()
            .and_then(|s| take(e, parse_date_field(s, "to")));
    let limit = match q.limit.as_deref() {
        None => Some(DEFAULT_PAGE),
        Some(s) => take(e, parse_limit(s)),
    };
    if let (Some(f), Some(t)) = (from, to)
        && f > t
    {
        errors.push(FieldError::new(
            "to",
            "before-from",
            format!(
                "to ({}) is before from ({})",
                format_date(t),
                format_date(f)
            ),
        ));
    }
    if !errors.is_empty() {
        return Err(params_error(errors));
    }
    let filter = CountFilter {
        site,
        line,
        product,
        from,
        to,
    };
    let limit = limit.unwrap_or(DEFAULT_PAGE);
    let page = state
        .store()
        .list_counts(&filter, q.cursor.as_deref(), limit)
        .await
        .map_err(|e| match e {
            StoreError::BadCursor => ApiError::validation(
                "The cursor is not one this server gave out.",
                vec![ErrorItem::parameter(
                    "cursor",
                    "invalid-cursor",
                    "use the next_cursor of a previous page, unchanged",
                )],
            ),
            other => ApiError::from(other),
        })?;
    let mut response = Json(Page {
        records: page.records.iter().map(StoredView::from).collect(),
        next_cursor: page.next_cursor.clone(),
    })
    .into_response();
    if let Some(cursor) = &page.next_cursor
        && let Ok(v) =
            HeaderValue::from_str(&format!("<{}>; rel=\"next\"", next_link(&q, cursor, limit)))
    {
        response.headers_mut().insert(header::LINK, v);
    }
    Ok(response)
}

fn parse_limit(s: &str) -> Result<u32, FieldError> {
    match s
        .parse::<u32>()
        .ok()
        .filter(|_| s.bytes().all(|b| b.is_ascii_digit()))
    {
        Some(n) if (1..=MAX_PAGE).contains(&n) => Ok(n),
        _ => Err(FieldError::new(
            "limit",
            "out-of-range",
            format!("limit must be a whole number from 1 to {MAX_PAGE}, not {s:?}"),
        )),
    }
}

fn next_link(q: &ListQuery, cursor: &str, limit: u32) -> String {
    let mut ser = form_urlencoded::Serializer::new(String::new());
    for (name, value) in [
        ("site", &q.site),
        ("line", &q.line),
        ("product", &q.product),
        ("from", &q.from),
        ("to", &q.to),
    ] {
        if let Some(v) = value {
            ser.append_pair(name, v);
        }
    }
    ser.append_pair("limit", &limit.to_string());
    ser.append_pair("cursor", cursor);
    format!("/v1/counts?{}", ser.finish())
}

// ---------------------------------------------------------------- batches

/// Where the records of a write came from, to name them in errors.
pub enum Place {
    /// One record whose key is in the URL.
    Url,
    /// A JSON batch: record `i` is `/records/i`.
    Json,
    /// A CSV batch: record `i` starts on file line `lines[i]`.
    Csv {
        /// The file line of each record.
        lines: Vec<u64>,
    },
}

impl Place {
    /// The error item for `field` of record `index`.
    fn item(&self, index: usize, field: &str, reason: &'static str, message: String) -> ErrorItem {
        match self {
            Place::Url => url_record_item(field, reason, message),
            Place::Json => ErrorItem::pointer(format!("/records/{index}/{field}"), reason, message),
            Place::Csv { lines } => ErrorItem::csv(
                lines.get(index).copied().unwrap_or(0),
                Some(csv_batch::column_of(field)),
                reason,
                message,
            ),
        }
    }
}

/// Maps a refused write to 422 (unknown site or line, out of range) or 409 (stale
/// revision only), naming every refused record where it came from.
pub fn record_errors(e: StoreError, place: &Place) -> ApiError {
    match e {
        StoreError::Rejected(list) => rejected_records(list, |index, field, reason, message| {
            place.item(index, field, reason, message)
        }),
        other => ApiError::from(other),
    }
}

/// A core validation error of a batch, with fields mapped to `place`.
fn batch_validation(e: ValidationError, place: &Place) -> ApiError {
    let errors = e.into_errors();
    let total = errors.len();
    let items: Vec<ErrorItem> = errors
        .into_iter()
        .take(MAX_LISTED_ERRORS)
        .map(|fe| match place {
            Place::Csv { .. } => csv_batch::item_from_field_error(fe),
            _ => crate::error::field_error_to_pointer(fe),
        })
        .collect();
    let suffix = if total > MAX_LISTED_ERRORS {
        format!(" The first {MAX_LISTED_ERRORS} of {total} are listed.")
    } else {
        String::new()
    };
    ApiError::validation(
        format!("{total} problem(s) in the batch; nothing was written.{suffix}"),
        items,
    )
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawBatch {
    records: Records,
}

/// Most records a batch may be configured to accept (`--max-batch-records`).
pub const MAX_BATCH_RECORDS: usize = 100_000;

/// A JSON batch's records: at most [`MAX_BATCH_RECORDS`] + 1 are kept as parsed values
/// and the rest only counted, so a body of millions of tiny values costs no memory.
struct Records {
    values: Vec<serde_json::Value>,
    count: usize,
}

impl<'de> Deserialize<'de> for Records {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        struct Visit;
        impl<'de> serde::de::Visitor<'de> for Visit {
            type Value = Records;
            fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                f.write_str("an array of records")
            }
            fn visit_seq<A: serde::de::SeqAccess<'de>>(
                self,
                mut seq: A,
            ) -> std::result::Result<Records, A::Error> {
                let mut values = Vec::new();
                while values.len() <= MAX_BATCH_RECORDS {
                    match seq.next_element::<serde_json::Value>()? {
                        Some(v) => values.push(v),
                        None => {
                            let count = values.len();
                            return Ok(Records { values, count });
                        }
                    }
                }
                let mut count = values.len();
                while seq.next_element::<serde::de::IgnoredAny>()?.is_some() {
                    count += 1;
                }
                Ok(Records { values, count })
            }
        }
        d.deserialize_seq(Visit)
    }
}

/// Reads a JSON batch into raw records, reporting every record's shape errors.
/// A batch body read and checked as `POST /v1/counts` reads it, without a store or a
/// key: the checked records, or the problem the endpoint would answer. The fuzz targets
/// (`fuzz/`) drive the parsers through these.
pub fn read_batch(bytes: &[u8], csv: bool, max: usize) -> Result<Vec<CountRecord>> {
    if csv {
        let parsed = csv_batch::parse(bytes, max)?;
        let lines = parsed.lines;
        let checked = dispar_core::record::check_rows(parsed.records, |i| {
            lines.get(i).copied().unwrap_or(0).to_string()
        });
        checked.map_err(|e| batch_validation(e, &Place::Csv { lines }))
    } else {
        let inputs = json_records(bytes, max)?;
        dispar_core::record::check_batch(inputs).map_err(|e| batch_validation(e, &Place::Json))
    }
}

fn json_records(bytes: &[u8], max: usize) -> Result<Vec<CountRecordInput>> {
    let raw: RawBatch = parse_json(bytes)?;
    check_batch_size(raw.records.count, max, || {
        ErrorItem::pointer("/records", "", "")
    })?;
    let mut out = Vec::with_capacity(raw.records.count);
    let mut errors = Vec::new();
    for (i, value) in raw.records.values.into_iter().enumerate() {
        match from_value::<CountRecordInput>(value, &format!("/records/{i}")) {
            Ok(r) => out.push(r),
            Err(item) => errors.push(*item),
        }
    }
    if errors.is_empty() {
        Ok(out)
    } else {
        let total = errors.len();
        errors.truncate(MAX_LISTED_ERRORS);
        Err(ApiError::validation(
            format!("{total} record(s) have invalid fields; nothing was written."),
            errors,
        ))
    }
}

/// 422 for an empty batch or one above `max`; `at` gives the place to name.
fn check_batch_size(n: usize, max: usize, at: impl Fn() -> ErrorItem) -> Result<()> {
    let (reason, message) = if n == 0 {
        ("empty", "the batch holds no records".to_owned())
    } else if n > max {
        (
            "too-many",
            format!("the batch holds {n} records; at most {max} are accepted per request"),
        )
    } else {
        return Ok(());
    };
    let mut item = at();
    item.reason = reason.into();
    item.message = message.clone();
    Err(ApiError::validation(
        format!("{}.", capitalise(&message)),
        vec![item],
    ))
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}

/// Validates the `Idempotency-Key` header, if present.
fn idempotency_key(headers: &HeaderMap) -> Result<Option<String>> {
    let Some(value) = headers.get(&IDEMPOTENCY_KEY) else {
        return Ok(None);
    };
    let bad = |message: &str| {
        ApiError::validation(
            "The Idempotency-Key header is invalid.",
            vec![ErrorItem::header(
                "idempotency-key",
                "invalid-value",
                message,
            )],
        )
    };
    let text = value
        .to_str()
        .map_err(|_| bad("must be visible ASCII characters"))?;
    if text.is_empty() || text.len() > MAX_IDEMPOTENCY_KEY_LEN {
        return Err(bad("must be 1 to 255 characters long"));
    }
    if !text.bytes().all(|b| (0x21..=0x7e).contains(&b)) {
        return Err(bad("must be visible ASCII characters without spaces"));
    }
    Ok(Some(text.to_owned()))
}

/// The answer body of a batch.
#[derive(Serialize)]
struct BatchAnswer<'a> {
    received: usize,
    created: usize,
    corrected: usize,
    unchanged: usize,
    /// One word per record, in input order.
    outcomes: Vec<&'a str>,
}

fn render_batch(outcome: &BatchOutcome) -> StoredAnswer {
    let answer = BatchAnswer {
        received: outcome.outcomes.len(),
        created: outcome.created,
        corrected: outcome.corrected,
        unchanged: outcome.unchanged,
        outcomes: outcome
            .outcomes
            .iter()
            .map(|o: &WriteOutcome| outcome_word(o.status))
            .collect(),
    };
    let status = if outcome.created > 0 {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    StoredAnswer {
        status: status.as_u16(),
        body: serde_json::to_vec(&answer).unwrap_or_default(),
    }
}

fn answer_response(answer: StoredAnswer, replayed: bool) -> Response {
    let status = StatusCode::from_u16(answer.status).unwrap_or(StatusCode::OK);
    let mut response = (status, answer.body).into_response();
    let headers = response.headers_mut();
    headers.insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/json"),
    );
    if replayed {
        headers.insert(IDEMPOTENT_REPLAYED, HeaderValue::from_static("true"));
    }
    response
}

async fn post_batch(
    State(state): State<AppState>,
    caller: Caller,
    headers: HeaderMap,
    body: Body,
) -> Result<Response> {
    if caller.role == dispar_store::KeyRole::Read {
        return Err(ApiError::forbidden("A read key cannot write counts."));
    }
    let media = match body.media_type {
        Some(m) => m,
        None => {
            return Err(
                unsupported(body.content_type.as_deref(), "application/json or text/csv")
                    .with_header(
                        HeaderName::from_static("accept-post"),
                        "application/json, text/csv",
                    ),
            );
        }
    };
    let idem_key = idempotency_key(&headers)?;
    let body_sha256: [u8; 32] = {
        let mut h = Sha256::new();
        h.update(match media {
            MediaType::Json => b"json\n",
            MediaType::Csv => b"csv\n\n",
        });
        h.update(&body.bytes);
        h.finalize().into()
    };
    if let Some(key) = &idem_key {
        match state
            .store()
            .find_idempotent(Some(caller.key_id), key, &body_sha256)
            .await
        {
            Ok(Some(answer)) => return Ok(answer_response(answer, true)),
            Ok(None) => {}
            Err(e) => return Err(ApiError::from(e)),
        }
    }
    let started = std::time::Instant::now();
    let max = state.limits().max_batch_records;
    let (inputs, place) = match media {
        MediaType::Json => (json_records(&body.bytes, max)?, Place::Json),
        MediaType::Csv => {
            let parsed = csv_batch::parse(&body.bytes, max)?;
            (
                parsed.records,
                Place::Csv {
                    lines: parsed.lines,
                },
            )
        }
    };
    authorize_sites(&caller, &inputs)?;
    let records = match &place {
        Place::Csv { lines } => dispar_core::record::check_rows(inputs, |i| {
            lines.get(i).copied().unwrap_or(0).to_string()
        }),
        _ => dispar_core::record::check_batch(inputs),
    }
    .map_err(|e| batch_validation(e, &place))?;

    let checked = started.elapsed();
    let render = render_batch;
    let idempotency = idem_key.as_deref().map(|key| Idempotency {
        key,
        body_sha256,
        render: &render,
    });
    let result = state
        .store()
        .put_batch(&records, Some(caller.key_id), idempotency)
        .await
        .map_err(|e| record_errors(e, &place))?;
    match result {
        BatchResult::Replayed(answer) => Ok(answer_response(answer, true)),
        BatchResult::Written { outcome, answer } => {
            crate::telemetry::count_records(outcome.created, outcome.corrected, outcome.unchanged);
            tracing::info!(
                records = records.len(),
                created = outcome.created,
                corrected = outcome.corrected,
                unchanged = outcome.unchanged,
                check_ms = checked.as_secs_f64() * 1e3,
                store_ms = (started.elapsed() - checked).as_secs_f64() * 1e3,
                "batch written"
            );
            let answer = answer.unwrap_or_else(|| render_batch(&outcome));
            Ok(answer_response(answer, false))
        }
    }
}

/// 403 (before anything is checked further or written) when the key may not write
/// one of the batch's sites.
fn authorize_sites(caller: &Caller, inputs: &[CountRecordInput]) -> Result<()> {
    if caller.role == dispar_store::KeyRole::Admin {
        return Ok(());
    }
    let mut refused: Vec<&str> = inputs
        .iter()
        .filter_map(|r| r.site.as_deref())
        .filter(|s| !caller.can_write_site(s))
        .collect();
    refused.sort_unstable();
    refused.dedup();
    match refused.first() {
        None => Ok(()),
        Some(first) => {
            let e = caller.require_write_site(first).err().unwrap_or_else(|| {
                ApiError::forbidden("This key may not write these sites; nothing was written.")
            });
            let e = e.with_extension("refused_sites", refused.clone());
            Err(e)
        }
    }
}

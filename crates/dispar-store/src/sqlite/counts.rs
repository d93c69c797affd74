//! Count records: batch writes with revision checks and idempotency, and reads.
//!
//! A write runs in three phases inside one `BEGIN IMMEDIATE` transaction:
//! 1. check: every site and line of the batch exists (two queries per chunk of
//!    distinct codes);
//! 2. plan: the current value of every distinct natural key is read with one query per
//!    chunk of keys, then every record is decided in input order (created, corrected,
//!    unchanged or refused) against the state the earlier records left;
//! 3. write: multi-row `INSERT`s of the new revisions, their defects, the new current
//!    values (an upsert) and current defects, then the data version and the
//!    idempotency answer; commit.
//!
//! Any refusal rolls the whole transaction back.

use std::collections::{BTreeMap, HashMap, HashSet};

use dispar_core::code::CategoryCode;
use dispar_core::record::{CountRecord, Counts, RecordKey};
use sqlx::sqlite::SqliteConnection;
use sqlx::{QueryBuilder, Sqlite};
use time::{Date, OffsetDateTime};

use super::{SqliteStore, WriteTx, bump_data_version, parse_code, to_u64};
use crate::counts::{
    BatchOutcome, BatchResult, CountFilter, CountPage, Idempotency, MAX_PAGE, StoredAnswer,
    StoredRecord, WriteOutcome, WriteStatus,
};
use crate::error::{RecordError, RecordProblem, StoreError};
use crate::keys::KeyId;
use crate::timestamp::{format_date, format_instant, next_instant, parse_date, parse_instant};

/// Distinct keys per lookup query (5 binds each).
const LOOKUP_CHUNK: usize = 500;
/// Rows per multi-row insert into `count_revisions` (10 binds each) and
/// `counts_current` (8 binds each); SQLite allows 32766 binds per statement.
const INSERT_CHUNK: usize = 1000;
/// Rows per multi-row insert of defect counts (3 or 6 binds each).
const DEFECT_CHUNK: usize = 2000;

/// A natural key borrowed from the input records.
type Key<'a> = (&'a str, &'a str, Date, &'a str);

/// One input record in database form.
struct Row<'a> {
    key: Key<'a>,
    date_text: String,
    inspected: i64,
    defective: i64,
    plant_revision: Option<i64>,
    /// Sorted by category (the `BTreeMap` order, which is byte order like SQLite's).
    defects: Vec<(&'a str, i64)>,
}

fn to_i64(v: u64, field: &str) -> Result<i64, RecordProblem> {
    i64::try_from(v).map_err(|_| RecordProblem::OutOfRange {
        field: field.to_owned(),
    })
}

fn row_of(record: &CountRecord) -> Result<Row<'_>, RecordProblem> {
    let defects = record
        .defects()
        .iter()
        .map(|(c, &n)| Ok((c.as_str(), to_i64(n, &format!("defects/{c}"))?)))
        .collect::<Result<Vec<_>, RecordProblem>>()?;
    Ok(Row {
        key: (
            record.site().as_str(),
            record.line().as_str(),
            record.date(),
            record.product().map_or("", |p| p.as_str()),
        ),
        date_text: format_date(record.date()),
        inspected: to_i64(record.inspected(), "inspected")?,
        defective: to_i64(record.defective(), "defective")?,
        plant_revision: record.revision.map(|r| to_i64(r, "revision")).transpose()?,
        defects,
    })
}

/// Where a current value's defect counts are.
enum Defects {
    /// Read from the database.
    Stored(Vec<(String, i64)>),
    /// Those of the input row with this index.
    Row(usize),
}

/// The current value of a natural key during planning.
struct Current {
    revision_id: i64,
    inspected: i64,
    defective: i64,
    plant_revision: Option<i64>,
    defects: Defects,
    /// `current_defects` holds rows for this key that a new value must replace.
    stored_defects: bool,
}

enum Decision {
    Write(WriteStatus),
    Unchanged,
}

fn decide(
    current: Option<&Current>,
    rows: &[Row<'_>],
    row: &Row<'_>,
) -> Result<Decision, RecordProblem> {
    let Some(c) = current else {
        return Ok(Decision::Write(WriteStatus::Created));
    };
    let same_defects = match &c.defects {
        Defects::Stored(d) => {
            d.len() == row.defects.len()
                && d.iter()
                    .zip(&row.defects)
                    .all(|((a, n), (b, m))| a == b && n == m)
        }
        Defects::Row(i) => rows.get(*i).is_some_and(|r| r.defects == row.defects),
    };
    let same = c.inspected == row.inspected && c.defective == row.defective && same_defects;
    match (row.plant_revision, c.plant_revision) {
        (Some(new), Some(cur)) if new <= cur => {
            if same {
                Ok(Decision::Unchanged)
            } else {
                Err(RecordProblem::Conflict {
                    current_revision: u64::try_from(cur).unwrap_or(0),
                    revision_id: c.revision_id,
                })
            }
        }
        (new, cur) if same && (new.is_none() || new == cur) => Ok(Decision::Unchanged),
        _ => Ok(Decision::Write(WriteStatus::Corrected)),
    }
}

fn plant_revision_u64(v: Option<i64>) -> Result<Option<u64>, StoreError> {
    v.map(|r| to_u64(r, "plant revision")).transpose()
}

/// Looks up a stored answer: `None` if the key is unused, the answer if it was used
/// with this body hash, `IdempotencyMismatch` otherwise.
pub(super) async fn find_idempotent(
    conn: &mut SqliteConnection,
    api_key_id: Option<KeyId>,
    key: &str,
    body_sha256: &[u8; 32],
) -> Result<Option<StoredAnswer>, StoreError> {
    let row: Option<(Vec<u8>, i64, Vec<u8>)> = sqlx::query_as(
        "SELECT body_sha256, status, response_body FROM idempotency WHERE api_key_id = ? AND key = ?",
    )
    .bind(api_key_id.unwrap_or(0))
    .bind(key)
    .fetch_optional(&mut *conn)
    .await?;
    match row {
        None => Ok(None),
        Some((hash, status, body)) if hash.as_slice() == body_sha256.as_slice() => {
            Ok(Some(StoredAnswer {
                status: u16::try_from(status).map_err(|_| {
                    StoreError::internal(format!("stored status {status} is out of range"))
                })?,
                body,
            }))
        }
        Some(_) => Err(StoreError::IdempotencyMismatch),
    }
}

/// Refuses records whose site or line is not registered.
async fn check_registry(
    tx: &mut WriteTx,
    rows: &[Row<'_>],
    errors: &mut Vec<RecordError>,
) -> Result<(), StoreError> {
    let mut sites: Vec<&str> = rows.iter().map(|r| r.key.0).collect();
    sites.sort_unstable();
    sites.dedup();
    let mut lines: Vec<(&str, &str)> = rows.iter().map(|r| (r.key.0, r.key.1)).collect();
    lines.sort_unstable();
    lines.dedup();

    let mut known_sites: HashSet<String> = HashSet::new();
    for chunk in sites.chunks(LOOKUP_CHUNK) {
        let mut q: QueryBuilder<Sqlite> =
            QueryBuilder::new("SELECT code FROM sites WHERE code IN (");
        let mut sep = q.separated(", ");
        for s in chunk {
            sep.push_bind(*s);
        }
        q.push(")");
        let found: Vec<String> = q.build_query_scalar().fetch_all(&mut **tx).await?;
        known_sites.extend(found);
    }
    let mut known_lines: HashSet<(String, String)> = HashSet::new();
    for chunk in lines.chunks(LOOKUP_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new("WITH k(site, code) AS (");
        q.push_values(chunk, |mut b, (s, l)| {
            b.push_bind(*s).push_bind(*l);
        });
        q.push(
            ") SELECT l.site, l.code FROM k JOIN lines l ON l.site = k.site AND l.code = k.code",
        );
        let found: Vec<(String, String)> = q.build_query_as().fetch_all(&mut **tx).await?;
        known_lines.extend(found);
    }
    for (index, row) in rows.iter().enumerate() {
        let (site, line, _, _) = row.key;
        if !known_sites.contains(site) {
            errors.push(RecordError {
                index,
                problem: RecordProblem::UnknownSite {
                    site: site.to_owned(),
                },
            });
        } else if !known_lines.contains(&(site.to_owned(), line.to_owned())) {
            errors.push(RecordError {
                index,
                problem: RecordProblem::UnknownLine {
                    site: site.to_owned(),
                    line: line.to_owned(),
                },
            });
        }
    }
    Ok(())
}

/// Reads the current value of every distinct key (`keys[i]` is key id `i`).
async fn load_current<'a>(
    tx: &mut WriteTx,
    keys: &[&'a Row<'a>],
) -> Result<Vec<Option<Current>>, StoreError> {
    let mut current: Vec<Option<Current>> = Vec::with_capacity(keys.len());
    current.resize_with(keys.len(), || None);
    for (chunk_no, chunk) in keys.chunks(LOOKUP_CHUNK).enumerate() {
        let base = chunk_no * LOOKUP_CHUNK;
        let values = |q: &mut QueryBuilder<Sqlite>| {
            q.push_values(chunk.iter().enumerate(), |mut b, (i, r)| {
                let id = i64::try_from(base + i).unwrap_or(i64::MAX);
                b.push_bind(id)
                    .push_bind(r.key.0)
                    .push_bind(r.key.1)
                    .push_bind(r.date_text.as_str())
                    .push_bind(r.key.3);
            });
        };
        let mut q: QueryBuilder<Sqlite> =
            QueryBuilder::new("WITH k(i, site, line, date, product) AS (");
        values(&mut q);
        q.push(
            ") SELECT k.i, c.revision_id, c.inspected, c.defective, c.plant_revision \
             FROM k JOIN counts_current c \
             ON c.site = k.site AND c.line = k.line AND c.date = k.date AND c.product = k.product",
        );
        let found: Vec<(i64, i64, i64, i64, Option<i64>)> =
            q.build_query_as().fetch_all(&mut **tx).await?;
        if found.is_empty() {
            continue;
        }
        for (i, revision_id, inspected, defective, plant_revision) in found {
            let slot = usize::try_from(i)
                .ok()
                .and_then(|i| current.get_mut(i))
                .ok_or_else(|| StoreError::internal("lookup returned an unknown key index"))?;
            *slot = Some(Current {
                revision_id,
                inspected,
                defective,
                plant_revision,
                defects: Defects::Stored(Vec::new()),
                stored_defects: false,
            });
        }
        let mut q: QueryBuilder<Sqlite> =
            QueryBuilder::new("WITH k(i, site, line, date, product) AS (");
        values(&mut q);
        q.push(
            ") SELECT k.i, d.category, d.count FROM k JOIN current_defects d \
             ON d.date = k.date AND d.site = k.site AND d.line = k.line AND d.product = k.product \
             ORDER BY k.i, d.category",
        );
        let defects: Vec<(i64, String, i64)> = q.build_query_as().fetch_all(&mut **tx).await?;
        for (i, category, count) in defects {
            if let Some(Some(c)) = usize::try_from(i).ok().and_then(|i| current.get_mut(i)) {
                c.stored_defects = true;
                if let Defects::Stored(d) = &mut c.defects {
                    d.push((category, count));
                }
            }
        }
    }
    Ok(current)
}

impl SqliteStore {
    pub(super) async fn put_batch_impl(
        &self,
        records: &[CountRecord],
        api_key_id: Option<KeyId>,
        idempotency: Option<Idempotency<'_>>,
    ) -> Result<BatchResult, StoreError> {
        let mut errors = Vec::new();
        let mut rows = Vec::with_capacity(records.len());
        for (index, record) in records.iter().enumerate() {
            match row_of(record) {
                Ok(row) => rows.push(row),
                Err(problem) => errors.push(RecordError { index, problem }),
            }
        }
        if !errors.is_empty() {
            return Err(StoreError::Rejected(errors));
        }

        let mut tx = self.begin_write().await?;
        if let Some(idem) = &idempotency
            && let Some(answer) =
                find_idempotent(&mut tx, api_key_id, idem.key, &idem.body_sha256).await?
        {
            tx.rollback().await?;
            return Ok(BatchResult::Replayed(answer));
        }

        check_registry(&mut tx, &rows, &mut errors).await?;
        if !errors.is_empty() {
            return Err(StoreError::Rejected(errors));
        }

        // Plan.
        let mut key_ids: HashMap<Key<'_>, usize> = HashMap::with_capacity(rows.len());
        let mut distinct: Vec<&Row<'_>> = Vec::new();
        let mut row_key: Vec<usize> = Vec::with_capacity(rows.len());
        for row in &rows {
            let next = distinct.len();
            let id = *key_ids.entry(row.key).or_insert(next);
            if id == next {
                distinct.push(row);
            }
            row_key.push(id);
        }
        let mut state = load_current(&mut tx, &distinct).await?;

        let mut outcome = BatchOutcome {
            outcomes: Vec::with_capacity(rows.len()),
            ..BatchOutcome::default()
        };
        // (row index, revision id) of every revision to write, and the keys they change.
        let mut writes: Vec<(usize, i64)> = Vec::new();
        let mut dirty: Vec<usize> = Vec::new();
        let mut is_dirty = vec![false; distinct.len()];
        // The value each changed key had before this batch (for the monthly sums).
        let mut original: Vec<Option<Current>> = Vec::new();
        original.resize_with(distinct.len(), || None);
        let mut next_id: Option<i64> = None;
        for (index, row) in rows.iter().enumerate() {
            let k = row_key.get(index).copied().unwrap_or(0);
            let current = state.get(k).and_then(Option::as_ref);
            match decide(current, &rows, row) {
                Err(problem) => errors.push(RecordError { index, problem }),
                Ok(Decision::Unchanged) => {
                    let c = current
                        .ok_or_else(|| StoreError::internal("unchanged without a current value"))?;
                    outcome.push(WriteOutcome {
                        revision_id: c.revision_id,
                        plant_revision: plant_revision_u64(c.plant_revision)?,
                        status: WriteStatus::Unchanged,
                    });
                }
                Ok(Decision::Write(status)) => {
                    let id = match next_id {
                        Some(id) => id,
                        None => next_revision_id(&mut tx).await?,
                    };
                    next_id = Some(id + 1);
                    writes.push((index, id));
                    outcome.push(WriteOutcome {
                        revision_id: id,
                        plant_revision: plant_revision_u64(row.plant_revision)?,
                        status,
                    });
                    let stored_defects = current.is_some_and(|c| c.stored_defects);
                    let new = Current {
                        revision_id: id,
                        inspected: row.inspected,
                        defective: row.defective,
                        plant_revision: row.plant_revision,
                        defects: Defects::Row(index),
                        stored_defects,
                    };
                    let before = state.get_mut(k).and_then(|slot| slot.replace(new));
                    if let Some(d) = is_dirty.get_mut(k)
                        && !*d
                    {
                        *d = true;
                        dirty.push(k);
                        if let Some(o) = original.get_mut(k) {
                            *o = before;
                        }
                    }
                }
            }
        }
        if !errors.is_empty() {
            return Err(StoreError::Rejected(errors));
        }

        // Write.
        if !writes.is_empty() {
            let recorded_at = format_instant(next_instant(last_recorded_at(&mut tx).await?))?;
            let api_key = api_key_id;
            for chunk in writes.chunks(INSERT_CHUNK) {
                let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
                    "INSERT INTO count_revisions (id, site, line, date, product, inspected, defective, \
                     plant_revision, recorded_at, api_key_id) ",
                );
                q.push_values(chunk, |mut b, &(i, id)| {
                    if let Some(r) = rows.get(i) {
                        b.push_bind(id)
                            .push_bind(r.key.0)
                            .push_bind(r.key.1)
                            .push_bind(r.date_text.as_str())
                            .push_bind(r.key.3)
                            .push_bind(r.inspected)
                            .push_bind(r.defective)
                            .push_bind(r.plant_revision)
                            .push_bind(recorded_at.as_str())
                            .push_bind(api_key);
                    }
                });
                q.build().execute(&mut *tx).await?;
            }

            let revision_defects: Vec<(i64, &str, i64)> = writes
                .iter()
                .filter_map(|&(i, id)| rows.get(i).map(|r| (id, r)))
                .flat_map(|(id, r)| r.defects.iter().map(move |&(c, n)| (id, c, n)))
                .collect();
            for chunk in revision_defects.chunks(DEFECT_CHUNK) {
                let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
                    "INSERT INTO revision_defects (revision_id, category, count) ",
                );
                q.push_values(chunk, |mut b, &(id, c, n)| {
                    b.push_bind(id).push_bind(c).push_bind(n);
                });
                q.build().execute(&mut *tx).await?;
            }

            // Final state of every changed key.
            let finals: Vec<(&Row<'_>, &Current)> = dirty
                .iter()
                .filter_map(|&k| {
                    let c = state.get(k)?.as_ref()?;
                    let Defects::Row(i) = c.defects else {
                        return None;
                    };
                    Some((rows.get(i)?, c))
                })
                .collect();
            for chunk in finals.chunks(INSERT_CHUNK) {
                let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
                    "INSERT INTO counts_current (date, site, line, product, revision_id, inspected, \
                     defective, plant_revision) ",
                );
                q.push_values(chunk, |mut b, (r, c)| {
                    b.push_bind(r.date_text.as_str())
                        .push_bind(r.key.0)
                        .push_bind(r.key.1)
                        .push_bind(r.key.3)
                        .push_bind(c.revision_id)
                        .push_bind(c.inspected)
                        .push_bind(c.defective)
                        .push_bind(c.plant_revision);
                });
                q.push(
                    " ON CONFLICT (date, site, line, product) DO UPDATE SET \
                     revision_id = excluded.revision_id, inspected = excluded.inspected, \
                     defective = excluded.defective, plant_revision = excluded.plant_revision",
                );
                q.build().execute(&mut *tx).await?;
            }

            let replaced: Vec<&Row<'_>> = finals
                .iter()
                .filter(|(_, c)| c.stored_defects)
                .map(|(r, _)| *r)
                .collect();
            for chunk in replaced.chunks(INSERT_CHUNK) {
                let mut q: QueryBuilder<Sqlite> =
                    QueryBuilder::new("WITH k(date, site, line, product) AS (");
                q.push_values(chunk, |mut b, r| {
                    b.push_bind(r.date_text.as_str())
                        .push_bind(r.key.0)
                        .push_bind(r.key.1)
                        .push_bind(r.key.3);
                });
                q.push(
                    ") DELETE FROM current_defects WHERE (date, site, line, product) IN \
                     (SELECT date, site, line, product FROM k)",
                );
                q.build().execute(&mut *tx).await?;
            }

            let current_defects: Vec<(&Row<'_>, &str, i64)> = finals
                .iter()
                .flat_map(|(r, _)| r.defects.iter().map(move |&(c, n)| (*r, c, n)))
                .collect();
            for chunk in current_defects.chunks(DEFECT_CHUNK) {
                let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
                    "INSERT INTO current_defects (date, site, line, product, category, count) ",
                );
                q.push_values(chunk, |mut b, (r, c, n)| {
                    b.push_bind(r.date_text.as_str())
                        .push_bind(r.key.0)
                        .push_bind(r.key.1)
                        .push_bind(r.key.3)
                        .push_bind(*c)
                        .push_bind(*n);
                });
                q.build().execute(&mut *tx).await?;
            }

            write_month_sums(&mut tx, &rows, &dirty, &state, &original).await?;
            bump_data_version(&mut tx).await?;
        }

        let answer = match &idempotency {
            Some(idem) => {
                let answer = (idem.render)(&outcome);
                sqlx::query(
                    "INSERT INTO idempotency (api_key_id, key, body_sha256, status, response_body, created_at) \
                     VALUES (?, ?, ?, ?, ?, ?)",
                )
                .bind(api_key_id.unwrap_or(0))
                .bind(idem.key)
                .bind(idem.body_sha256.as_slice())
                .bind(i64::from(answer.status))
                .bind(answer.body.as_slice())
                .bind(format_instant(OffsetDateTime::now_utc())?)
                .execute(&mut *tx)
                .await?;
                Some(answer)
            }
            None => None,
        };
        tx.commit().await?;
        Ok(BatchResult::Written { outcome, answer })
    }

    pub(super) async fn purge_idempotency_impl(
        &self,
        before: OffsetDateTime,
    ) -> Result<u64, StoreError> {
        let mut tx = self.begin_write().await?;
        let done = sqlx::query("DELETE FROM idempotency WHERE created_at < ?")
            .bind(format_instant(before)?)
            .execute(&mut *tx)
            .await?;
        tx.commit().await?;
        Ok(done.rows_affected())
    }

    pub(super) async fn get_record_impl(
        &self,
        key: &RecordKey,
    ) -> Result<Option<StoredRecord>, StoreError> {
        let mut tx = self.reader.begin().await?;
        let row: Option<CurrentRow> = sqlx::query_as(sqlx::AssertSqlSafe(format!(
            "{CURRENT_SELECT} WHERE c.site = ? AND c.line = ? AND c.date = ? AND c.product = ?"
        )))
        .bind(key.site().as_str())
        .bind(key.line().as_str())
        .bind(format_date(key.date()))
        .bind(key.product().map_or("", |p| p.as_str()))
        .fetch_optional(&mut *tx)
        .await?;
        let Some(row) = row else {
            return Ok(None);
        };
        let mut defects = load_revision_defects(&mut tx, &[row.4]).await?;
        tx.rollback().await?;
        let d = defects.remove(&row.4).unwrap_or_default();
        stored_from_current(row, d).map(Some)
    }

    pub(super) async fn list_counts_impl(
        &self,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError> {
        let limit = limit.clamp(1, MAX_PAGE);
        let after = cursor.map(decode_cursor).transpose()?;
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(CURRENT_SELECT);
        q.push(" WHERE 1 = 1");
        if let Some(s) = &filter.site {
            q.push(" AND c.site = ").push_bind(s.as_str());
        }
        if let Some(l) = &filter.line {
            q.push(" AND c.line = ").push_bind(l.as_str());
        }
        if let Some(p) = &filter.product {
            q.push(" AND c.product = ").push_bind(p.as_str());
        }
        if let Some(d) = filter.from {
            q.push(" AND c.date >= ").push_bind(format_date(d));
        }
        if let Some(d) = filter.to {
            q.push(" AND c.date <= ").push_bind(format_date(d));
        }
        if let Some([date, site, line, product]) = after {
            q.push(" AND (c.date, c.site, c.line, c.product) > (")
                .push_bind(date)
                .push(", ")
                .push_bind(site)
                .push(", ")
                .push_bind(line)
                .push(", ")
                .push_bind(product)
                .push(")");
        }
        q.push(" ORDER BY c.date, c.site, c.line, c.product LIMIT ")
            .push_bind(i64::from(limit) + 1);

        let mut tx = self.reader.begin().await?;
        let mut rows: Vec<CurrentRow> = q.build_query_as().fetch_all(&mut *tx).await?;
        let more = rows.len() > limit as usize;
        rows.truncate(limit as usize);
        let ids: Vec<i64> = rows.iter().map(|r| r.4).collect();
        let mut defects = load_revision_defects(&mut tx, &ids).await?;
        tx.rollback().await?;

        let next_cursor = match (more, rows.last()) {
            (true, Some(last)) => Some(encode_cursor([&last.2, &last.0, &last.1, &last.3])),
            _ => None,
        };
        let records = rows
            .into_iter()
            .map(|row| {
                let d = defects.remove(&row.4).unwrap_or_default();
                stored_from_current(row, d)
            })
            .collect::<Result<_, _>>()?;
        Ok(CountPage {
            records,
            next_cursor,
        })
    }

    pub(super) async fn record_history_impl(
        &self,
        key: &RecordKey,
    ) -> Result<Vec<StoredRecord>, StoreError> {
        let rows: Vec<HistoryRow> = sqlx::query_as(
            "SELECT r.id, r.inspected, r.defective, r.plant_revision, r.recorded_at, r.api_key_id, \
                    d.category, d.count \
             FROM count_revisions r LEFT JOIN revision_defects d ON d.revision_id = r.id \
             WHERE r.date = ? AND r.site = ? AND r.line = ? AND r.product = ? \
             ORDER BY r.id, d.category",
        )
        .bind(format_date(key.date()))
        .bind(key.site().as_str())
        .bind(key.line().as_str())
        .bind(key.product().map_or("", |p| p.as_str()))
        .fetch_all(&self.reader)
        .await?;
        let mut out: Vec<StoredRecord> = Vec::new();
        let mut pending: Option<(HistoryHead, BTreeMap<CategoryCode, u64>)> = None;
        for (id, inspected, defective, plant_revision, recorded_at, api_key_id, category, count) in
            rows
        {
            if pending.as_ref().is_none_or(|(h, _)| h.0 != id) {
                if let Some((head, defects)) = pending.take() {
                    out.push(stored_from_history(key, head, defects)?);
                }
                pending = Some((
                    (
                        id,
                        inspected,
                        defective,
                        plant_revision,
                        recorded_at,
                        api_key_id,
                    ),
                    BTreeMap::new(),
                ));
            }
            if let (Some((_, defects)), Some(category), Some(count)) =
                (pending.as_mut(), category, count)
            {
                defects.insert(parse_code(&category)?, to_u64(count, "defect count")?);
            }
        }
        if let Some((head, defects)) = pending {
            out.push(stored_from_history(key, head, defects)?);
        }
        Ok(out)
    }
}

/// `(site, line, date, product, revision_id, inspected, defective, plant_revision,
/// recorded_at, api_key_id)`
type CurrentRow = (
    String,
    String,
    String,
    String,
    i64,
    i64,
    i64,
    Option<i64>,
    String,
    Option<i64>,
);

const CURRENT_SELECT: &str = "SELECT c.site, c.line, c.date, c.product, c.revision_id, c.inspected, \
     c.defective, c.plant_revision, r.recorded_at, r.api_key_id \
     FROM counts_current c JOIN count_revisions r ON r.id = c.revision_id";

/// `(id, inspected, defective, plant_revision, recorded_at, api_key_id)`
type HistoryHead = (i64, i64, i64, Option<i64>, String, Option<i64>);
type HistoryRow = (
    i64,
    i64,
    i64,
    Option<i64>,
    String,
    Option<i64>,
    Option<String>,
    Option<i64>,
);

async fn load_revision_defects(
    conn: &mut SqliteConnection,
    ids: &[i64],
) -> Result<HashMap<i64, BTreeMap<CategoryCode, u64>>, StoreError> {
    let mut out: HashMap<i64, BTreeMap<CategoryCode, u64>> = HashMap::new();
    for chunk in ids.chunks(LOOKUP_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
            "SELECT revision_id, category, count FROM revision_defects WHERE revision_id IN (",
        );
        let mut sep = q.separated(", ");
        for id in chunk {
            sep.push_bind(*id);
        }
        q.push(")");
        let rows: Vec<(i64, String, i64)> = q.build_query_as().fetch_all(&mut *conn).await?;
        for (id, category, count) in rows {
            out.entry(id)
                .or_default()
                .insert(parse_code(&category)?, to_u64(count, "defect count")?);
        }
    }
    Ok(out)
}

fn build_record(
    key: RecordKey,
    inspected: i64,
    defective: i64,
    plant_revision: Option<i64>,
    defects: BTreeMap<CategoryCode, u64>,
) -> Result<CountRecord, StoreError> {
    let counts = Counts::new(
        to_u64(inspected, "inspected")?,
        to_u64(defective, "defective")?,
        defects,
    )
    .map_err(|e| StoreError::internal(format!("stored counts are invalid: {e:?}")))?;
    Ok(CountRecord {
        key,
        counts,
        revision: plant_revision_u64(plant_revision)?,
    })
}

fn stored_from_current(
    row: CurrentRow,
    defects: BTreeMap<CategoryCode, u64>,
) -> Result<StoredRecord, StoreError> {
    let (
        site,
        line,
        date,
        product,
        revision_id,
        inspected,
        defective,
        plant_revision,
        recorded_at,
        api_key_id,
    ) = row;
    let key = RecordKey::new(
        parse_code(&site)?,
        parse_code(&line)?,
        if product.is_empty() {
            None
        } else {
            Some(parse_code(&product)?)
        },
        parse_date(&date)?,
    )
    .map_err(|e| StoreError::internal(format!("stored key is invalid: {}", e.message)))?;
    Ok(StoredRecord {
        record: build_record(key, inspected, defective, plant_revision, defects)?,
        revision_id,
        recorded_at: parse_instant(&recorded_at)?,
        api_key_id,
    })
}

fn stored_from_history(
    key: &RecordKey,
    head: HistoryHead,
    defects: BTreeMap<CategoryCode, u64>,
) -> Result<StoredRecord, StoreError> {
    let (id, inspected, defective, plant_revision, recorded_at, api_key_id) = head;
    Ok(StoredRecord {
        record: build_record(key.clone(), inspected, defective, plant_revision, defects)?,
        revision_id: id,
        recorded_at: parse_instant(&recorded_at)?,
        api_key_id,
    })
}

/// Adds the change of every changed key (final value minus the value before the batch)
/// to the monthly sums.
async fn write_month_sums(
    tx: &mut WriteTx,
    rows: &[Row<'_>],
    dirty: &[usize],
    state: &[Option<Current>],
    original: &[Option<Current>],
) -> Result<(), StoreError> {
    type Group<'a> = (&'a str, &'a str, &'a str, &'a str);
    let mut totals: BTreeMap<Group<'_>, (i64, i64)> = BTreeMap::new();
    let mut defects: BTreeMap<(Group<'_>, String), i64> = BTreeMap::new();
    for &k in dirty {
        let Some(Some(now)) = state.get(k) else {
            continue;
        };
        let Defects::Row(i) = now.defects else {
            continue;
        };
        let Some(row) = rows.get(i) else { continue };
        let month = row.date_text.get(..7).unwrap_or(&row.date_text);
        let group = (month, row.key.0, row.key.1, row.key.3);
        let (mut di, mut dd) = (now.inspected, now.defective);
        for (c, n) in &row.defects {
            *defects.entry((group, (*c).to_owned())).or_default() += n;
        }
        if let Some(Some(before)) = original.get(k) {
            di -= before.inspected;
            dd -= before.defective;
            if let Defects::Stored(d) = &before.defects {
                for (c, n) in d {
                    *defects.entry((group, c.clone())).or_default() -= n;
                }
            }
        }
        let t = totals.entry(group).or_default();
        t.0 += di;
        t.1 += dd;
    }
    let totals: Vec<_> = totals.into_iter().filter(|(_, d)| *d != (0, 0)).collect();
    for chunk in totals.chunks(INSERT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
            "INSERT INTO month_totals (month, site, line, product, inspected, defective) ",
        );
        q.push_values(chunk, |mut b, ((m, s, l, p), (i, d))| {
            b.push_bind(*m)
                .push_bind(*s)
                .push_bind(*l)
                .push_bind(*p)
                .push_bind(*i)
                .push_bind(*d);
        });
        q.push(
            " ON CONFLICT (month, site, line, product) DO UPDATE SET \
             inspected = inspected + excluded.inspected, defective = defective + excluded.defective",
        );
        q.build().execute(&mut **tx).await?;
    }
    let defects: Vec<_> = defects.into_iter().filter(|(_, n)| *n != 0).collect();
    for chunk in defects.chunks(DEFECT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
            "INSERT INTO month_defects (month, site, line, product, category, count) ",
        );
        q.push_values(chunk, |mut b, (((m, s, l, p), c), n)| {
            b.push_bind(*m)
                .push_bind(*s)
                .push_bind(*l)
                .push_bind(*p)
                .push_bind(c.as_str())
                .push_bind(*n);
        });
        q.push(
            " ON CONFLICT (month, site, line, product, category) DO UPDATE SET \
             count = count + excluded.count",
        );
        q.build().execute(&mut **tx).await?;
    }
    Ok(())
}

/// The id the next revision gets: one above any id ever used.
async fn next_revision_id(tx: &mut WriteTx) -> Result<i64, StoreError> {
    let max: i64 = sqlx::query_scalar(
        "SELECT MAX(COALESCE((SELECT MAX(id) FROM count_revisions), 0), \
                    COALESCE((SELECT seq FROM sqlite_sequence WHERE name = 'count_revisions'), 0))",
    )
    .fetch_one(&mut **tx)
    .await?;
    Ok(max + 1)
}

async fn last_recorded_at(tx: &mut WriteTx) -> Result<Option<OffsetDateTime>, StoreError> {
    let last: Option<String> =
        sqlx::query_scalar("SELECT recorded_at FROM count_revisions ORDER BY id DESC LIMIT 1")
            .fetch_optional(&mut **tx)
            .await?;
    last.as_deref().map(parse_instant).transpose()
}

/// Cursors are the hex of `date \n site \n line \n product` of the last row shown:
/// opaque to clients, and codes cannot contain a newline.
fn encode_cursor(parts: [&str; 4]) -> String {
    hex::encode(parts.join("\n"))
}

fn decode_cursor(cursor: &str) -> Result<[String; 4], StoreError> {
    let bytes = hex::decode(cursor).map_err(|_| StoreError::BadCursor)?;
    let text = String::from_utf8(bytes).map_err(|_| StoreError::BadCursor)?;
    let mut parts = text.split('\n').map(str::to_owned);
    let (Some(date), Some(site), Some(line), Some(product), None) = (
        parts.next(),
        parts.next(),
        parts.next(),
        parts.next(),
        parts.next(),
    ) else {
        return Err(StoreError::BadCursor);
    };
    if dispar_core::date::parse_iso_date(&date).is_none() || site.is_empty() || line.is_empty() {
        return Err(StoreError::BadCursor);
    }
    Ok([date, site, line, product])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cursors_round_trip_and_garbage_is_refused() {
        let c = encode_cursor(["2026-03-14", "S1", "L1", ""]);
        assert_eq!(
            decode_cursor(&c).expect("round trip"),
            [
                "2026-03-14".to_owned(),
                "S1".to_owned(),
                "L1".to_owned(),
                String::new()
            ]
        );
        for bad in [
            "zz",
            "",
            &hex::encode("not-a-date\nS1\nL1\n"),
            &hex::encode("2026-03-14\nS1"),
        ] {
            assert!(
                matches!(decode_cursor(bad), Err(StoreError::BadCursor)),
                "{bad}"
            );
        }
    }
}

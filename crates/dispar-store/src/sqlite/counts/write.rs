//! Batch writes of count records, and the idempotency answers stored with them.
//!
//! A write runs in one `BEGIN IMMEDIATE` transaction: the stored answer is replayed
//! if the Idempotency-Key was seen with this body; every site and line of the batch
//! must exist (two queries per chunk of distinct codes); the current value of every
//! distinct natural key is read (one query per chunk of keys); [`plan_batch`] applies
//! the write rules; and the plan is written with multi-row `INSERT`s (the new
//! revisions and their defects, the new current values as an upsert and their
//! defects, the monthly sums), then the data version and the idempotency answer.
//!
//! Any refusal rolls the whole transaction back.

use std::collections::HashSet;

use dispar_core::record::CountRecord;
use sqlx::sqlite::SqliteConnection;
use sqlx::{QueryBuilder, Sqlite};
use time::OffsetDateTime;

use crate::counts::{BatchResult, Idempotency, StoredAnswer};
use crate::error::{RecordError, StoreError};
use crate::keys::KeyId;
use crate::plan::{Batch, Current, Plan, plan_batch};
use crate::sqlite::db::{LOOKUP_CHUNK, SqliteStore, WriteTx, bump_data_version};
use crate::timestamp::{format_date, format_instant, format_month, next_instant, parse_instant};

/// Rows per multi-row insert into `count_revisions` (10 binds each) and
/// `counts_current` (8 binds each); SQLite allows 32766 binds per statement.
const INSERT_CHUNK: usize = 1000;
/// Rows per multi-row insert of defect counts (3 or 6 binds each).
const DEFECT_CHUNK: usize = 2000;

impl SqliteStore {
    pub(in crate::sqlite) async fn put_batch_impl(
        &self,
        records: &[CountRecord],
        api_key_id: Option<KeyId>,
        idempotency: Option<Idempotency<'_>>,
    ) -> Result<BatchResult, StoreError> {
        let batch = Batch::new(records).map_err(StoreError::Rejected)?;
        // Stored dates by row index: each is bound in several statements.
        let dates: Vec<String> = batch
            .rows()
            .iter()
            .map(|r| format_date(r.key.date))
            .collect();

        let mut tx = self.begin_write().await?;
        if let Some(idem) = &idempotency
            && let Some(answer) =
                find_idempotent(&mut tx, api_key_id, idem.key, &idem.body_sha256).await?
        {
            tx.rollback().await?;
            return Ok(BatchResult::Replayed(answer));
        }

        let unregistered = check_registry(&mut tx, &batch).await?;
        if !unregistered.is_empty() {
            return Err(StoreError::Rejected(unregistered));
        }
        let current = load_current(&mut tx, &batch, &dates).await?;
        let first_id = next_revision_id(&mut tx).await?;
        let plan = plan_batch(&batch, current, first_id).map_err(StoreError::Rejected)?;
        if !plan.revisions.is_empty() {
            write_plan(&mut tx, &plan, &dates, api_key_id).await?;
            bump_data_version(&mut tx).await?;
        }

        let outcome = plan.outcome;
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

    pub(in crate::sqlite) async fn purge_idempotency_impl(
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
}

/// Looks up a stored answer: `None` if the key is unused, the answer if it was used
/// with this body hash, `IdempotencyMismatch` otherwise.
pub(in crate::sqlite) async fn find_idempotent(
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

/// The records whose site or line is not registered.
async fn check_registry(
    tx: &mut WriteTx,
    batch: &Batch<'_>,
) -> Result<Vec<RecordError>, StoreError> {
    let mut known_sites: HashSet<String> = HashSet::new();
    for chunk in batch.sites().chunks(LOOKUP_CHUNK) {
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
    for chunk in batch.lines().chunks(LOOKUP_CHUNK) {
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
    Ok(batch.unregistered(
        |site| known_sites.contains(site),
        |site, line| known_lines.contains(&(site.to_owned(), line.to_owned())),
    ))
}

/// Reads the current value of every distinct key of the batch, in the order of
/// [`Batch::key_rows`].
async fn load_current(
    tx: &mut WriteTx,
    batch: &Batch<'_>,
    dates: &[String],
) -> Result<Vec<Option<Current>>, StoreError> {
    let keys: Vec<_> = batch.key_rows().collect();
    let mut current: Vec<Option<Current>> = vec![None; keys.len()];
    for (chunk_no, chunk) in keys.chunks(LOOKUP_CHUNK).enumerate() {
        let base = chunk_no * LOOKUP_CHUNK;
        let values = |q: &mut QueryBuilder<Sqlite>| {
            q.push_values(chunk.iter().enumerate(), |mut b, (i, r)| {
                let id = i64::try_from(base + i).unwrap_or(i64::MAX);
                b.push_bind(id)
                    .push_bind(r.key.site)
                    .push_bind(r.key.line)
                    .push_bind(dates[r.index].as_str())
                    .push_bind(r.key.product);
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
            *slot = Some(Current::new(
                revision_id,
                inspected,
                defective,
                plant_revision,
            )?);
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
                c.add_defect(category, count);
            }
        }
    }
    Ok(current)
}

/// Writes an accepted plan: the new revisions and their defects, the new current
/// values and their defects, and the changes of the monthly sums.
async fn write_plan(
    tx: &mut WriteTx,
    plan: &Plan<'_>,
    dates: &[String],
    api_key_id: Option<KeyId>,
) -> Result<(), StoreError> {
    let recorded_at = format_instant(next_instant(last_recorded_at(tx).await?))?;
    for chunk in plan.revisions.chunks(INSERT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
            "INSERT INTO count_revisions (id, site, line, date, product, inspected, defective, \
             plant_revision, recorded_at, api_key_id) ",
        );
        q.push_values(chunk, |mut b, rev| {
            let r = rev.row;
            b.push_bind(rev.id)
                .push_bind(r.key.site)
                .push_bind(r.key.line)
                .push_bind(dates[r.index].as_str())
                .push_bind(r.key.product)
                .push_bind(r.inspected)
                .push_bind(r.defective)
                .push_bind(r.plant_revision)
                .push_bind(recorded_at.as_str())
                .push_bind(api_key_id);
        });
        q.build().execute(&mut **tx).await?;
    }

    let revision_defects: Vec<(i64, &str, i64)> = plan
        .revisions
        .iter()
        .flat_map(|rev| rev.row.defects.iter().map(move |&(c, n)| (rev.id, c, n)))
        .collect();
    for chunk in revision_defects.chunks(DEFECT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> =
            QueryBuilder::new("INSERT INTO revision_defects (revision_id, category, count) ");
        q.push_values(chunk, |mut b, &(id, c, n)| {
            b.push_bind(id).push_bind(c).push_bind(n);
        });
        q.build().execute(&mut **tx).await?;
    }

    for chunk in plan.current.chunks(INSERT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
            "INSERT INTO counts_current (date, site, line, product, revision_id, inspected, \
             defective, plant_revision) ",
        );
        q.push_values(chunk, |mut b, c| {
            let r = c.row;
            b.push_bind(dates[r.index].as_str())
                .push_bind(r.key.site)
                .push_bind(r.key.line)
                .push_bind(r.key.product)
                .push_bind(c.revision_id)
                .push_bind(r.inspected)
                .push_bind(r.defective)
                .push_bind(r.plant_revision);
        });
        q.push(
            " ON CONFLICT (date, site, line, product) DO UPDATE SET \
             revision_id = excluded.revision_id, inspected = excluded.inspected, \
             defective = excluded.defective, plant_revision = excluded.plant_revision",
        );
        q.build().execute(&mut **tx).await?;
    }

    let replaced: Vec<_> = plan
        .current
        .iter()
        .filter(|c| c.replaces_defects)
        .map(|c| c.row)
        .collect();
    for chunk in replaced.chunks(INSERT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> =
            QueryBuilder::new("WITH k(date, site, line, product) AS (");
        q.push_values(chunk, |mut b, r| {
            b.push_bind(dates[r.index].as_str())
                .push_bind(r.key.site)
                .push_bind(r.key.line)
                .push_bind(r.key.product);
        });
        q.push(
            ") DELETE FROM current_defects WHERE (date, site, line, product) IN \
             (SELECT date, site, line, product FROM k)",
        );
        q.build().execute(&mut **tx).await?;
    }

    let current_defects: Vec<_> = plan
        .current
        .iter()
        .flat_map(|c| c.row.defects.iter().map(move |&(cat, n)| (c.row, cat, n)))
        .collect();
    for chunk in current_defects.chunks(DEFECT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
            "INSERT INTO current_defects (date, site, line, product, category, count) ",
        );
        q.push_values(chunk, |mut b, &(r, c, n)| {
            b.push_bind(dates[r.index].as_str())
                .push_bind(r.key.site)
                .push_bind(r.key.line)
                .push_bind(r.key.product)
                .push_bind(c)
                .push_bind(n);
        });
        q.build().execute(&mut **tx).await?;
    }

    for chunk in plan.month_totals.chunks(INSERT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
            "INSERT INTO month_totals (month, site, line, product, inspected, defective) ",
        );
        q.push_values(chunk, |mut b, t| {
            b.push_bind(format_month(t.key.month))
                .push_bind(t.key.site)
                .push_bind(t.key.line)
                .push_bind(t.key.product)
                .push_bind(t.inspected)
                .push_bind(t.defective);
        });
        q.push(
            " ON CONFLICT (month, site, line, product) DO UPDATE SET \
             inspected = inspected + excluded.inspected, defective = defective + excluded.defective",
        );
        q.build().execute(&mut **tx).await?;
    }
    for chunk in plan.month_defects.chunks(DEFECT_CHUNK) {
        let mut q: QueryBuilder<Sqlite> = QueryBuilder::new(
            "INSERT INTO month_defects (month, site, line, product, category, count) ",
        );
        q.push_values(chunk, |mut b, d| {
            b.push_bind(format_month(d.key.month))
                .push_bind(d.key.site)
                .push_bind(d.key.line)
                .push_bind(d.key.product)
                .push_bind(d.category.as_str())
                .push_bind(d.count);
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

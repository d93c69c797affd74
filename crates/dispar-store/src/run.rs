//! Reads that both backends run the same way: the statements of [`crate::sql`] executed
//! on any sqlx connection, with the results merged. What differs between the backends
//! (how a transaction starts, locks and retries) stays in the backend modules, which
//! hand these functions a connection inside their transaction.

use std::collections::{BTreeMap, HashMap, HashSet};

use dispar_core::code::{CategoryCode, LineCode, SiteCode};
use dispar_core::record::RecordKey;
use dispar_core::site::{Line, Site};
use sqlx::{Database, Decode, Encode, Executor, FromRow, IntoArguments, QueryBuilder, Type};
use time::OffsetDateTime;

use crate::aggregate::{DefectsRow, GroupKey, TotalsRow, finish, finish_buckets, named_site};
use crate::counts::{CountFilter, CountPage, MAX_PAGE, StoredRecord};
use crate::decode::{
    CURRENT_SELECT, CurrentRow, HISTORY_SELECT, HistoryRow, KEY_COLUMNS, KeyRow, decode_cursor,
    defects_by_revision, encode_cursor, history_from_rows, keys_from_rows, line_from_row,
    parse_code, site_from_row, stored_from_current, to_u64,
};
use crate::error::{RecordError, StoreError};
use crate::keys::{ApiKey, KeyId, KeyRole};
use crate::plan::{Batch, Current, fill_current};
use crate::reports::{Aggregate, AggregateQuery, BucketedAggregate, LineDay, LineDays};
use crate::sessions::{NewPageSession, PageSession};
use crate::sites::{SiteWithLines, Upserted};
use crate::sql::{BUMP_DATA_VERSION, DATA_VERSION, LOOKUP_CHUNK, MARK_REGISTRY_VERSION, Sql};
use crate::timestamp::{format_date, format_instant, parse_date, parse_instant};

/// Rows a statement changed, for any database's query result.
pub(crate) trait QueryRows {
    fn rows(&self) -> u64;
}

impl QueryRows for sqlx::sqlite::SqliteQueryResult {
    fn rows(&self) -> u64 {
        self.rows_affected()
    }
}

impl QueryRows for sqlx::postgres::PgQueryResult {
    fn rows(&self) -> u64 {
        self.rows_affected()
    }
}

/// Shared reads and small writes for database `DB`.
pub(crate) struct Run<DB>(std::marker::PhantomData<DB>);

impl<DB> Run<DB>
where
    DB: Database,
    DB::Arguments: IntoArguments<DB>,
    for<'c> &'c mut DB::Connection: Executor<'c, Database = DB>,
    for<'t> i64: Encode<'t, DB> + Decode<'t, DB> + Type<DB>,
    for<'t> Option<i64>: Encode<'t, DB> + Type<DB>,
    for<'t> String: Encode<'t, DB> + Decode<'t, DB> + Type<DB>,
    for<'t> &'t str: Encode<'t, DB> + Type<DB>,
    for<'t> &'t [u8]: Encode<'t, DB> + Type<DB>,
    for<'r> (String,): FromRow<'r, DB::Row>,
    for<'r> (i64,): FromRow<'r, DB::Row>,
    for<'r> (String, String): FromRow<'r, DB::Row>,
    for<'r> (i64, i64, i64, i64, Option<i64>): FromRow<'r, DB::Row>,
    for<'r> (i64, String, i64): FromRow<'r, DB::Row>,
    for<'r> GroupKey: FromRow<'r, DB::Row>,
    for<'r> TotalsRow: FromRow<'r, DB::Row>,
    for<'r> DefectsRow: FromRow<'r, DB::Row>,
    for<'r> (i64, String, Option<String>, i64, i64): FromRow<'r, DB::Row>,
    for<'r> (String, String, Option<String>, i64, i64): FromRow<'r, DB::Row>,
    for<'r> (String, String, String): FromRow<'r, DB::Row>,
    for<'r> CurrentRow: FromRow<'r, DB::Row>,
    for<'r> HistoryRow: FromRow<'r, DB::Row>,
    for<'t> Option<&'t str>: Encode<'t, DB> + Type<DB>,
    for<'r> (String, Option<String>): FromRow<'r, DB::Row>,
    for<'r> (Option<String>,): FromRow<'r, DB::Row>,
    for<'r> (String, String, Option<String>): FromRow<'r, DB::Row>,
    for<'r> KeyRow: FromRow<'r, DB::Row>,
    for<'r> (i64, String): FromRow<'r, DB::Row>,
    for<'r> (i64, String, String): FromRow<'r, DB::Row>,
    for<'t> Vec<u8>: Decode<'t, DB> + Type<DB>,
    for<'r> (Vec<u8>,): FromRow<'r, DB::Row>,
    for<'r> (Vec<u8>, i64, Vec<u8>): FromRow<'r, DB::Row>,
    DB::QueryResult: QueryRows,
{
    /// Creates or updates a site (inside a write transaction).
    pub(crate) async fn upsert_site(
        conn: &mut DB::Connection,
        site: &Site,
    ) -> Result<Upserted, StoreError> {
        let mut q = QueryBuilder::new("SELECT name, time_zone FROM sites WHERE code = ");
        q.push_bind(site.code.as_str());
        let existing: Option<(String, Option<String>)> =
            q.build_query_as().fetch_optional(&mut *conn).await?;
        let name = site.name.as_str();
        let tz = site.time_zone.as_ref().map(|t| t.as_str());
        let (mut q, done) = match existing {
            None => {
                let mut q = QueryBuilder::new("INSERT INTO sites (code, name, time_zone) VALUES (");
                q.separated(", ")
                    .push_bind(site.code.as_str())
                    .push_bind(name)
                    .push_bind(tz);
                q.push(")");
                (q, Upserted::Created)
            }
            Some((n, t)) if n == name && t.as_deref() == tz => return Ok(Upserted::Unchanged),
            Some(_) => {
                let mut q = QueryBuilder::new("UPDATE sites SET name = ");
                q.push_bind(name)
                    .push(", time_zone = ")
                    .push_bind(tz)
                    .push(" WHERE code = ")
                    .push_bind(site.code.as_str());
                (q, Upserted::Updated)
            }
        };
        q.build().execute(&mut *conn).await?;
        Self::bump_registry_version(conn).await?;
        Ok(done)
    }

    /// Creates or updates a line of a registered site (inside a write transaction).
    pub(crate) async fn upsert_line(
        conn: &mut DB::Connection,
        line: &Line,
    ) -> Result<Upserted, StoreError> {
        let mut q = QueryBuilder::new("SELECT code FROM sites WHERE code = ");
        q.push_bind(line.site.as_str());
        let site_known: Option<String> = q.build_query_scalar().fetch_optional(&mut *conn).await?;
        if site_known.is_none() {
            return Err(StoreError::UnknownSite {
                site: line.site.to_string(),
            });
        }
        let mut q = QueryBuilder::new("SELECT name FROM lines WHERE site = ");
        q.push_bind(line.site.as_str())
            .push(" AND code = ")
            .push_bind(line.code.as_str());
        let existing: Option<(Option<String>,)> =
            q.build_query_as().fetch_optional(&mut *conn).await?;
        let name = line.name.as_ref().map(|n| n.as_str());
        let (mut q, done) = match existing {
            None => {
                let mut q = QueryBuilder::new("INSERT INTO lines (site, code, name) VALUES (");
                q.separated(", ")
                    .push_bind(line.site.as_str())
                    .push_bind(line.code.as_str())
                    .push_bind(name);
                q.push(")");
                (q, Upserted::Created)
            }
            Some((n,)) if n.as_deref() == name => return Ok(Upserted::Unchanged),
            Some(_) => {
                let mut q = QueryBuilder::new("UPDATE lines SET name = ");
                q.push_bind(name)
                    .push(" WHERE site = ")
                    .push_bind(line.site.as_str())
                    .push(" AND code = ")
                    .push_bind(line.code.as_str());
                (q, Upserted::Updated)
            }
        };
        q.build().execute(&mut *conn).await?;
        Self::bump_registry_version(conn).await?;
        Ok(done)
    }

    /// Bumps the data version and marks it as the registry's.
    async fn bump_registry_version(conn: &mut DB::Connection) -> Result<(), StoreError> {
        sqlx::query(BUMP_DATA_VERSION).execute(&mut *conn).await?;
        sqlx::query(MARK_REGISTRY_VERSION)
            .execute(&mut *conn)
            .await?;
        Ok(())
    }

    /// All sites, ordered by code.
    pub(crate) async fn sites(conn: &mut DB::Connection) -> Result<Vec<Site>, StoreError> {
        let rows: Vec<(String, String, Option<String>)> =
            sqlx::query_as("SELECT code, name, time_zone FROM sites ORDER BY code")
                .fetch_all(&mut *conn)
                .await?;
        rows.iter()
            .map(|(c, n, t)| site_from_row(c, n, t.as_deref()))
            .collect()
    }

    /// One site with its lines (call inside one read snapshot).
    pub(crate) async fn site(
        conn: &mut DB::Connection,
        site: &SiteCode,
    ) -> Result<SiteWithLines, StoreError> {
        let mut q = QueryBuilder::new("SELECT code, name, time_zone FROM sites WHERE code = ");
        q.push_bind(site.as_str());
        let row: Option<(String, String, Option<String>)> =
            q.build_query_as().fetch_optional(&mut *conn).await?;
        let Some((c, n, t)) = row else {
            return Err(StoreError::NotFound {
                what: "site",
                key: site.to_string(),
            });
        };
        let mut q = QueryBuilder::new("SELECT site, code, name FROM lines WHERE site = ");
        q.push_bind(site.as_str()).push(" ORDER BY code");
        let lines: Vec<(String, String, Option<String>)> =
            q.build_query_as().fetch_all(&mut *conn).await?;
        Ok(SiteWithLines {
            site: site_from_row(&c, &n, t.as_deref())?,
            lines: lines
                .iter()
                .map(|(s, c, n)| line_from_row(s, c, n.as_deref()))
                .collect::<Result<_, _>>()?,
        })
    }

    /// Stores a new key with the sites it may write (inside a transaction).
    pub(crate) async fn create_key(
        conn: &mut DB::Connection,
        role: KeyRole,
        sites: &[SiteCode],
        label: Option<&str>,
        secret_hash: &[u8],
    ) -> Result<KeyId, StoreError> {
        let mut q = QueryBuilder::new(
            "INSERT INTO api_keys (role, label, secret_hash, created_at) VALUES (",
        );
        q.separated(", ")
            .push_bind(role.as_str())
            .push_bind(label)
            .push_bind(secret_hash)
            .push_bind(format_instant(OffsetDateTime::now_utc())?);
        q.push(") RETURNING id");
        let id: i64 = q.build_query_scalar().fetch_one(&mut *conn).await?;
        let mut unique: Vec<&str> = sites.iter().map(SiteCode::as_str).collect();
        unique.sort_unstable();
        unique.dedup();
        for chunk in unique.chunks(LOOKUP_CHUNK) {
            let mut q = QueryBuilder::new("INSERT INTO api_key_sites (key_id, site) ");
            q.push_values(chunk, |mut b, site| {
                b.push_bind(id).push_bind(*site);
            });
            q.build().execute(&mut *conn).await?;
        }
        Ok(id)
    }

    /// One key with its sites (call inside one read snapshot).
    pub(crate) async fn key(
        conn: &mut DB::Connection,
        id: KeyId,
    ) -> Result<Option<ApiKey>, StoreError> {
        let mut q = QueryBuilder::new(KEY_COLUMNS);
        q.push(" WHERE id = ").push_bind(id);
        let row: Option<KeyRow> = q.build_query_as().fetch_optional(&mut *conn).await?;
        let Some(row) = row else {
            return Ok(None);
        };
        let mut q = QueryBuilder::new("SELECT key_id, site FROM api_key_sites WHERE key_id = ");
        q.push_bind(id).push(" ORDER BY site");
        let sites: Vec<(i64, String)> = q.build_query_as().fetch_all(&mut *conn).await?;
        Ok(keys_from_rows(vec![row], sites)?.pop())
    }

    /// Every key with its sites, by id (call inside one read snapshot).
    pub(crate) async fn keys(conn: &mut DB::Connection) -> Result<Vec<ApiKey>, StoreError> {
        let rows: Vec<KeyRow> =
            sqlx::query_as(sqlx::AssertSqlSafe(format!("{KEY_COLUMNS} ORDER BY id")))
                .fetch_all(&mut *conn)
                .await?;
        let site_rows: Vec<(i64, String)> =
            sqlx::query_as("SELECT key_id, site FROM api_key_sites ORDER BY key_id, site")
                .fetch_all(&mut *conn)
                .await?;
        keys_from_rows(rows, site_rows)
    }

    /// Revokes a key (keeping the first revocation time).
    pub(crate) async fn revoke_key(conn: &mut DB::Connection, id: KeyId) -> Result<(), StoreError> {
        let mut q = QueryBuilder::new("UPDATE api_keys SET revoked_at = COALESCE(revoked_at, ");
        q.push_bind(format_instant(OffsetDateTime::now_utc())?)
            .push(") WHERE id = ")
            .push_bind(id);
        let done = q.build().execute(&mut *conn).await?;
        if done.rows() == 0 {
            return Err(StoreError::NotFound {
                what: "api key",
                key: id.to_string(),
            });
        }
        Ok(())
    }

    /// Purges expired sessions, ends the key's oldest beyond `max_per_key - 1`, and
    /// stores the new one (inside a write transaction).
    pub(crate) async fn start_session(
        conn: &mut DB::Connection,
        session: &NewPageSession,
        max_per_key: usize,
    ) -> Result<(), StoreError> {
        let created_at = format_instant(session.created_at)?;
        let expires_at = format_instant(session.expires_at)?;
        let mut q = QueryBuilder::new("DELETE FROM page_sessions WHERE expires_at <= ");
        q.push_bind(created_at.clone());
        q.build().execute(&mut *conn).await?;
        // The new session is one of the key's `max_per_key`: keep the newest
        // `max_per_key - 1` of the others (at least none).
        let keep = i64::try_from(max_per_key.saturating_sub(1)).unwrap_or(i64::MAX);
        let mut q = QueryBuilder::new("SELECT id_hash FROM page_sessions WHERE key_id = ");
        q.push_bind(session.key_id)
            .push(" ORDER BY created_at DESC, id_hash DESC");
        let hashes: Vec<Vec<u8>> = q.build_query_scalar().fetch_all(&mut *conn).await?;
        let old: Vec<&[u8]> = hashes
            .iter()
            .skip(usize::try_from(keep).unwrap_or(usize::MAX))
            .map(Vec::as_slice)
            .collect();
        for chunk in old.chunks(LOOKUP_CHUNK) {
            let mut q = QueryBuilder::new("DELETE FROM page_sessions WHERE id_hash IN (");
            let mut sep = q.separated(", ");
            for h in chunk {
                sep.push_bind(*h);
            }
            q.push(")");
            q.build().execute(&mut *conn).await?;
        }
        let mut q = QueryBuilder::new(
            "INSERT INTO page_sessions (id_hash, key_id, created_at, expires_at) VALUES (",
        );
        q.separated(", ")
            .push_bind(session.id_hash.as_slice())
            .push_bind(session.key_id)
            .push_bind(created_at)
            .push_bind(expires_at);
        q.push(")");
        q.build().execute(&mut *conn).await?;
        Ok(())
    }

    /// The live session with this id hash at `now`.
    pub(crate) async fn session(
        conn: &mut DB::Connection,
        id_hash: &[u8; 32],
        now: OffsetDateTime,
    ) -> Result<Option<PageSession>, StoreError> {
        let mut q = QueryBuilder::new(
            "SELECT key_id, created_at, expires_at FROM page_sessions WHERE id_hash = ",
        );
        q.push_bind(id_hash.as_slice())
            .push(" AND expires_at > ")
            .push_bind(format_instant(now)?);
        let row: Option<(i64, String, String)> =
            q.build_query_as().fetch_optional(&mut *conn).await?;
        row.map(|(key_id, created_at, expires_at)| {
            Ok(PageSession {
                key_id,
                created_at: parse_instant(&created_at)?,
                expires_at: parse_instant(&expires_at)?,
            })
        })
        .transpose()
    }

    /// Ends a session; true when there was one.
    pub(crate) async fn end_session(
        conn: &mut DB::Connection,
        id_hash: &[u8; 32],
    ) -> Result<bool, StoreError> {
        let mut q = QueryBuilder::new("DELETE FROM page_sessions WHERE id_hash = ");
        q.push_bind(id_hash.as_slice());
        Ok(q.build().execute(&mut *conn).await?.rows() > 0)
    }

    /// The current record at `key`, if any (call inside one read snapshot).
    pub(crate) async fn record(
        conn: &mut DB::Connection,
        key: &RecordKey,
    ) -> Result<Option<StoredRecord>, StoreError> {
        let mut q = QueryBuilder::new(CURRENT_SELECT);
        q.push(" WHERE c.site = ")
            .push_bind(key.site().as_str())
            .push(" AND c.line = ")
            .push_bind(key.line().as_str())
            .push(" AND c.date = ")
            .push_bind(format_date(key.date()))
            .push(" AND c.product = ")
            .push_bind(key.product().map_or("", |p| p.as_str()));
        let row: Option<CurrentRow> = q.build_query_as().fetch_optional(&mut *conn).await?;
        let Some(row) = row else {
            return Ok(None);
        };
        let mut defects = Self::revision_defects(conn, &[row.4]).await?;
        let d = defects.remove(&row.4).unwrap_or_default();
        stored_from_current(row, d).map(Some)
    }

    /// A page of current records (call inside one read snapshot).
    pub(crate) async fn records(
        conn: &mut DB::Connection,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError> {
        let limit = limit.clamp(1, MAX_PAGE);
        let after = cursor.map(decode_cursor).transpose()?;
        let mut q = QueryBuilder::new(CURRENT_SELECT);
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
        let mut rows: Vec<CurrentRow> = q.build_query_as().fetch_all(&mut *conn).await?;
        let more = rows.len() > limit as usize;
        rows.truncate(limit as usize);
        let ids: Vec<i64> = rows.iter().map(|r| r.4).collect();
        let mut defects = Self::revision_defects(conn, &ids).await?;
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

    /// Every revision of `key`, oldest first.
    pub(crate) async fn history(
        conn: &mut DB::Connection,
        key: &RecordKey,
    ) -> Result<Vec<StoredRecord>, StoreError> {
        let mut q = QueryBuilder::new(HISTORY_SELECT);
        q.push(" WHERE r.date = ")
            .push_bind(format_date(key.date()))
            .push(" AND r.site = ")
            .push_bind(key.site().as_str())
            .push(" AND r.line = ")
            .push_bind(key.line().as_str())
            .push(" AND r.product = ")
            .push_bind(key.product().map_or("", |p| p.as_str()))
            .push(" ORDER BY r.id, d.category");
        let rows: Vec<HistoryRow> = q.build_query_as().fetch_all(&mut *conn).await?;
        history_from_rows(key, rows)
    }

    /// The defect counts of the revisions `ids`.
    async fn revision_defects(
        conn: &mut DB::Connection,
        ids: &[i64],
    ) -> Result<HashMap<i64, BTreeMap<CategoryCode, u64>>, StoreError> {
        let mut out = HashMap::new();
        for chunk in ids.chunks(LOOKUP_CHUNK) {
            let mut q = QueryBuilder::new(
                "SELECT revision_id, category, count FROM revision_defects WHERE revision_id IN (",
            );
            let mut sep = q.separated(", ");
            for id in chunk {
                sep.push_bind(*id);
            }
            q.push(")");
            let rows: Vec<(i64, String, i64)> = q.build_query_as().fetch_all(&mut *conn).await?;
            defects_by_revision(rows, &mut out)?;
        }
        Ok(out)
    }

    /// A stored batch answer: `None` if the Idempotency-Key is unused, the answer if it
    /// was used with this body hash, [`StoreError::IdempotencyMismatch`] otherwise.
    pub(crate) async fn answer(
        conn: &mut DB::Connection,
        api_key_id: Option<KeyId>,
        key: &str,
        body_sha256: &[u8; 32],
    ) -> Result<Option<crate::counts::StoredAnswer>, StoreError> {
        let row: Option<(Vec<u8>, i64, Vec<u8>)> = Sql::<DB>::find_answer(api_key_id, key)
            .build_query_as()
            .fetch_optional(&mut *conn)
            .await?;
        crate::counts::stored_answer(row, body_sha256)
    }

    /// Renders and stores the answer to a batch written under an Idempotency-Key
    /// (inside the batch's transaction); `None` without a key.
    pub(crate) async fn keep_answer(
        conn: &mut DB::Connection,
        api_key_id: Option<KeyId>,
        idempotency: Option<&crate::counts::Idempotency<'_>>,
        outcome: &crate::counts::BatchOutcome,
    ) -> Result<Option<crate::counts::StoredAnswer>, StoreError> {
        let Some(idem) = idempotency else {
            return Ok(None);
        };
        let answer = (idem.render)(outcome);
        Sql::<DB>::store_answer(
            api_key_id,
            idem.key,
            &idem.body_sha256,
            answer.status,
            &answer.body,
            format_instant(OffsetDateTime::now_utc())?,
        )
        .build()
        .execute(&mut *conn)
        .await?;
        Ok(Some(answer))
    }

    /// The records of `batch` whose site or line is not registered.
    pub(crate) async fn unregistered(
        conn: &mut DB::Connection,
        batch: &Batch<'_>,
    ) -> Result<Vec<RecordError>, StoreError> {
        let mut known_sites: HashSet<String> = HashSet::new();
        for chunk in batch.sites().chunks(LOOKUP_CHUNK) {
            let found: Vec<String> = Sql::<DB>::known_sites(chunk)
                .build_query_scalar()
                .fetch_all(&mut *conn)
                .await?;
            known_sites.extend(found);
        }
        let mut known_lines: HashSet<(String, String)> = HashSet::new();
        for chunk in batch.lines().chunks(LOOKUP_CHUNK) {
            let found: Vec<(String, String)> = Sql::<DB>::known_lines(chunk)
                .build_query_as()
                .fetch_all(&mut *conn)
                .await?;
            known_lines.extend(found);
        }
        Ok(batch.unregistered(
            |site| known_sites.contains(site),
            |site, line| known_lines.contains(&(site.to_owned(), line.to_owned())),
        ))
    }

    /// The stored current value of every distinct key of `batch`, in the order of
    /// [`Batch::key_rows`].
    pub(crate) async fn current_values(
        conn: &mut DB::Connection,
        batch: &Batch<'_>,
        dates: &[String],
    ) -> Result<Vec<Option<Current>>, StoreError> {
        let keys: Vec<_> = batch.key_rows().collect();
        let mut current: Vec<Option<Current>> = vec![None; keys.len()];
        for (chunk_no, chunk) in keys.chunks(LOOKUP_CHUNK).enumerate() {
            let base = chunk_no * LOOKUP_CHUNK;
            let found: Vec<(i64, i64, i64, i64, Option<i64>)> =
                Sql::<DB>::current_of(chunk, base, dates)
                    .build_query_as()
                    .fetch_all(&mut *conn)
                    .await?;
            if found.is_empty() {
                continue;
            }
            let defects: Vec<(i64, String, i64)> =
                Sql::<DB>::current_defects_of(chunk, base, dates)
                    .build_query_as()
                    .fetch_all(&mut *conn)
                    .await?;
            fill_current(&mut current, found, defects)?;
        }
        Ok(current)
    }

    /// The registered groups at the query's level; refuses an unknown site.
    async fn registered_groups(
        conn: &mut DB::Connection,
        query: &AggregateQuery,
    ) -> Result<Vec<GroupKey>, StoreError> {
        let (check, mut registry) = Sql::<DB>::registered_groups(query);
        if let Some(mut check) = check {
            let found: Option<String> = check
                .build_query_scalar()
                .fetch_optional(&mut *conn)
                .await?;
            if found.is_none() {
                return Err(StoreError::UnknownSite {
                    site: named_site(query),
                });
            }
        }
        Ok(registry.build_query_as().fetch_all(&mut *conn).await?)
    }

    /// [`crate::Store::aggregate`] on a connection inside one read snapshot.
    pub(crate) async fn aggregate(
        conn: &mut DB::Connection,
        query: &AggregateQuery,
    ) -> Result<Aggregate, StoreError> {
        let version: i64 = sqlx::query_scalar(DATA_VERSION)
            .fetch_one(&mut *conn)
            .await?;
        let registered = Self::registered_groups(conn, query).await?;
        let Some((mut totals, mut defects)) = Sql::<DB>::sums(query)? else {
            return finish(
                version,
                query.by_product,
                registered,
                Vec::new(),
                Vec::new(),
            );
        };
        let totals: Vec<TotalsRow> = totals.build_query_as().fetch_all(&mut *conn).await?;
        let defects: Vec<DefectsRow> = defects.build_query_as().fetch_all(&mut *conn).await?;
        finish(version, query.by_product, registered, totals, defects)
    }

    /// [`crate::Store::line_days`] on a connection inside one read snapshot.
    pub(crate) async fn line_days(
        conn: &mut DB::Connection,
        query: &AggregateQuery,
    ) -> Result<LineDays, StoreError> {
        let version: i64 = sqlx::query_scalar(DATA_VERSION)
            .fetch_one(&mut *conn)
            .await?;
        let query = AggregateQuery {
            level: crate::reports::Level::AllLines,
            ..query.clone()
        };
        let rows: Vec<(String, String, Option<String>, i64, i64)> = match query.as_of {
            None => {
                let packed: Vec<(String, String)> =
                    Sql::<DB>::packed_line_days(&query, query.from, query.to)
                        .build_query_as()
                        .fetch_all(&mut *conn)
                        .await?;
                let mut rows = Vec::new();
                for (date, lines) in packed {
                    for entry in lines.split(';') {
                        let unreadable = || {
                            StoreError::internal(format!("stored line-day {entry:?} is unreadable"))
                        };
                        let mut parts = entry.split(',');
                        let (Some(site), Some(line), Some(n), Some(x), None) = (
                            parts.next(),
                            parts.next(),
                            parts.next(),
                            parts.next(),
                            parts.next(),
                        ) else {
                            return Err(unreadable());
                        };
                        let n = n.parse::<i64>().map_err(|_| unreadable())?;
                        let x = x.parse::<i64>().map_err(|_| unreadable())?;
                        rows.push((date.clone(), site.to_owned(), Some(line.to_owned()), n, x));
                    }
                }
                rows.sort_by(|a, b| (&a.0, &a.1, &a.2).cmp(&(&b.0, &b.1, &b.2)));
                rows
            }
            // As of an instant the latest revision of each key is found first; the
            // bucketed statement does that, with one bucket a day.
            Some(_) => {
                let days: Vec<(time::Date, time::Date)> =
                    std::iter::successors(Some(query.from), |d| {
                        d.next_day().filter(|n| *n <= query.to)
                    })
                    .map(|d| (d, d))
                    .collect();
                let rows: Vec<(i64, String, Option<String>, i64, i64)> =
                    match Sql::<DB>::bucket_sums(&query, &days)? {
                        Some(mut q) => q.build_query_as().fetch_all(&mut *conn).await?,
                        None => Vec::new(),
                    };
                rows.into_iter()
                    .filter_map(|(b, site, line, n, x)| {
                        let day = days.get(usize::try_from(b).ok()?)?.0;
                        Some((format_date(day), site, line, n, x))
                    })
                    .collect()
            }
        };
        // Codes repeat on every day: parse each once.
        let mut codes: HashMap<(String, String), (SiteCode, LineCode)> = HashMap::new();
        let mut dates: HashMap<String, time::Date> = HashMap::new();
        let mut days = Vec::with_capacity(rows.len());
        for (date, site, line, inspected, defective) in rows {
            let Some(line) = line else { continue };
            let date = match dates.get(&date) {
                Some(d) => *d,
                None => {
                    let d = parse_date(&date)?;
                    dates.insert(date, d);
                    d
                }
            };
            let key = (site, line);
            let (site, line) = match codes.get(&key) {
                Some(c) => c.clone(),
                None => {
                    let c = (
                        parse_code::<SiteCode>(&key.0)?,
                        parse_code::<LineCode>(&key.1)?,
                    );
                    codes.insert(key, c.clone());
                    c
                }
            };
            days.push(LineDay {
                date,
                site,
                line,
                inspected: to_u64(inspected, "sum")?,
                defective: to_u64(defective, "sum")?,
            });
        }
        Ok(LineDays {
            data_version: to_u64(version, "data version")?,
            days,
        })
    }

    /// [`crate::Store::aggregate_buckets`] on a connection inside one read snapshot.
    pub(crate) async fn aggregate_buckets(
        conn: &mut DB::Connection,
        query: &AggregateQuery,
        buckets: &[(time::Date, time::Date)],
    ) -> Result<BucketedAggregate, StoreError> {
        let version: i64 = sqlx::query_scalar(DATA_VERSION)
            .fetch_one(&mut *conn)
            .await?;
        let registered = Self::registered_groups(conn, query).await?;
        let rows: Vec<(i64, String, Option<String>, i64, i64)> =
            match Sql::<DB>::bucket_sums(query, buckets)? {
                Some(mut q) => q.build_query_as().fetch_all(&mut *conn).await?,
                None => Vec::new(),
            };
        finish_buckets(version, &registered, buckets.len(), rows)
    }
}

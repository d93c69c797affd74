//! Reads of count records: one current record, a page of them, a key's history.

use std::collections::{BTreeMap, HashMap};

use dispar_core::code::CategoryCode;
use dispar_core::record::RecordKey;
use sqlx::sqlite::SqliteConnection;
use sqlx::{QueryBuilder, Sqlite};

use crate::counts::{CountFilter, CountPage, MAX_PAGE, StoredRecord};
use crate::decode::{
    CURRENT_SELECT, CurrentRow, HISTORY_SELECT, HistoryRow, decode_cursor, defects_by_revision,
    encode_cursor, history_from_rows, stored_from_current,
};
use crate::error::StoreError;
use crate::sql::LOOKUP_CHUNK;
use crate::sqlite::db::SqliteStore;
use crate::timestamp::format_date;

impl SqliteStore {
    pub(in crate::sqlite) async fn get_record_impl(
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

    pub(in crate::sqlite) async fn list_counts_impl(
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

    pub(in crate::sqlite) async fn record_history_impl(
        &self,
        key: &RecordKey,
    ) -> Result<Vec<StoredRecord>, StoreError> {
        let rows: Vec<HistoryRow> = sqlx::query_as(sqlx::AssertSqlSafe(format!(
            "{HISTORY_SELECT} WHERE r.date = ? AND r.site = ? AND r.line = ? AND r.product = ? \
             ORDER BY r.id, d.category"
        )))
        .bind(format_date(key.date()))
        .bind(key.site().as_str())
        .bind(key.line().as_str())
        .bind(key.product().map_or("", |p| p.as_str()))
        .fetch_all(&self.reader)
        .await?;
        history_from_rows(key, rows)
    }
}

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
        defects_by_revision(rows, &mut out)?;
    }
    Ok(out)
}

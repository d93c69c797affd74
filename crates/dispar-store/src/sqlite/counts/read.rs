//! Reads of count records: one current record, a page of them, a key's history.

use std::collections::{BTreeMap, HashMap};

use dispar_core::code::CategoryCode;
use dispar_core::record::{CountRecord, Counts, RecordKey};
use sqlx::sqlite::SqliteConnection;
use sqlx::{QueryBuilder, Sqlite};

use crate::counts::{CountFilter, CountPage, MAX_PAGE, StoredRecord};
use crate::error::StoreError;
use crate::sqlite::db::{LOOKUP_CHUNK, SqliteStore, parse_code, to_u64};
use crate::timestamp::{format_date, parse_date, parse_instant};

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

fn plant_revision_u64(v: Option<i64>) -> Result<Option<u64>, StoreError> {
    v.map(|r| to_u64(r, "plant revision")).transpose()
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

//! Stored rows to domain values, shared by the backends: both store the same encoding
//! (codes and dates as text, counts as 64-bit integers), so one decoder serves both.

use std::collections::BTreeMap;
use std::str::FromStr;

use dispar_core::code::{CategoryCode, SiteCode};
use dispar_core::record::{CountRecord, Counts, RecordKey};
use dispar_core::site::{Line, LineName, Site, SiteName, TimeZoneName};

use crate::counts::StoredRecord;
use crate::error::StoreError;
use crate::keys::{ApiKey, KeyRole};
use crate::timestamp::{parse_date, parse_instant};

/// Converts a stored non-negative integer.
pub(crate) fn to_u64(v: i64, what: &str) -> Result<u64, StoreError> {
    u64::try_from(v).map_err(|_| StoreError::internal(format!("stored {what} {v} is negative")))
}

/// Parses a stored code of type `T`.
pub(crate) fn parse_code<T>(s: &str) -> Result<T, StoreError>
where
    T: FromStr,
    T::Err: std::fmt::Display,
{
    T::from_str(s)
        .map_err(|e| StoreError::internal(format!("stored code {s:?} is unreadable: {e}")))
}

pub(crate) fn site_from_row(
    code: &str,
    name: &str,
    time_zone: Option<&str>,
) -> Result<Site, StoreError> {
    Ok(Site {
        code: parse_code(code)?,
        name: SiteName::parse_field(name, "name")
            .map_err(|e| StoreError::internal(format!("stored site name: {}", e.message)))?,
        time_zone: time_zone
            .map(|tz| TimeZoneName::parse_field(tz, "time_zone"))
            .transpose()
            .map_err(|e| StoreError::internal(format!("stored time zone: {}", e.message)))?,
    })
}

pub(crate) fn line_from_row(
    site: &str,
    code: &str,
    name: Option<&str>,
) -> Result<Line, StoreError> {
    Ok(Line {
        site: parse_code(site)?,
        code: parse_code(code)?,
        name: name
            .map(|n| LineName::parse_field(n, "name"))
            .transpose()
            .map_err(|e| StoreError::internal(format!("stored line name: {}", e.message)))?,
    })
}

/// `(id, role, label, secret_hash, created_at, revoked_at)`
pub(crate) type KeyRow = (i64, String, Option<String>, Vec<u8>, String, Option<String>);

pub(crate) const KEY_COLUMNS: &str =
    "SELECT id, role, label, secret_hash, created_at, revoked_at FROM api_keys";

pub(crate) fn key_from_row(row: KeyRow, sites: Vec<SiteCode>) -> Result<ApiKey, StoreError> {
    let (id, role, label, secret_hash, created_at, revoked_at) = row;
    Ok(ApiKey {
        id,
        role: role
            .parse::<KeyRole>()
            .map_err(|e| StoreError::internal(format!("stored key {id}: {e}")))?,
        sites,
        label,
        secret_hash,
        created_at: parse_instant(&created_at)?,
        revoked_at: revoked_at.as_deref().map(parse_instant).transpose()?,
    })
}

/// Keys with their sites, from the key rows and `(key_id, site)` rows.
pub(crate) fn keys_from_rows(
    rows: Vec<KeyRow>,
    site_rows: Vec<(i64, String)>,
) -> Result<Vec<ApiKey>, StoreError> {
    let mut sites: BTreeMap<i64, Vec<SiteCode>> = BTreeMap::new();
    for (id, site) in site_rows {
        sites.entry(id).or_default().push(parse_code(&site)?);
    }
    rows.into_iter()
        .map(|row| {
            let s = sites.remove(&row.0).unwrap_or_default();
            key_from_row(row, s)
        })
        .collect()
}

/// `(site, line, date, product, revision_id, inspected, defective, plant_revision,
/// recorded_at, api_key_id)`
pub(crate) type CurrentRow = (
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

pub(crate) const CURRENT_SELECT: &str = "SELECT c.site, c.line, c.date, c.product, c.revision_id, c.inspected, \
     c.defective, c.plant_revision, r.recorded_at, r.api_key_id \
     FROM counts_current c JOIN count_revisions r ON r.id = c.revision_id";

/// The history of one key with its defects, one row per (revision, category).
pub(crate) const HISTORY_SELECT: &str = "SELECT r.id, r.inspected, r.defective, r.plant_revision, r.recorded_at, r.api_key_id, \
            d.category, d.count \
     FROM count_revisions r LEFT JOIN revision_defects d ON d.revision_id = r.id";

/// `(id, inspected, defective, plant_revision, recorded_at, api_key_id)`
type HistoryHead = (i64, i64, i64, Option<i64>, String, Option<i64>);

/// A row of [`HISTORY_SELECT`].
pub(crate) type HistoryRow = (
    i64,
    i64,
    i64,
    Option<i64>,
    String,
    Option<i64>,
    Option<String>,
    Option<i64>,
);

/// Defect maps per revision id, from `(revision_id, category, count)` rows.
pub(crate) fn defects_by_revision(
    rows: Vec<(i64, String, i64)>,
    out: &mut std::collections::HashMap<i64, BTreeMap<CategoryCode, u64>>,
) -> Result<(), StoreError> {
    for (id, category, count) in rows {
        out.entry(id)
            .or_default()
            .insert(parse_code(&category)?, to_u64(count, "defect count")?);
    }
    Ok(())
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
        revision: plant_revision
            .map(|r| to_u64(r, "plant revision"))
            .transpose()?,
    })
}

pub(crate) fn stored_from_current(
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

/// The revisions of `key`, oldest first, from the rows of [`HISTORY_SELECT`] ordered
/// by revision id and category.
pub(crate) fn history_from_rows(
    key: &RecordKey,
    rows: Vec<HistoryRow>,
) -> Result<Vec<StoredRecord>, StoreError> {
    let mut out: Vec<StoredRecord> = Vec::new();
    let mut pending: Option<(HistoryHead, BTreeMap<CategoryCode, u64>)> = None;
    for (id, inspected, defective, plant_revision, recorded_at, api_key_id, category, count) in rows
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

/// Cursors are the hex of `date \n site \n line \n product` of the last row shown:
/// opaque to clients, and codes cannot contain a newline.
pub(crate) fn encode_cursor(parts: [&str; 4]) -> String {
    hex::encode(parts.join("\n"))
}

pub(crate) fn decode_cursor(cursor: &str) -> Result<[String; 4], StoreError> {
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

//! Types for writing and reading count records.

use dispar_core::code::{LineCode, ProductCode, SiteCode};
use dispar_core::record::CountRecord;
use time::{Date, OffsetDateTime};

use crate::error::StoreError;
use crate::keys::KeyId;

/// What a write did to one record.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum WriteStatus {
    /// The natural key had no record; the first revision was written.
    Created,
    /// The record existed with other counts or an older plant revision; a new
    /// revision was written.
    Corrected,
    /// The record already held exactly this; nothing was written.
    Unchanged,
}

/// The result of writing one record.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct WriteOutcome {
    /// The store's id of the record's current revision (the new one, or for
    /// [`WriteStatus::Unchanged`] the existing one).
    pub revision_id: i64,
    /// The plant revision of the current revision.
    pub plant_revision: Option<u64>,
    /// What happened.
    pub status: WriteStatus,
}

/// The result of a batch write: one outcome per input record, in input order.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct BatchOutcome {
    /// One outcome per record, same order as the input.
    pub outcomes: Vec<WriteOutcome>,
    /// How many records were created.
    pub created: usize,
    /// How many records were corrected.
    pub corrected: usize,
    /// How many records were unchanged.
    pub unchanged: usize,
}

impl BatchOutcome {
    pub(crate) fn push(&mut self, o: WriteOutcome) {
        match o.status {
            WriteStatus::Created => self.created += 1,
            WriteStatus::Corrected => self.corrected += 1,
            WriteStatus::Unchanged => self.unchanged += 1,
        }
        self.outcomes.push(o);
    }
}

/// The answer the server sent for a batch with an Idempotency-Key, kept to be replayed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoredAnswer {
    /// HTTP status.
    pub status: u16,
    /// Response body, verbatim.
    pub body: Vec<u8>,
}

/// Renders the answer to store from the outcome, inside the write transaction.
pub type RenderAnswer = dyn Fn(&BatchOutcome) -> StoredAnswer + Send + Sync;

/// An Idempotency-Key on a batch write.
pub struct Idempotency<'a> {
    /// The key the client sent.
    pub key: &'a str,
    /// SHA-256 of the request body as received.
    pub body_sha256: [u8; 32],
    /// Makes the answer to store (and return) once the outcome is known.
    pub render: &'a RenderAnswer,
}

impl std::fmt::Debug for Idempotency<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Idempotency")
            .field("key", &self.key)
            .field("body_sha256", &hex::encode(self.body_sha256))
            .finish_non_exhaustive()
    }
}

/// What `put_batch` did.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum BatchResult {
    /// The batch was applied (possibly with every record unchanged).
    Written {
        /// Per-record outcomes.
        outcome: BatchOutcome,
        /// The answer rendered and stored, when an Idempotency-Key was given.
        answer: Option<StoredAnswer>,
    },
    /// The same key and body were seen before: this is the stored answer, and nothing
    /// was written.
    Replayed(StoredAnswer),
}

/// A record as stored: the record (its `revision` is the plant revision) and the
/// revision's bookkeeping.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoredRecord {
    /// The record.
    pub record: CountRecord,
    /// The store's revision id.
    pub revision_id: i64,
    /// When the revision was committed (UTC, microsecond precision).
    pub recorded_at: OffsetDateTime,
    /// The API key that wrote it, if any.
    pub api_key_id: Option<KeyId>,
}

/// Which current records to list. All fields are optional; dates are inclusive.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct CountFilter {
    /// Only this site.
    pub site: Option<SiteCode>,
    /// Only this line (meaningful with `site`; alone it matches the code at any site).
    pub line: Option<LineCode>,
    /// Only this product.
    pub product: Option<ProductCode>,
    /// From this date.
    pub from: Option<Date>,
    /// To this date (inclusive).
    pub to: Option<Date>,
}

/// One page of current records, ordered by (date, site, line, product; no product
/// first): the order of the primary key, so every page is one index seek.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CountPage {
    /// The records.
    pub records: Vec<StoredRecord>,
    /// Pass this back to get the next page; `None` on the last page.
    pub next_cursor: Option<String>,
}

/// Largest page `list_counts` returns; larger limits are clamped to it.
pub const MAX_PAGE: u32 = 1000;

/// A stored batch answer from its `(body_sha256, status, response_body)` row: `None`
/// if the key is unused, the answer if it was used with this body hash,
/// [`StoreError::IdempotencyMismatch`] otherwise.
pub(crate) fn stored_answer(
    row: Option<(Vec<u8>, i64, Vec<u8>)>,
    body_sha256: &[u8; 32],
) -> Result<Option<StoredAnswer>, StoreError> {
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

-- dispar schema for SQLite (STRICT tables need SQLite >= 3.37; sqlx bundles a newer one).
--
-- Conventions:
--   * dates are TEXT 'YYYY-MM-DD' (the plant's local production date);
--   * timestamps are TEXT RFC 3339 UTC with exactly six fractional digits
--     ('2026-03-14T08:15:00.123456Z'), so text order is time order;
--   * "no product" is stored as '' so the natural key (site, line, date, product) is a
--     plain, unique, NOT NULL key;
--   * counts are INTEGER (SQLite's 64-bit signed); the domain caps them at 10^12.
-- Constraints carry names; the store maps a failure to StoreError::Constraint { name }.

CREATE TABLE sites (
    code       TEXT NOT NULL PRIMARY KEY,
    name       TEXT NOT NULL,
    time_zone  TEXT
) STRICT;

CREATE TABLE lines (
    site  TEXT NOT NULL CONSTRAINT lines_site_fk REFERENCES sites (code),
    code  TEXT NOT NULL,
    name  TEXT,
    PRIMARY KEY (site, code)
) STRICT, WITHOUT ROWID;

CREATE TABLE api_keys (
    id           INTEGER PRIMARY KEY AUTOINCREMENT,
    role         TEXT NOT NULL CONSTRAINT api_keys_role CHECK (role IN ('ingest', 'read', 'admin')),
    label        TEXT,
    secret_hash  BLOB NOT NULL,
    created_at   TEXT NOT NULL,
    revoked_at   TEXT
) STRICT;

-- Sites an ingest key may write. No foreign key to sites: a plant's key may be made
-- before its site is registered.
CREATE TABLE api_key_sites (
    key_id  INTEGER NOT NULL CONSTRAINT api_key_sites_key_fk REFERENCES api_keys (id),
    site    TEXT NOT NULL,
    PRIMARY KEY (key_id, site)
) STRICT, WITHOUT ROWID;

-- Append-only history: every accepted write of a record is one row here. Ids are
-- assigned in commit order and recorded_at never decreases with id.
CREATE TABLE count_revisions (
    id              INTEGER PRIMARY KEY AUTOINCREMENT,
    site            TEXT NOT NULL,
    line            TEXT NOT NULL,
    date            TEXT NOT NULL,
    product         TEXT NOT NULL DEFAULT '',
    inspected       INTEGER NOT NULL,
    defective       INTEGER NOT NULL,
    plant_revision  INTEGER,
    recorded_at     TEXT NOT NULL,
    api_key_id      INTEGER,
    CONSTRAINT count_revisions_line_fk FOREIGN KEY (site, line) REFERENCES lines (site, code),
    CONSTRAINT count_revisions_inspected_range CHECK (inspected >= 0),
    CONSTRAINT count_revisions_defective_range CHECK (defective >= 0 AND defective <= inspected),
    CONSTRAINT count_revisions_plant_revision_range CHECK (plant_revision IS NULL OR plant_revision >= 0)
) STRICT;

-- One index serves both the history of one key (all four equal, ordered by id) and the
-- as_of aggregation (a date range, then the latest id per key).
CREATE INDEX count_revisions_by_date_key ON count_revisions (date, site, line, product, id);

CREATE TABLE revision_defects (
    revision_id  INTEGER NOT NULL CONSTRAINT revision_defects_revision_fk REFERENCES count_revisions (id),
    category     TEXT NOT NULL,
    count        INTEGER NOT NULL CONSTRAINT revision_defects_count_range CHECK (count >= 0),
    PRIMARY KEY (revision_id, category)
) STRICT, WITHOUT ROWID;

-- The latest revision of every natural key, denormalised so that reports over the
-- current data are one range scan of the primary key with GROUP BY. The key starts
-- with the date: plants post day by day, so new rows append at the end of the tree
-- instead of at one place per (site, line), which halves the pages a batch dirties.
CREATE TABLE counts_current (
    date            TEXT NOT NULL,
    site            TEXT NOT NULL,
    line            TEXT NOT NULL,
    product         TEXT NOT NULL,
    revision_id     INTEGER NOT NULL,
    inspected       INTEGER NOT NULL,
    defective       INTEGER NOT NULL,
    plant_revision  INTEGER,
    PRIMARY KEY (date, site, line, product)
) STRICT, WITHOUT ROWID;

-- Defect counts of the latest revision of every key; the primary key starts with the
-- date so category sums over a date range read one contiguous range.
CREATE TABLE current_defects (
    date      TEXT NOT NULL,
    site      TEXT NOT NULL,
    line      TEXT NOT NULL,
    product   TEXT NOT NULL,
    category  TEXT NOT NULL,
    count     INTEGER NOT NULL,
    PRIMARY KEY (date, site, line, product, category)
) STRICT, WITHOUT ROWID;

-- Monthly sums of the current data per (month, site, line, product), kept up to date
-- by every write (the change of each record is added). A report over whole months
-- reads these few rows instead of every day; the days at the edges of a range come
-- from counts_current / current_defects. month is 'YYYY-MM'.
CREATE TABLE month_totals (
    month      TEXT NOT NULL,
    site       TEXT NOT NULL,
    line       TEXT NOT NULL,
    product    TEXT NOT NULL,
    inspected  INTEGER NOT NULL,
    defective  INTEGER NOT NULL,
    PRIMARY KEY (month, site, line, product)
) STRICT, WITHOUT ROWID;

CREATE TABLE month_defects (
    month     TEXT NOT NULL,
    site      TEXT NOT NULL,
    line      TEXT NOT NULL,
    product   TEXT NOT NULL,
    category  TEXT NOT NULL,
    count     INTEGER NOT NULL,
    PRIMARY KEY (month, site, line, product, category)
) STRICT, WITHOUT ROWID;

-- Stored answers of batch posts with an Idempotency-Key, scoped to the API key
-- (api_key_id 0 = written without a key, e.g. by the CLI).
CREATE TABLE idempotency (
    api_key_id     INTEGER NOT NULL,
    key            TEXT NOT NULL,
    body_sha256    BLOB NOT NULL,
    status         INTEGER NOT NULL,
    response_body  BLOB NOT NULL,
    created_at     TEXT NOT NULL,
    PRIMARY KEY (api_key_id, key)
) STRICT, WITHOUT ROWID;

-- A single row holding the data version: bumped by every transaction that changes
-- report input (a new revision, a site or line created or changed). Report ETags and
-- caches are keyed by it.
CREATE TABLE store_state (
    id            INTEGER NOT NULL PRIMARY KEY CONSTRAINT store_state_single_row CHECK (id = 1),
    data_version  INTEGER NOT NULL
) STRICT;

INSERT INTO store_state (id, data_version) VALUES (1, 0);

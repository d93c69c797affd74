-- Data versions scoped to what a report reads, so a write to one site and day leaves the
-- ETags and cache entries of unrelated reports alone.
--
-- day_versions: per (date, site), the data version of the last write that created or
-- corrected a record of that site on that day. registry_version: the data version of
-- the last change to a site or line (it can change every report's groups or names).
-- A report's scoped version is the largest of registry_version and the day_versions
-- of its days (widened to its baseline window) and sites.
CREATE TABLE day_versions (
    date     TEXT NOT NULL,
    site     TEXT NOT NULL,
    version  INTEGER NOT NULL,
    PRIMARY KEY (date, site)
) STRICT, WITHOUT ROWID;

-- A site's days, for the scoped version of one site's reports.
CREATE INDEX day_versions_by_site ON day_versions (site, date, version);

-- date_versions: per date, the largest day version of any site (what a report over every
-- site reads), so such a report's version is a range of a few hundred rows, not of
-- every site's days.
CREATE TABLE date_versions (
    date     TEXT NOT NULL PRIMARY KEY,
    version  INTEGER NOT NULL
) STRICT, WITHOUT ROWID;

ALTER TABLE store_state ADD COLUMN registry_version INTEGER NOT NULL DEFAULT 0;

-- Existing data: every day with records, and the registry, at the current version.
INSERT INTO day_versions (date, site, version)
SELECT DISTINCT date, site, (SELECT data_version FROM store_state WHERE id = 1)
FROM counts_current;

INSERT INTO date_versions (date, version)
SELECT date, MAX(version) FROM day_versions GROUP BY date;

UPDATE store_state SET registry_version = data_version WHERE id = 1;

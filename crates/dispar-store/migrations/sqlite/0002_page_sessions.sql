-- Browser sessions of the HTML pages, shared by every server instance on this database
-- and kept across restarts. The session id itself is only in the person's cookie; the
-- table holds its SHA-256, as api_keys holds the hash of a key's secret. Each page
-- request still looks the key up, so revoking a key ends its sessions.
CREATE TABLE page_sessions (
    id_hash     BLOB PRIMARY KEY CONSTRAINT page_sessions_id_hash CHECK (length(id_hash) = 32),
    key_id      INTEGER NOT NULL CONSTRAINT page_sessions_key_fk REFERENCES api_keys (id),
    created_at  TEXT NOT NULL,
    expires_at  TEXT NOT NULL
) STRICT, WITHOUT ROWID;

-- A key's sessions, oldest first (signing in beyond the per-key limit ends the oldest).
CREATE INDEX page_sessions_by_key ON page_sessions (key_id, created_at);
-- Purging expired sessions.
CREATE INDEX page_sessions_by_expiry ON page_sessions (expires_at);

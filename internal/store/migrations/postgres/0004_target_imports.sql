-- 0004 (PostgreSQL): imports of many targets at once, as
-- migrations/0004_target_imports.sql.

CREATE TABLE target_imports (
    request_id  TEXT   NOT NULL PRIMARY KEY CHECK (request_id <> ''),
    fingerprint BYTEA  NOT NULL CHECK (octet_length(fingerprint) = 32),
    target_ids  TEXT   NOT NULL,
    created_at  BIGINT NOT NULL
);

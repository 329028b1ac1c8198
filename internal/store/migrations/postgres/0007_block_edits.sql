-- 0007 (PostgreSQL): the audit trail of changes to queued blocks, as
-- migrations/0007_block_edits.sql.

CREATE TABLE block_edits (
    block_id TEXT   NOT NULL REFERENCES blocks (id) ON DELETE CASCADE,
    at       BIGINT NOT NULL,
    actor    TEXT   NOT NULL,
    action   TEXT   NOT NULL CHECK (action <> ''),
    fields   TEXT   NOT NULL,
    revision BIGINT NOT NULL
);

CREATE INDEX block_edits_by_block ON block_edits (block_id, at);

-- 0007: the audit trail of changes to queued blocks: who (a token id, or
-- '' for an in-process caller), when, which request fields (comma-separated
-- field-mask paths) and what (a short description).

CREATE TABLE block_edits (
    block_id TEXT    NOT NULL REFERENCES blocks (id) ON DELETE CASCADE,
    at       INTEGER NOT NULL,
    actor    TEXT    NOT NULL,
    action   TEXT    NOT NULL CHECK (action <> ''),
    fields   TEXT    NOT NULL,
    revision INTEGER NOT NULL
) STRICT;

CREATE INDEX block_edits_by_block ON block_edits (block_id, at);

-- 0004: imports of many targets at once (ImportElements). One row per
-- client-chosen request id, with the SHA-256 of what was asked (so that a
-- retry is told from a different request under the same id) and the ids of
-- the targets it created, in order, separated by newlines.

CREATE TABLE target_imports (
    request_id  TEXT    NOT NULL PRIMARY KEY CHECK (request_id <> ''),
    fingerprint BLOB    NOT NULL CHECK (length(fingerprint) = 32),
    target_ids  TEXT    NOT NULL,
    created_at  INTEGER NOT NULL
) STRICT;

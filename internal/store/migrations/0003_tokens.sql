-- 0003: bearer tokens. Only the SHA-256 of the secret is kept (32 bytes);
-- the secret itself is shown once by the command that creates it.

CREATE TABLE tokens (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    hash       BLOB    NOT NULL UNIQUE CHECK (length(hash) = 32),
    role       TEXT    NOT NULL CHECK (role <> ''),
    label      TEXT    NOT NULL,
    created_at INTEGER NOT NULL,
    revoked_at INTEGER
) STRICT;

CREATE INDEX tokens_by_created ON tokens (created_at, id);

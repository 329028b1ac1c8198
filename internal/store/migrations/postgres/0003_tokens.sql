-- 0003 (PostgreSQL): bearer tokens, as migrations/0003_tokens.sql. Only the
-- SHA-256 of the secret is kept (32 bytes).

CREATE TABLE tokens (
    id         TEXT   NOT NULL PRIMARY KEY CHECK (id <> ''),
    hash       BYTEA  NOT NULL UNIQUE CHECK (octet_length(hash) = 32),
    role       TEXT   NOT NULL CHECK (role <> ''),
    label      TEXT   NOT NULL,
    created_at BIGINT NOT NULL,
    revoked_at BIGINT
);

CREATE INDEX tokens_by_created ON tokens (created_at, id);

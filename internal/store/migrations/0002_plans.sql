-- 0002: plan versions. Each site numbers its plans 1, 2, 3, ... ; the store
-- assigns the next number inside the inserting transaction.

CREATE TABLE plans (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    site_id    TEXT    NOT NULL REFERENCES sites (id) ON DELETE CASCADE,
    version    INTEGER NOT NULL CHECK (version >= 1),
    start_at   INTEGER NOT NULL,
    end_at     INTEGER NOT NULL CHECK (end_at >= start_at),
    body       BLOB    NOT NULL,
    created_at INTEGER NOT NULL,
    UNIQUE (site_id, version)
) STRICT;

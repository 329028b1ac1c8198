-- 0002 (PostgreSQL): plan versions, as migrations/0002_plans.sql. Each site
-- numbers its plans 1, 2, 3, ...; the store assigns the next number inside
-- the inserting transaction while it holds the site's row lock.

CREATE TABLE plans (
    id         TEXT   NOT NULL PRIMARY KEY CHECK (id <> ''),
    site_id    TEXT   NOT NULL REFERENCES sites (id) ON DELETE CASCADE,
    version    BIGINT NOT NULL CHECK (version >= 1),
    start_at   BIGINT NOT NULL,
    end_at     BIGINT NOT NULL CHECK (end_at >= start_at),
    body       BYTEA  NOT NULL,
    created_at BIGINT NOT NULL,
    UNIQUE (site_id, version)
);

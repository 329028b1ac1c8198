-- 0008 (PostgreSQL): networks of sites sharing one queue (issue 17). The
-- same schema as migrations/0008_networks.sql (SQLite), column for
-- column; see that file for what each part means.

CREATE TABLE networks (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    name       TEXT    NOT NULL UNIQUE CHECK (name <> ''),
    spec       BYTEA   NOT NULL,
    created_at BIGINT  NOT NULL,
    updated_at BIGINT  NOT NULL,
    revision   BIGINT  NOT NULL CHECK (revision >= 1)
);

CREATE INDEX networks_by_created ON networks (created_at, id);

CREATE TABLE network_sites (
    network_id TEXT    NOT NULL REFERENCES networks (id) ON DELETE CASCADE,
    site_id    TEXT    NOT NULL REFERENCES sites (id) ON DELETE CASCADE,
    position   INTEGER NOT NULL CHECK (position >= 0),
    PRIMARY KEY (network_id, site_id),
    UNIQUE (network_id, position)
);

CREATE INDEX network_sites_by_site ON network_sites (site_id);

ALTER TABLE blocks ADD COLUMN network_id TEXT REFERENCES networks (id) ON DELETE SET NULL;

CREATE INDEX blocks_by_network ON blocks (network_id, state, created_at, id);

ALTER TABLE progress_reports ADD COLUMN site_id TEXT REFERENCES sites (id) ON DELETE SET NULL;

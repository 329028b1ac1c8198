-- 0001 (PostgreSQL): sites, targets, the block queue and progress reports.
-- The same schema as migrations/0001_init.sql (SQLite), column for column,
-- so that a database copies between the two without conversion:
--   * instants are BIGINT nanoseconds since 1970-01-01T00:00:00Z (UTC);
--   * ids are chosen by the caller and never empty;
--   * spec/body columns (BYTEA) hold the API message encoded by the server;
--   * revision starts at 1 and grows by one on every change of the row.

CREATE TABLE sites (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    name       TEXT    NOT NULL CHECK (name <> ''),
    spec       BYTEA   NOT NULL,
    created_at BIGINT  NOT NULL,
    updated_at BIGINT  NOT NULL,
    revision   BIGINT  NOT NULL CHECK (revision >= 1)
);

CREATE INDEX sites_by_created ON sites (created_at, id);

CREATE TABLE targets (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    name       TEXT    NOT NULL CHECK (name <> ''),
    kind       TEXT    NOT NULL CHECK (kind IN ('fixed', 'orbit')),
    spec       BYTEA   NOT NULL,
    created_at BIGINT  NOT NULL,
    updated_at BIGINT  NOT NULL,
    revision   BIGINT  NOT NULL CHECK (revision >= 1)
);

CREATE INDEX targets_by_created ON targets (created_at, id);

CREATE TABLE blocks (
    id            TEXT             NOT NULL PRIMARY KEY CHECK (id <> ''),
    site_id       TEXT             NOT NULL REFERENCES sites (id) ON DELETE CASCADE,
    target_id     TEXT             NOT NULL REFERENCES targets (id) ON DELETE CASCADE,
    priority      DOUBLE PRECISION NOT NULL,
    state         TEXT             NOT NULL CHECK (state IN ('queued', 'completed', 'withdrawn')),
    frames_wanted INTEGER          NOT NULL CHECK (frames_wanted > 0),
    frames_done   INTEGER          NOT NULL CHECK (frames_done >= 0 AND frames_done <= frames_wanted),
    spec          BYTEA            NOT NULL,
    created_at    BIGINT           NOT NULL,
    updated_at    BIGINT           NOT NULL,
    revision      BIGINT           NOT NULL CHECK (revision >= 1),
    CHECK (state <> 'queued' OR frames_done < frames_wanted),
    CHECK (state <> 'completed' OR frames_done = frames_wanted)
);

CREATE INDEX blocks_by_created ON blocks (created_at, id);
CREATE INDEX blocks_by_site ON blocks (site_id, state, created_at, id);
CREATE INDEX blocks_by_target ON blocks (target_id, state);

CREATE TABLE progress_reports (
    report_id      TEXT    NOT NULL PRIMARY KEY CHECK (report_id <> ''),
    block_id       TEXT    NOT NULL REFERENCES blocks (id) ON DELETE CASCADE,
    frames_kept    INTEGER NOT NULL CHECK (frames_kept >= 0),
    frames_applied INTEGER NOT NULL CHECK (frames_applied >= 0 AND frames_applied <= frames_kept),
    start_at       BIGINT  NOT NULL,
    end_at         BIGINT  NOT NULL CHECK (end_at >= start_at),
    outcome        TEXT    NOT NULL,
    received_at    BIGINT  NOT NULL
);

CREATE INDEX progress_by_block ON progress_reports (block_id, received_at, report_id);

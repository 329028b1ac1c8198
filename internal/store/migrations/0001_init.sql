-- 0001: sites, targets, the block queue and progress reports.
--
-- Conventions for every table of this store:
--   * instants are INTEGER nanoseconds since 1970-01-01T00:00:00Z (UTC);
--   * ids are chosen by the caller and never empty;
--   * spec/body columns hold the API message encoded by the server (opaque
--     here); only the columns the store must query, constrain or update
--     atomically are broken out;
--   * revision starts at 1 and grows by one on every change of the row.
-- Tables are STRICT so that a value of the wrong type is refused, not coerced.

CREATE TABLE sites (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    name       TEXT    NOT NULL CHECK (name <> ''),
    spec       BLOB    NOT NULL,
    created_at INTEGER NOT NULL,
    updated_at INTEGER NOT NULL,
    revision   INTEGER NOT NULL CHECK (revision >= 1)
) STRICT;

CREATE INDEX sites_by_created ON sites (created_at, id);

CREATE TABLE targets (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    name       TEXT    NOT NULL CHECK (name <> ''),
    kind       TEXT    NOT NULL CHECK (kind IN ('fixed', 'orbit')),
    spec       BLOB    NOT NULL,
    created_at INTEGER NOT NULL,
    updated_at INTEGER NOT NULL,
    revision   INTEGER NOT NULL CHECK (revision >= 1)
) STRICT;

CREATE INDEX targets_by_created ON targets (created_at, id);

-- A block is queued until its frames are done (completed) or an operator
-- withdraws it. Deleting a site or a target is refused by the store while a
-- queued block uses it; the blocks that are no longer queued go with it.
CREATE TABLE blocks (
    id            TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    site_id       TEXT    NOT NULL REFERENCES sites (id) ON DELETE CASCADE,
    target_id     TEXT    NOT NULL REFERENCES targets (id) ON DELETE CASCADE,
    priority      REAL    NOT NULL,
    state         TEXT    NOT NULL CHECK (state IN ('queued', 'completed', 'withdrawn')),
    frames_wanted INTEGER NOT NULL CHECK (frames_wanted > 0),
    frames_done   INTEGER NOT NULL CHECK (frames_done >= 0 AND frames_done <= frames_wanted),
    spec          BLOB    NOT NULL,
    created_at    INTEGER NOT NULL,
    updated_at    INTEGER NOT NULL,
    revision      INTEGER NOT NULL CHECK (revision >= 1),
    CHECK (state <> 'queued' OR frames_done < frames_wanted),
    CHECK (state <> 'completed' OR frames_done = frames_wanted)
) STRICT;

CREATE INDEX blocks_by_created ON blocks (created_at, id);
CREATE INDEX blocks_by_site ON blocks (site_id, state, created_at, id);
CREATE INDEX blocks_by_target ON blocks (target_id, state);

-- One row per accepted progress report. frames_applied is what the report
-- added to the block's frames_done (frames_kept capped at what was still
-- wanted), so that frames_done = SUM(frames_applied) for every block.
CREATE TABLE progress_reports (
    report_id      TEXT    NOT NULL PRIMARY KEY CHECK (report_id <> ''),
    block_id       TEXT    NOT NULL REFERENCES blocks (id) ON DELETE CASCADE,
    frames_kept    INTEGER NOT NULL CHECK (frames_kept >= 0),
    frames_applied INTEGER NOT NULL CHECK (frames_applied >= 0 AND frames_applied <= frames_kept),
    start_at       INTEGER NOT NULL,
    end_at         INTEGER NOT NULL CHECK (end_at >= start_at),
    outcome        TEXT    NOT NULL,
    received_at    INTEGER NOT NULL
) STRICT;

CREATE INDEX progress_by_block ON progress_reports (block_id, received_at, report_id);

-- 0009: programs (whose time a block spends on a shared telescope), the
-- block's program reference, and the ledger of time charged to programs.
--
-- A program is keyed by its name. spec holds the API message (allocation,
-- period, description) encoded by the server; site_id, when set, holds the
-- program to one site. Deleting a program is refused by the store while a
-- queued block refers to it; blocks no longer queued lose the reference and
-- its charges go with it.

CREATE TABLE programs (
    name       TEXT    NOT NULL PRIMARY KEY CHECK (name <> ''),
    site_id    TEXT    REFERENCES sites (id) ON DELETE CASCADE,
    spec       BLOB    NOT NULL,
    created_at INTEGER NOT NULL,
    updated_at INTEGER NOT NULL,
    revision   INTEGER NOT NULL CHECK (revision >= 1)
) STRICT;

CREATE INDEX programs_by_created ON programs (created_at, name);

ALTER TABLE blocks ADD COLUMN program TEXT REFERENCES programs (name) ON DELETE SET NULL;

CREATE INDEX blocks_by_program ON blocks (program, state);

-- One row per accepted progress report of a block with a program: the
-- run's exposure (frames kept times the block's exposure) and overheads (the
-- rest of the reported interval), in nanoseconds, charged to the program
-- the block had when the report was accepted.
CREATE TABLE program_charges (
    report_id TEXT    NOT NULL PRIMARY KEY REFERENCES progress_reports (report_id) ON DELETE CASCADE,
    program   TEXT    NOT NULL REFERENCES programs (name) ON DELETE CASCADE,
    block_id  TEXT    NOT NULL,
    start_at  INTEGER NOT NULL,
    exposure  INTEGER NOT NULL CHECK (exposure >= 0),
    overheads INTEGER NOT NULL CHECK (overheads >= 0)
) STRICT;

CREATE INDEX program_charges_by_program ON program_charges (program, start_at);

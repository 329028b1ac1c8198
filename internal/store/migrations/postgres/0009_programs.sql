-- 0009 (PostgreSQL): programs, the block's program reference and the ledger
-- of charged time, as migrations/0009_programs.sql.

CREATE TABLE programs (
    name       TEXT   NOT NULL PRIMARY KEY CHECK (name <> ''),
    site_id    TEXT   REFERENCES sites (id) ON DELETE CASCADE,
    spec       BYTEA  NOT NULL,
    created_at BIGINT NOT NULL,
    updated_at BIGINT NOT NULL,
    revision   BIGINT NOT NULL CHECK (revision >= 1)
);

CREATE INDEX programs_by_created ON programs (created_at, name);

ALTER TABLE blocks ADD COLUMN program TEXT REFERENCES programs (name) ON DELETE SET NULL;

CREATE INDEX blocks_by_program ON blocks (program, state);

CREATE TABLE program_charges (
    report_id TEXT   NOT NULL PRIMARY KEY REFERENCES progress_reports (report_id) ON DELETE CASCADE,
    program   TEXT   NOT NULL REFERENCES programs (name) ON DELETE CASCADE,
    block_id  TEXT   NOT NULL,
    start_at  BIGINT NOT NULL,
    exposure  BIGINT NOT NULL CHECK (exposure >= 0),
    overheads BIGINT NOT NULL CHECK (overheads >= 0)
);

CREATE INDEX program_charges_by_program ON program_charges (program, start_at);

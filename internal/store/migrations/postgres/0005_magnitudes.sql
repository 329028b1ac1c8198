-- 0005 (PostgreSQL): measured magnitudes and fitted magnitude laws, as
-- migrations/0005_magnitudes.sql.

CREATE TABLE magnitude_observations (
    id          TEXT             NOT NULL PRIMARY KEY CHECK (id <> ''),
    target_id   TEXT             NOT NULL REFERENCES targets (id) ON DELETE CASCADE,
    observed_at BIGINT           NOT NULL,
    magnitude   DOUBLE PRECISION NOT NULL,
    sigma       DOUBLE PRECISION NOT NULL CHECK (sigma > 0),
    note        TEXT             NOT NULL,
    created_at  BIGINT           NOT NULL
);

CREATE INDEX magnitude_observations_by_target ON magnitude_observations (target_id, observed_at, id);

CREATE TABLE magnitude_fits (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    target_id  TEXT    NOT NULL REFERENCES targets (id) ON DELETE CASCADE,
    spec       BYTEA   NOT NULL,
    applied    INTEGER NOT NULL CHECK (applied IN (0, 1)),
    created_at BIGINT  NOT NULL
);

CREATE INDEX magnitude_fits_by_target ON magnitude_fits (target_id, created_at, id);

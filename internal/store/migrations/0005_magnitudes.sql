-- 0005: measured total magnitudes of moving targets and the history of the
-- magnitude laws fitted to them. Both go with their target.

CREATE TABLE magnitude_observations (
    id          TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    target_id   TEXT    NOT NULL REFERENCES targets (id) ON DELETE CASCADE,
    observed_at INTEGER NOT NULL,
    magnitude   REAL    NOT NULL,
    sigma       REAL    NOT NULL CHECK (sigma > 0),
    note        TEXT    NOT NULL,
    created_at  INTEGER NOT NULL
) STRICT;

CREATE INDEX magnitude_observations_by_target ON magnitude_observations (target_id, observed_at, id);

-- spec is the server's encoding of one fit (laws before and after,
-- uncertainties, residuals); applied says it became the target's law.
CREATE TABLE magnitude_fits (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    target_id  TEXT    NOT NULL REFERENCES targets (id) ON DELETE CASCADE,
    spec       BLOB    NOT NULL,
    applied    INTEGER NOT NULL CHECK (applied IN (0, 1)),
    created_at INTEGER NOT NULL
) STRICT;

CREATE INDEX magnitude_fits_by_target ON magnitude_fits (target_id, created_at, id);

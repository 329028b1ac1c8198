-- 0008: networks of sites sharing one queue (issue 17).
--
-- A network is a named, ordered group of sites. A block queued for a
-- network keeps its home site in blocks.site_id (a member: its time zone
-- reads the block's dates, its site-scoped tokens may edit it, and the
-- existing rules of site deletion hold unchanged) and names the network in
-- blocks.network_id; it runs once, at whichever member serves it best.
-- frames_done stays per block, so a report from any member counts for all.
-- progress_reports.site_id records the member that reported (NULL for
-- reports stored before this migration: the block's site), so that each
-- site's replans see their own runs.
--
-- What decides whether a site can take a network block (the filters in
-- its wheel, its aperture and pixel scale; the block's allowed sites and
-- needs) lives in the sites' and blocks' spec: the store neither queries
-- nor constrains it (0001's convention for spec columns).

CREATE TABLE networks (
    id         TEXT    NOT NULL PRIMARY KEY CHECK (id <> ''),
    name       TEXT    NOT NULL UNIQUE CHECK (name <> ''),
    spec       BLOB    NOT NULL,
    created_at INTEGER NOT NULL,
    updated_at INTEGER NOT NULL,
    revision   INTEGER NOT NULL CHECK (revision >= 1)
) STRICT;

CREATE INDEX networks_by_created ON networks (created_at, id);

-- Members in the network's order (position 0, 1, ...). Deleting a site
-- takes it out of its networks.
CREATE TABLE network_sites (
    network_id TEXT    NOT NULL REFERENCES networks (id) ON DELETE CASCADE,
    site_id    TEXT    NOT NULL REFERENCES sites (id) ON DELETE CASCADE,
    position   INTEGER NOT NULL CHECK (position >= 0),
    PRIMARY KEY (network_id, site_id),
    UNIQUE (network_id, position)
) STRICT;

CREATE INDEX network_sites_by_site ON network_sites (site_id);

-- Deleting a network is refused while queued blocks belong to it; the
-- others stay with their home sites.
ALTER TABLE blocks ADD COLUMN network_id TEXT REFERENCES networks (id) ON DELETE SET NULL;

CREATE INDEX blocks_by_network ON blocks (network_id, state, created_at, id);

ALTER TABLE progress_reports ADD COLUMN site_id TEXT REFERENCES sites (id) ON DELETE SET NULL;

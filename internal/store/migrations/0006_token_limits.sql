-- 0006: a token may expire (expires_at, Unix nanoseconds; NULL never) and
-- may be held to one site (site_id; '' means every site).

ALTER TABLE tokens ADD COLUMN expires_at INTEGER;
ALTER TABLE tokens ADD COLUMN site_id TEXT NOT NULL DEFAULT '';

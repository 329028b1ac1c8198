-- 0006 (PostgreSQL): token expiry and site scope, as
-- migrations/0006_token_limits.sql.

ALTER TABLE tokens ADD COLUMN expires_at BIGINT;
ALTER TABLE tokens ADD COLUMN site_id TEXT NOT NULL DEFAULT '';

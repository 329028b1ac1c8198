package store

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"fmt"
	"time"
)

// Token is a bearer token's record. Hash is the SHA-256 of the secret; the
// secret itself is never stored. Role is the server's role name. RevokedAt is
// nil while the token is active. ExpiresAt, when set, is the instant from
// which the token is no longer accepted; SiteID, when set, holds the token
// to that one site.
type Token struct {
	ID          string
	Hash        []byte
	Role, Label string
	CreatedAt   time.Time
	RevokedAt   *time.Time
	ExpiresAt   *time.Time
	SiteID      string
}

const tokenCols = `id, hash, role, label, created_at, revoked_at, expires_at, site_id`

func scanToken(s scanner) (Token, error) {
	var x Token
	var created int64
	var revoked, expires sql.NullInt64
	if err := s.Scan(&x.ID, &x.Hash, &x.Role, &x.Label, &created, &revoked, &expires, &x.SiteID); err != nil {
		return Token{}, err
	}
	x.CreatedAt = decTime(created)
	if revoked.Valid {
		t := decTime(revoked.Int64)
		x.RevokedAt = &t
	}
	if expires.Valid {
		t := decTime(expires.Int64)
		x.ExpiresAt = &t
	}
	return x, nil
}

// CreateToken stores a new active token. The store sets CreatedAt and clears
// RevokedAt. An empty id or role, or a hash that is not sha256.Size bytes,
// is ErrInvalid; an existing id or hash ErrAlreadyExists.
func (d *sqliteDB) CreateToken(ctx context.Context, t Token) (Token, error) {
	op := fmt.Sprintf("create token %q", t.ID)
	err := checkToken(t)
	if err != nil {
		return Token{}, mapErr(ctx, op, err)
	}
	t.Hash = append([]byte(nil), t.Hash...)
	t.CreatedAt, t.RevokedAt = d.now(), nil
	var expires sql.NullInt64
	if t.ExpiresAt != nil {
		if !t.ExpiresAt.After(t.CreatedAt) {
			return Token{}, mapErr(ctx, op, invalidf("token expires at %s, not after its creation", t.ExpiresAt.UTC().Format(time.RFC3339)))
		}
		e := decTime(t.ExpiresAt.UnixNano())
		t.ExpiresAt = &e
		expires = sql.NullInt64{Int64: e.UnixNano(), Valid: true}
	}
	err = d.write(ctx, op, func(tx *sql.Tx) error {
		_, err := tx.ExecContext(ctx, `INSERT INTO tokens (`+tokenCols+`) VALUES (?, ?, ?, ?, ?, NULL, ?, ?)`,
			t.ID, t.Hash, t.Role, t.Label, t.CreatedAt.UnixNano(), expires, t.SiteID)
		return err
	})
	if err != nil {
		return Token{}, err
	}
	return t, nil
}

// GetToken returns the token with that id, active or revoked, or ErrNotFound.
func (d *sqliteDB) GetToken(ctx context.Context, id string) (Token, error) {
	t, err := scanToken(d.r.QueryRowContext(ctx, `SELECT `+tokenCols+` FROM tokens WHERE id = ?`, id))
	if err != nil {
		return Token{}, mapErr(ctx, fmt.Sprintf("get token %q", id), err)
	}
	return t, nil
}

// TokenByHash returns the active token whose secret hashes to hash. A revoked
// or expired token (ExpiresAt at or before the store's clock) is ErrNotFound
// like an unknown one, so that the authenticating caller cannot let it in by
// forgetting to look at RevokedAt or ExpiresAt. The hash is not part of the
// error message.
func (d *sqliteDB) TokenByHash(ctx context.Context, hash []byte) (Token, error) {
	t, err := scanToken(d.r.QueryRowContext(ctx, `SELECT `+tokenCols+` FROM tokens
		WHERE hash = ? AND revoked_at IS NULL AND (expires_at IS NULL OR expires_at > ?)`, hash, d.now().UnixNano()))
	if err != nil {
		return Token{}, mapErr(ctx, "token by hash", err)
	}
	return t, nil
}

// ListTokens returns one page of tokens, active and revoked, in order of
// creation (then id) and the token of the next page.
func (d *sqliteDB) ListTokens(ctx context.Context, p Page) ([]Token, string, error) {
	const op, scope = "list tokens", "tokens"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	rows, err := d.r.QueryContext(ctx, `SELECT `+tokenCols+` FROM tokens
		WHERE (created_at, id) > (?, ?) ORDER BY created_at, id LIMIT ?`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	out, next, err := collect(rows, size, scope, scanToken, func(t Token) cursor { return cursor{t.CreatedAt.UnixNano(), t.ID} })
	return out, next, mapErr(ctx, op, err)
}

// RevokeToken marks a token revoked now and returns it. Revoking a revoked
// token changes nothing (it keeps its first RevokedAt). An unknown id is
// ErrNotFound.
func (d *sqliteDB) RevokeToken(ctx context.Context, id string) (Token, error) {
	op := fmt.Sprintf("revoke token %q", id)
	var out Token
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		t, err := scanToken(tx.QueryRowContext(ctx, `SELECT `+tokenCols+` FROM tokens WHERE id = ?`, id))
		if err != nil {
			return err
		}
		if t.RevokedAt == nil {
			now := d.now()
			if _, err := tx.ExecContext(ctx, `UPDATE tokens SET revoked_at = ? WHERE id = ?`, now.UnixNano(), id); err != nil {
				return err
			}
			t.RevokedAt = &now
		}
		out = t
		return nil
	})
	if err != nil {
		return Token{}, err
	}
	return out, nil
}

// checkToken enforces what a new token must be.
func checkToken(t Token) error {
	switch {
	case t.ID == "":
		return invalidf("token id is empty")
	case len(t.Hash) != sha256.Size:
		return invalidf("token hash has %d bytes, want %d (SHA-256)", len(t.Hash), sha256.Size)
	case t.Role == "":
		return invalidf("token role is empty")
	}
	return nil
}

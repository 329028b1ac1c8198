package store

import (
	"database/sql"
	"encoding/base64"
	"encoding/binary"
	"hash/fnv"
	"math"
)

// Page asks a List method for one page.
type Page struct {
	// Size is the most records to return: 0 means DefaultPageSize, larger
	// than MaxPageSize means MaxPageSize, negative is ErrInvalid.
	Size int
	// Token is the token a previous call returned; empty for the first page.
	Token string
}

const (
	// DefaultPageSize is the page size when Page.Size is zero.
	DefaultPageSize = 100
	// MaxPageSize is the largest page a List method returns.
	MaxPageSize = 1000
)

// cursor is the position after the last record of a page in a list ordered
// by (key, id): key is a creation instant in nanoseconds or a plan version.
type cursor struct {
	key int64
	id  string
}

// A page token is base64url of: format byte 1, the 32-bit FNV-1a hash of the
// list's scope (its name and filter), the cursor key (big endian), the cursor
// id. It is opaque to callers; the scope hash makes a token from another list
// or filter fail instead of silently skipping records.
const tokenFormat = 1

func scopeHash(scope string) uint32 {
	h := fnv.New32a()
	_, _ = h.Write([]byte(scope))
	return h.Sum32()
}

func encodeToken(scope string, c cursor) string {
	b := make([]byte, 0, 13+len(c.id))
	b = append(b, tokenFormat)
	b = binary.BigEndian.AppendUint32(b, scopeHash(scope))
	b = binary.BigEndian.AppendUint64(b, uint64(c.key))
	b = append(b, c.id...)
	return base64.RawURLEncoding.EncodeToString(b)
}

// start parses the page request for the list named scope: the page size to
// use and where to start (before every record for the first page).
func (p Page) start(scope string) (cursor, int, error) {
	size := p.Size
	switch {
	case size < 0:
		return cursor{}, 0, invalidf("page size %d is negative", size)
	case size == 0:
		size = DefaultPageSize
	case size > MaxPageSize:
		size = MaxPageSize
	}
	if p.Token == "" {
		return cursor{key: math.MinInt64}, size, nil
	}
	b, err := base64.RawURLEncoding.DecodeString(p.Token)
	if err != nil || len(b) < 14 || b[0] != tokenFormat {
		return cursor{}, 0, invalidf("malformed page token")
	}
	if binary.BigEndian.Uint32(b[1:5]) != scopeHash(scope) {
		return cursor{}, 0, invalidf("page token belongs to another list or filter")
	}
	return cursor{key: int64(binary.BigEndian.Uint64(b[5:13])), id: string(b[13:])}, size, nil
}

// collect reads up to size records of a query that asked for size+1 rows and
// returns them with the token of the next page ("" when there is none).
func collect[T any](rows *sql.Rows, size int, scope string, scan func(scanner) (T, error), pos func(T) cursor) ([]T, string, error) {
	defer rows.Close()
	out := make([]T, 0, min(size, 64))
	more := false
	for rows.Next() {
		if len(out) == size {
			more = true
			break
		}
		v, err := scan(rows)
		if err != nil {
			return nil, "", err
		}
		out = append(out, v)
	}
	if err := rows.Err(); err != nil {
		return nil, "", err
	}
	if !more {
		return out, "", nil
	}
	return out, encodeToken(scope, pos(out[len(out)-1])), nil
}

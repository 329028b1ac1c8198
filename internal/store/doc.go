// Package store is nightloom's persistence: sites, targets, the block queue,
// progress reports, plan versions and bearer tokens in one SQLite database
// (github.com/mattn/go-sqlite3, Open: the embedded default) or in one
// PostgreSQL database shared by several daemons (github.com/jackc/pgx/v5,
// OpenPostgres; see postgres.go and replicas.go). Both implement Store with
// the same behaviour, which the conformance suite (storetest) defines; DB
// wraps either. Copy moves a whole database from one to the other.
//
// This room holds SQL and nothing else. It does not import the API (proto,
// grpc) or the domain packages: the server encodes each API message with
// protobuf and hands it over as opaque bytes (the Spec and Body fields); the
// store breaks out only the columns it must query, constrain or update
// atomically (ids, names, state, frame counts, priority, versions, instants).
//
// # Durability and concurrency
//
// A file database runs in WAL mode with synchronous=FULL, so a call that
// changed something has reached the disk (fsync of the WAL) when it returns;
// foreign keys are on. Writes go through a single connection whose
// transactions begin with BEGIN IMMEDIATE, so writers of this process queue
// in Go and writers of other processes wait on SQLite's busy timeout instead
// of failing half way. Reads use a separate pool of read-only connections and
// never wait for a writer (WAL readers see the last committed state). A write
// transaction that still fails with SQLITE_BUSY or SQLITE_LOCKED is retried a
// few times (Options.BusyRetries) and then fails with ErrBusy, which the server
// maps to Aborted so that clients retry.
//
// An in-memory database (path ":memory:") has its own unique name in shared
// cache and one connection for reads and writes; it is meant for fast tests.
//
// # Records and clocks
//
// Callers choose the ids (the server generates random ones); an empty id is
// ErrInvalid. The store stamps CreatedAt, UpdatedAt and ReceivedAt with its own
// clock (Options.Now) and keeps instants as integer nanoseconds in UTC, so a
// record read back equals the one the create call returned. Revision starts
// at 1 and grows by one with every change; updates are optimistic: the caller
// passes the Revision it read and a stale one is ErrConflict.
//
// # Listing
//
// Lists return at most Page.Size records (DefaultPageSize when zero, at most
// MaxPageSize) in a stable order (creation instant, then id; plans by version)
// and an opaque token for the next page, empty on the last page. A token is
// bound to the list and filter that produced it; a token that was altered or
// is used with another filter is ErrInvalid. Records created while a caller is
// paging appear after the ones it has already seen.
//
// # Errors
//
// Every error wraps one of ErrNotFound, ErrAlreadyExists, ErrConflict, ErrBusy,
// ErrInvalid or ErrIntegrity when it has that meaning (test with errors.Is), a
// context error when the context ended, or else the driver's error, always
// with the operation and the ids involved in its message.
//
// # Schema
//
// The schema lives in numbered SQL files under migrations/ (embedded in the
// binary); Open applies the missing ones in order, each in its own
// transaction together with its row in schema_migrations, and refuses a
// database whose schema is newer than the build.
package store

package catalog

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"time"
)

// SchemaVersion is the index schema version this build writes: the
// number of entries in migrations.
var SchemaVersion = len(migrations)

// migrations[i] takes the schema from version i to version i+1. Each
// runs inside the same write transaction as the version bump, so a
// crash leaves either the old or the new schema. Append; never edit a
// released entry.
var migrations = []string{
	// 0 → 1: parts, revisions, their blobs, and the blobs that filings in
	// progress have announced.
	`
CREATE TABLE parts (
	id         INTEGER PRIMARY KEY,
	name       TEXT    NOT NULL COLLATE NOCASE UNIQUE,
	last_rev   INTEGER NOT NULL DEFAULT 0 CHECK (last_rev >= 0),
	created_ns INTEGER NOT NULL
) STRICT;

CREATE TABLE revisions (
	id                   INTEGER PRIMARY KEY,
	part_id              INTEGER NOT NULL REFERENCES parts(id),
	rev                  INTEGER NOT NULL CHECK (rev >= 1),
	filed_ns             INTEGER NOT NULL,
	verdict              TEXT    NOT NULL CHECK (verdict IN ('ready', 'review', 'rescan')),
	input_hash           TEXT    NOT NULL,
	settings_hash        TEXT    NOT NULL,
	tool_version         TEXT    NOT NULL,
	host                 TEXT    NOT NULL,
	created_ns           INTEGER NOT NULL,
	diameter_m           REAL    NOT NULL,
	acceptance_threshold REAL    NOT NULL,
	meta                 TEXT    NOT NULL,
	UNIQUE (part_id, rev)
) STRICT;

CREATE INDEX revisions_provenance ON revisions (part_id, input_hash, settings_hash);

CREATE TABLE revision_blobs (
	revision_id INTEGER NOT NULL REFERENCES revisions(id) ON DELETE CASCADE,
	role        TEXT    NOT NULL,
	sha256      TEXT    NOT NULL CHECK (length(sha256) = 64),
	size        INTEGER NOT NULL CHECK (size >= 0),
	media_type  TEXT    NOT NULL,
	PRIMARY KEY (revision_id, role)
) STRICT;

CREATE INDEX revision_blobs_sha256 ON revision_blobs (sha256);

CREATE TABLE pending_blobs (
	filing     TEXT    NOT NULL,
	sha256     TEXT    NOT NULL,
	pid        INTEGER NOT NULL,
	host       TEXT    NOT NULL,
	started_ns INTEGER NOT NULL,
	PRIMARY KEY (filing, sha256)
) STRICT;

CREATE INDEX pending_blobs_sha256 ON pending_blobs (sha256);
`,
}

const createVersionTable = `
CREATE TABLE IF NOT EXISTS schema_version (
	id         INTEGER PRIMARY KEY CHECK (id = 1),
	version    INTEGER NOT NULL,
	updated_ns INTEGER NOT NULL
) STRICT`

// readVersion returns the schema version, or 0 when the version table
// has no row yet.
func readVersion(ctx context.Context, q interface {
	QueryRowContext(context.Context, string, ...any) *sql.Row
}) (int, error) {
	var v int
	err := q.QueryRowContext(ctx, `SELECT version FROM schema_version WHERE id = 1`).Scan(&v)
	if errors.Is(err, sql.ErrNoRows) {
		return 0, nil
	}
	return v, err
}

// migrate brings the index schema to SchemaVersion. The common case (an
// up-to-date index) takes no write lock.
func (s *Store) migrate(ctx context.Context) error {
	if v, err := readVersion(ctx, s.db); err == nil {
		if v == SchemaVersion {
			return nil
		}
	} else if isCorrupt(err) {
		return s.dbErr("read schema version", err)
	}
	return s.write(ctx, "migrate schema", func(tx *sql.Tx) error {
		if _, err := tx.ExecContext(ctx, createVersionTable); err != nil {
			return err
		}
		v, err := readVersion(ctx, tx)
		if err != nil {
			return err
		}
		if v < 0 || v > SchemaVersion {
			return fmt.Errorf("%w: index %s has schema version %d, this build knows up to %d; use a newer scanfold",
				ErrUnsupported, s.indexPath(), v, SchemaVersion)
		}
		for i := v; i < SchemaVersion; i++ {
			if _, err := tx.ExecContext(ctx, migrations[i]); err != nil {
				return fmt.Errorf("catalog: index %s: migration %d→%d: %w", s.indexPath(), i, i+1, err)
			}
		}
		_, err = tx.ExecContext(ctx, `INSERT INTO schema_version (id, version, updated_ns) VALUES (1, ?, ?)
			ON CONFLICT (id) DO UPDATE SET version = excluded.version, updated_ns = excluded.updated_ns`,
			SchemaVersion, time.Now().UnixNano())
		return err
	})
}

package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"slices"
)

// LotsVersion is the change counter of what a process's chart is drawn
// from (its lots, limit sets and settings), read from lot_versions.
// Version grows with every such write and is 0 before the first; Rewrites
// grows only with the writes that change a stored lot or the way lots are
// judged (a correction, a void, a limit set, new process settings). So a
// reader holding the lots as of an earlier value with the same Rewrites
// needs only the lots added since (ids are handed out in increasing
// order). Both are bumped in the transaction of the write, so any process
// writing the file (the server, an import from the command line) is seen.
type LotsVersion struct {
	Version  int64
	Rewrites int64
}

// LotsVersion returns the process's change counter.
func (db *DB) LotsVersion(ctx context.Context, processID int64) (LotsVersion, error) {
	var v LotsVersion
	err := db.r.QueryRowContext(ctx, "SELECT version, rewrites FROM lot_versions WHERE process_id = ?", processID).Scan(&v.Version, &v.Rewrites)
	if errors.Is(err, sql.ErrNoRows) {
		return LotsVersion{}, nil
	}
	return v, err
}

// versionBump is one change of a process's chart data, counted in
// lot_versions when the batch ends.
type versionBump struct {
	processID int64
	rewrite   bool
}

// bumpVersion counts a change of the process's chart data in the writer
// transaction (written by settle, with the batch's other counts).
func (w *wtx) bumpVersion(processID int64, rewrite bool) error {
	w.bumps = append(w.bumps, versionBump{processID, rewrite})
	return nil
}

// settle writes what the batch's jobs left for its end: the audit entries,
// chained after the head the batch began with, the change counters of the
// processes written and the alert outbox's new lots. A batch thus moves
// the chain head and each process's counter once, however many jobs it
// carries.
func (w *wtx) settle() error {
	if len(w.entries) > 0 {
		head, err := w.db.insertAudit(w.Tx, w.head, w.entries)
		if err != nil {
			return err
		}
		if err := w.db.moveHead(w.Tx, head); err != nil {
			return err
		}
	}
	if err := w.writeBumps(); err != nil {
		return err
	}
	return w.writeAlertEvents()
}

// writeBumps adds the batch's changes to each process's counters.
func (w *wtx) writeBumps() error {
	type count struct{ versions, rewrites int64 }
	counts := map[int64]*count{}
	var ids []int64
	for _, b := range w.bumps {
		c := counts[b.processID]
		if c == nil {
			c = &count{}
			counts[b.processID] = c
			ids = append(ids, b.processID)
		}
		c.versions++
		if b.rewrite {
			c.rewrites++
		}
	}
	slices.Sort(ids)
	for _, id := range ids {
		if _, err := w.db.execIn(w.Tx, qBumpVersion, id, counts[id].versions, counts[id].rewrites); err != nil {
			return fmt.Errorf("store: process %d change counter: %w", id, err)
		}
	}
	return nil
}

// AllLotsVersions returns the change counter of every process that has
// one (a process absent from the map has had no write yet: zero).
func (db *DB) AllLotsVersions(ctx context.Context) (map[int64]LotsVersion, error) {
	rows, err := db.r.QueryContext(ctx, "SELECT process_id, version, rewrites FROM lot_versions")
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	out := map[int64]LotsVersion{}
	for rows.Next() {
		var id int64
		var v LotsVersion
		if err := rows.Scan(&id, &v.Version, &v.Rewrites); err != nil {
			return nil, err
		}
		out[id] = v
	}
	return out, rows.Err()
}

// FileSchemaVersion reads the schema version of the database file at
// path without changing it (no migration is applied): what `lotwatch
// version --db` reports beside SchemaVersion.
//
// For a PostgreSQL URL it reads the database's schema_migrations (0 for
// a database lotwatch has not used yet).
func FileSchemaVersion(ctx context.Context, path string) (int, error) {
	if IsURL(path) {
		return postgresSchemaVersion(ctx, path)
	}
	if _, err := os.Stat(path); err != nil {
		return 0, fmt.Errorf("store: %w", err)
	}
	f, err := sql.Open("sqlite3", dsn(path, "mode=ro&_query_only=1"))
	if err != nil {
		return 0, err
	}
	defer f.Close()
	var v int
	if err := f.QueryRowContext(ctx, "SELECT COALESCE(MAX(version), 0) FROM schema_migrations").Scan(&v); err != nil {
		return 0, fmt.Errorf("store: %s is not a lotwatch database: %w", path, err)
	}
	return v, nil
}

// SchemaVersionFor is the schema version this build writes in the
// database db names: SchemaVersion for a file, the number of PostgreSQL
// migrations for a URL.
func SchemaVersionFor(db string) int {
	if !IsURL(db) {
		return SchemaVersion()
	}
	ms, _ := migrationsOf(postgresDialect)
	return len(ms)
}

func postgresSchemaVersion(ctx context.Context, raw string) (int, error) {
	db, err := rawPostgres(raw)
	if err != nil {
		return 0, err
	}
	defer db.Close()
	var exists bool
	if err := db.QueryRowContext(ctx, "SELECT to_regclass('schema_migrations') IS NOT NULL").Scan(&exists); err != nil {
		return 0, fmt.Errorf("store: %s: %w: %w", Redact(raw), ErrUnreachable, scrub(err, secretsOf(raw)))
	}
	if !exists {
		return 0, nil
	}
	var v int
	if err := db.QueryRowContext(ctx, "SELECT COALESCE(MAX(version), 0) FROM schema_migrations").Scan(&v); err != nil {
		return 0, scrub(err, secretsOf(raw))
	}
	return v, nil
}

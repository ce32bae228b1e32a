package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"time"
)

// copyTables are the tables of a plant's record in an order that keeps
// every reference pointing backwards. audit_head is copied after them
// (one row), schema_migrations never (each database records its own),
// nor the counts of failed sign-ins (signinTables: no part of the record).
var copyTables = []string{"users", "sessions", "tokens", "processes", "lots", "lot_revisions", "lot_versions",
	"limit_sets", "annotations", "audit", "alert_rules", "alert_events", "alert_batches", "alert_deliveries", "alert_attempts",
	"plant_settings"}

// ErrNotEmpty is returned by Copy when the destination holds a record.
var ErrNotEmpty = errors.New("the destination database is not empty")

// Copy copies the whole record of the store src (processes, lots and their
// revisions, limit sets, annotations, users, tokens, sessions, alerts,
// plant settings and the audit trail with its head, every row with its
// id) into dst, which must be empty, in one transaction of dst's writer,
// from one snapshot of src. It then checks dst's audit trail and returns
// the check; a copy whose check fails is reported as an error.
func Copy(ctx context.Context, src, dst *DB) (AuditCheck, error) {
	return copyRecord(ctx, src, dst, func(w *wtx) error { return mustBeEmpty(w.Tx, dst.path) })
}

// copyRecord is Copy with prepare run first in dst's transaction (to
// refuse, or to clear dst).
func copyRecord(ctx context.Context, src, dst *DB, prepare func(*wtx) error) (AuditCheck, error) {
	rtx, err := src.r.BeginTx(ctx, &sql.TxOptions{ReadOnly: true, Isolation: src.d.snapshot})
	if err != nil {
		return AuditCheck{}, err
	}
	defer rtx.Rollback()
	if err := knowsEveryTable(ctx, rtx, src.d); err != nil {
		return AuditCheck{}, fmt.Errorf("store: copy from %s: %w", src.path, err)
	}
	var head chainHead
	if err := rtx.QueryRowContext(ctx, qHeadSelect).Scan(&head.seq, &head.hash); err != nil {
		return AuditCheck{}, err
	}
	err = dst.write(ctx, func(w *wtx) error {
		if err := prepare(w); err != nil {
			return err
		}
		if err := copyRows(ctx, rtx, w.Tx, dst.d); err != nil {
			return err
		}
		if _, err := w.Exec(qHeadUpdate, head.seq, head.hash); err != nil {
			return err
		}
		w.head = head // the batch's entries go on from the copied trail
		return nil
	})
	if err != nil {
		return AuditCheck{}, fmt.Errorf("store: copy to %s: %w", dst.path, err)
	}
	chk, err := dst.VerifyAudit(ctx)
	if err == nil && !chk.OK {
		err = fmt.Errorf("store: copy to %s: the copy's audit check failed at entry %d: %s", dst.path, chk.FirstBroken, chk.Why)
	}
	return chk, err
}

// knowsEveryTable refuses a database with a table Copy would not copy, so
// that a copy never leaves part of a record behind unnoticed.
func knowsEveryTable(ctx context.Context, tx *sql.Tx, d *dialect) error {
	rows, err := tx.QueryContext(ctx, d.tables)
	if err != nil {
		return err
	}
	defer rows.Close()
	known := map[string]bool{"audit_head": true, "schema_migrations": true}
	for _, t := range signinTables {
		known[t] = true
	}
	for _, t := range copyTables {
		known[t] = true
	}
	for rows.Next() {
		var name string
		if err := rows.Scan(&name); err != nil {
			return err
		}
		if !known[name] {
			return fmt.Errorf("table %s is unknown to this lotwatch's copy: nothing was copied", name)
		}
	}
	return rows.Err()
}

// mustBeEmpty refuses a destination with any row of a record.
func mustBeEmpty(tx *sql.Tx, name string) error {
	for _, t := range copyTables {
		var n int
		if err := tx.QueryRow("SELECT COUNT(*) FROM (SELECT 1 FROM " + t + " LIMIT 1) AS x").Scan(&n); err != nil {
			return err
		}
		if n > 0 {
			return fmt.Errorf("%s: table %s has rows: %w", name, t, ErrNotEmpty)
		}
	}
	var seq int64
	if err := tx.QueryRow("SELECT seq FROM audit_head WHERE id = 1").Scan(&seq); err != nil {
		return err
	}
	if seq != 0 {
		return fmt.Errorf("%s: its audit trail has %d entries: %w", name, seq, ErrNotEmpty)
	}
	return nil
}

// copyRows copies every row of copyTables from src to dst with the
// columns src has, then lets dst's id counters go on after the copied ids.
func copyRows(ctx context.Context, src, dst *sql.Tx, d *dialect) error {
	for _, t := range copyTables {
		cols, err := copyTable(ctx, src, dst, t)
		if err != nil {
			return fmt.Errorf("table %s: %w", t, err)
		}
		if d.afterCopy != "" && len(cols) > 0 && cols[0] == "id" {
			if _, err := dst.ExecContext(ctx, strings.ReplaceAll(d.afterCopy, "TABLE", t)); err != nil {
				return fmt.Errorf("table %s: %w", t, err)
			}
		}
	}
	return nil
}

// copyTable copies the rows of table and returns its columns.
func copyTable(ctx context.Context, src, dst *sql.Tx, table string) ([]string, error) {
	rows, err := src.QueryContext(ctx, "SELECT * FROM "+table)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	cols, err := rows.Columns()
	if err != nil {
		return nil, err
	}
	ins, err := dst.PrepareContext(ctx, "INSERT INTO "+table+" ("+strings.Join(cols, ", ")+") VALUES (?"+strings.Repeat(", ?", len(cols)-1)+")")
	if err != nil {
		return nil, err
	}
	defer ins.Close()
	vals := make([]any, len(cols))
	ptrs := make([]any, len(cols))
	for i := range vals {
		ptrs[i] = &vals[i]
	}
	for rows.Next() {
		if err := rows.Scan(ptrs...); err != nil {
			return nil, err
		}
		if _, err := ins.ExecContext(ctx, vals...); err != nil {
			return nil, err
		}
	}
	return cols, rows.Err()
}

// CopyDatabase opens the databases from and to (each a file or a URL),
// copies from into to (see Copy) and closes both.
func CopyDatabase(ctx context.Context, from, to string) (AuditCheck, error) {
	src, err := Open(from)
	if err != nil {
		return AuditCheck{}, err
	}
	defer src.Close()
	dst, err := Open(to)
	if err != nil {
		return AuditCheck{}, err
	}
	chk, err := Copy(ctx, src, dst)
	return chk, errors.Join(err, dst.Close())
}

// backupToFile writes the record of db (a PostgreSQL database) as a new
// SQLite file at dest: copied into a temporary file beside it, made one
// self-contained file (rollback journal), synced and renamed into place.
func (db *DB) backupToFile(ctx context.Context, dest string) error {
	lock, err := lockIfDatabase(dest)
	if err != nil {
		return err
	}
	defer lock.release()
	tmp := dest + ".part"
	for _, f := range []string{tmp, tmp + "-wal", tmp + "-shm", tmp + ".lock"} {
		os.Remove(f)
	}
	defer os.Remove(tmp + ".lock")
	out, err := Open(tmp)
	if err != nil {
		return err
	}
	if _, err := Copy(ctx, db, out); err != nil {
		out.Close()
		os.Remove(tmp)
		return fmt.Errorf("store: backup to %s: %w", dest, err)
	}
	if err := out.Close(); err != nil {
		return err
	}
	f, err := sql.Open("sqlite3", dsn(tmp, ""))
	if err != nil {
		return err
	}
	var mode string
	err = f.QueryRowContext(ctx, "PRAGMA journal_mode = DELETE").Scan(&mode)
	f.Close()
	if err != nil || mode != "delete" {
		os.Remove(tmp)
		return fmt.Errorf("store: backup to %s: journal mode %q: %v", dest, mode, err)
	}
	if err := syncFile(tmp); err != nil {
		return err
	}
	if err := os.Rename(tmp, dest); err != nil {
		return fmt.Errorf("store: backup: %w", err)
	}
	return syncDir(filepath.Dir(dest))
}

// restorePostgres replaces the record of the PostgreSQL database at url
// with the backup file from (already checked by the caller with
// CheckFile), in one transaction. It is refused with ErrInUse while any
// other session is connected to the database (a running server, another
// command), as a restore of a file is refused while a program has it
// open. A record it replaces is first written as a SQLite file beside
// the backup, named in kept.
func restorePostgres(ctx context.Context, url, from string) (kept string, err error) {
	dir, err := os.MkdirTemp("", "lotwatch-restore")
	if err != nil {
		return "", err
	}
	defer os.RemoveAll(dir)
	// The backup is read through a copy, so that a backup of an earlier
	// lotwatch is migrated there and the file itself stays as it was.
	tmp := filepath.Join(dir, "backup.db")
	if err := copyFile(from, tmp); err != nil {
		return "", err
	}
	src, err := Open(tmp)
	if err != nil {
		return "", err
	}
	defer src.Close()
	app := fmt.Sprintf("lotwatch restore %d-%d", os.Getpid(), time.Now().UnixNano())
	dst, err := openPostgresAs(url, app)
	if err != nil {
		return "", err
	}
	defer dst.Close()
	others := func(q interface {
		QueryRowContext(context.Context, string, ...any) *sql.Row
	}) error {
		var n int
		if err := q.QueryRowContext(ctx, "SELECT COUNT(*) FROM pg_stat_activity WHERE datname = current_database() AND application_name <> ?", app).Scan(&n); err != nil {
			return err
		}
		if n > 0 {
			return fmt.Errorf("store: %s: %d other sessions are connected to the database: %w", dst.path, n, ErrInUse)
		}
		return nil
	}
	if err := others(dst.r); err != nil {
		return "", err
	}
	var seq int64
	if err := dst.r.QueryRowContext(ctx, "SELECT seq FROM audit_head WHERE id = 1").Scan(&seq); err != nil {
		return "", err
	}
	if seq > 0 {
		kept = filepath.Join(filepath.Dir(from), "before-restore-"+time.Now().UTC().Format("20060102T150405Z")+".db")
		if err := dst.backupToFile(ctx, kept); err != nil {
			return "", err
		}
	}
	_, err = copyRecord(ctx, src, dst, func(w *wtx) error {
		if err := others(w.Tx); err != nil {
			return err
		}
		if _, err := w.Exec("TRUNCATE " + strings.Join(copyTables, ", ") + " RESTART IDENTITY"); err != nil {
			return err
		}
		_, err := w.Exec(qHeadUpdate, 0, "")
		return err
	})
	return kept, err
}

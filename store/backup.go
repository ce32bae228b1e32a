package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"time"

	"github.com/mattn/go-sqlite3"
)

// Backup writes a consistent copy of the database to dest with SQLite's
// online backup API while the store keeps serving: the copy is one
// snapshot (a read transaction in WAL mode, so writers go on), written to
// a temporary file beside dest, synced and renamed into place. Writing
// over a database that a store has open (dest is a live database) is
// refused with ErrInUse.
//
// A PostgreSQL database is backed up as a SQLite file with the same
// record (see Copy), from one snapshot, so that a backup opens anywhere.
func (db *DB) Backup(ctx context.Context, dest string) error {
	if db.d == postgresDialect {
		return db.backupToFile(ctx, dest)
	}
	lock, err := lockIfDatabase(dest)
	if err != nil {
		return err
	}
	defer lock.release()
	tmp := dest + ".part"
	os.Remove(tmp)
	if err := createPrivate(tmp); err != nil {
		return err
	}
	dst, err := sql.Open("sqlite3", dsn(tmp, "_journal_mode=DELETE&_synchronous=FULL"))
	if err != nil {
		return err
	}
	defer dst.Close()
	dconn, err := dst.Conn(ctx)
	if err != nil {
		return fmt.Errorf("store: backup to %s: %w", dest, err)
	}
	defer dconn.Close()
	sconn, err := db.r.Conn(ctx)
	if err != nil {
		return err
	}
	defer sconn.Close()
	err = dconn.Raw(func(dc any) error {
		return sconn.Raw(func(sc any) error {
			d, ok1 := dc.(*sqlite3.SQLiteConn)
			s, ok2 := sc.(*sqlite3.SQLiteConn)
			if !ok1 || !ok2 {
				return errors.New("store: backup: not a SQLite connection")
			}
			b, err := d.Backup("main", s, "main")
			if err != nil {
				return err
			}
			// One step copies all pages under one read snapshot; in WAL mode
			// writers are not blocked meanwhile.
			if _, err := b.Step(-1); err != nil {
				b.Finish()
				return err
			}
			return b.Finish()
		})
	})
	if err == nil {
		// The copy has the live file's WAL header; make it one
		// self-contained file that opens on read-only media.
		var mode string
		if err = dconn.QueryRowContext(ctx, "PRAGMA journal_mode = DELETE").Scan(&mode); err == nil && mode != "delete" {
			err = fmt.Errorf("journal mode %s, want delete", mode)
		}
	}
	if err != nil {
		os.Remove(tmp)
		return fmt.Errorf("store: backup to %s: %w", dest, err)
	}
	dconn.Close()
	dst.Close()
	if err := syncFile(tmp); err != nil {
		return err
	}
	if err := os.Rename(tmp, dest); err != nil {
		return fmt.Errorf("store: backup: %w", err)
	}
	return syncDir(filepath.Dir(dest))
}

func syncFile(path string) error {
	f, err := os.OpenFile(path, os.O_RDWR, 0)
	if err != nil {
		return err
	}
	defer f.Close()
	return f.Sync()
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	defer d.Close()
	d.Sync() // not every file system syncs directories; the rename is done either way
	return nil
}

// CheckFile checks a database file without changing it, nor writing
// anything beside it (it may lie on read-only media): PRAGMA
// integrity_check must say ok, the schema must not be newer than this
// lotwatch, and the audit chain must hold.
func CheckFile(ctx context.Context, path string) (AuditCheck, error) {
	if _, err := os.Stat(path); err != nil {
		return AuditCheck{}, fmt.Errorf("store: %w", err)
	}
	if err := noLiveLog(path); err != nil {
		return AuditCheck{}, err
	}
	f, err := sql.Open("sqlite3", dsn(path, readOnlyParams(path, true)))
	if err != nil {
		return AuditCheck{}, err
	}
	defer f.Close()
	var ic string
	if err := f.QueryRowContext(ctx, "PRAGMA integrity_check").Scan(&ic); err != nil {
		return AuditCheck{}, fmt.Errorf("store: %s is not a readable SQLite database: %w", path, err)
	}
	if ic != "ok" {
		return AuditCheck{}, fmt.Errorf("store: %s fails the integrity check: %s", path, ic)
	}
	var v int
	if err := f.QueryRowContext(ctx, "SELECT COALESCE(MAX(version), 0) FROM schema_migrations").Scan(&v); err != nil {
		return AuditCheck{}, fmt.Errorf("store: %s is not a lotwatch database: %w", path, err)
	}
	if v > SchemaVersion() {
		return AuditCheck{}, fmt.Errorf("store: %s has schema version %d, newer than this lotwatch (%d): %w", path, v, SchemaVersion(), ErrNewerSchema)
	}
	return verifyAudit(ctx, f, sql.LevelDefault)
}

// Restore replaces the database at path with the backup file from, after
// checking the backup (CheckFile); nothing is replaced when the check
// fails. No store may have path open (stop the server first). The
// database being replaced is kept beside it as path + ".before-restore-"
// + a timestamp, and the backup is copied to a temporary file, synced and
// renamed over path, so a crash leaves either the old or the new file.
//
// A PostgreSQL database (path is a URL) is restored by restorePostgres.
func Restore(ctx context.Context, path, from string) (kept string, err error) {
	if IsURL(path) {
		return restorePostgres(ctx, path, from)
	}
	lock, err := lockExclusive(path)
	if err != nil {
		return "", err
	}
	defer lock.release()
	// A backup that a store has open may change while it is copied.
	src, err := lockIfDatabase(from)
	if err != nil {
		return "", err
	}
	defer src.release()
	chk, err := CheckFile(ctx, from)
	if err != nil {
		return "", err
	}
	if !chk.OK {
		return "", fmt.Errorf("store: %s: audit chain broken at entry %d: %s", from, chk.FirstBroken, chk.Why)
	}
	tmp := path + ".restore-part"
	if err := copyFile(from, tmp); err != nil {
		return "", err
	}
	if _, err := os.Stat(path); err == nil {
		// Fold the WAL into the old file so that it is whole on its own.
		old, err := sql.Open("sqlite3", dsn(path, "_journal_mode=WAL"))
		if err != nil {
			return "", err
		}
		var busy, logged, done int
		if err := old.QueryRowContext(ctx, "PRAGMA wal_checkpoint(TRUNCATE)").Scan(&busy, &logged, &done); err != nil || busy != 0 {
			old.Close()
			return "", fmt.Errorf("store: %s is in use (stop the server before restoring): busy %d: %v", path, busy, err)
		}
		old.Close()
		kept = path + ".before-restore-" + time.Now().UTC().Format("20060102T150405Z")
		if err := os.Link(path, kept); err != nil {
			if err := copyFile(path, kept); err != nil {
				return "", err
			}
		}
		os.Chmod(kept, 0o600) // an earlier lotwatch made databases 0644

	}
	if err := os.Rename(tmp, path); err != nil {
		return kept, err
	}
	os.Remove(path + "-wal")
	os.Remove(path + "-shm")
	return kept, syncDir(filepath.Dir(path))
}

func copyFile(from, to string) error {
	src, err := os.Open(from)
	if err != nil {
		return err
	}
	defer src.Close()
	os.Remove(to)
	dst, err := os.OpenFile(to, os.O_CREATE|os.O_EXCL|os.O_WRONLY, 0o600)
	if err != nil {
		return err
	}
	if err := dst.Chmod(0o600); err != nil {
		dst.Close()
		return err
	}
	if _, err := dst.ReadFrom(src); err != nil {
		dst.Close()
		return err
	}
	if err := dst.Sync(); err != nil {
		dst.Close()
		return err
	}
	return dst.Close()
}

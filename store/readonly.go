package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"syscall"
	"time"
)

// ErrReadOnly is returned by every change to a database opened read-only.
var ErrReadOnly = errors.New("database is read-only")

// ReadOnly reports whether the database was opened read-only: Open does
// so when the file, or the folder its journal would go in, cannot be
// written (read-only media, a file the user may only read). Everything is
// read as usual; every change is refused with ErrReadOnly, and sign-in
// sessions are kept in memory for as long as the store is open.
func (db *DB) ReadOnly() bool { return db.readOnly }

// writable reports whether a database that exists at path can be written
// with its journal beside it. access(2) also answers for read-only
// mounts, where file modes say nothing (a root user may write any mode).
func writable(path string) bool {
	const w = 2 // W_OK
	return syscall.Access(path, w) == nil && syscall.Access(filepath.Dir(path), w) == nil
}

// noLiveLog refuses a database with a write-ahead log beside it that the
// read-only opening would not see: its last commits may be in the log.
func noLiveLog(path string) error {
	if st, err := os.Stat(path + "-wal"); err == nil && st.Size() > 0 {
		return fmt.Errorf("store: %s has a write-ahead log beside it (%s) holding changes not yet in the file: it is a live database, not a closed copy; open it once where it can be written, or copy it with lotwatch backup", path, filepath.Base(path)+"-wal")
	}
	return nil
}

// readOnlyParams opens a checked or read-only file without writing
// anything beside it: immutable (no locks, no -shm), as SQLite's URI
// parameter "immutable" documents for read-only media, always when
// immutable is set and else when the folder cannot be written.
func readOnlyParams(path string, immutable bool) string {
	p := "mode=ro&_query_only=1&_foreign_keys=on&_cache_size=-16384"
	if immutable || !writable(path) {
		p += "&immutable=1"
	}
	return p
}

// openReadOnly opens a database that cannot be written: see ReadOnly. It
// must have this lotwatch's schema (an older one cannot be upgraded
// where it lies).
func openReadOnly(path string) (*DB, error) {
	if err := noLiveLog(path); err != nil {
		return nil, err
	}
	r, err := sql.Open("sqlite3", dsn(path, readOnlyParams(path, false)))
	if err != nil {
		return nil, fmt.Errorf("store: open %s: %w", path, err)
	}
	r.SetMaxOpenConns(8)
	r.SetMaxIdleConns(8)
	var v int
	if err := r.QueryRow("SELECT COALESCE(MAX(version), 0) FROM schema_migrations").Scan(&v); err != nil {
		r.Close()
		return nil, fmt.Errorf("store: %s (read-only) is not a lotwatch database: %w", path, err)
	}
	switch {
	case v > SchemaVersion():
		r.Close()
		return nil, fmt.Errorf("store: %s has schema version %d but this lotwatch knows only up to %d; use a newer lotwatch: %w", path, v, SchemaVersion(), ErrNewerSchema)
	case v < SchemaVersion():
		r.Close()
		return nil, fmt.Errorf("store: %s is read-only and has schema version %d; this lotwatch needs %d: open it once where it can be written, to upgrade it", path, v, SchemaVersion())
	}
	db := &DB{path: path, d: sqliteDialect, r: r, readOnly: true, jobs: make(chan *job, 1), quit: make(chan struct{}), done: make(chan struct{})}
	if err := checkChain(context.Background(), db.r); err != nil {
		r.Close()
		return nil, fmt.Errorf("store: %s: audit head: %w", path, err)
	}
	go db.writer()
	return db, nil
}

// memSessions are the sign-in sessions of a read-only database, and
// those begun on a full disk; attempts are its failed sign-ins (see
// RecordSignInFailure).
type memSessions struct {
	mu sync.Mutex
	m  map[string]*memSession // by the id's hash

	attempts memAttempts
}

type memSession struct {
	userID         int64
	created, lastS int64
}

func (ms *memSessions) create(hash []byte, userID int64, now time.Time) {
	ms.mu.Lock()
	defer ms.mu.Unlock()
	if ms.m == nil {
		ms.m = map[string]*memSession{}
	}
	ms.m[string(hash)] = &memSession{userID: userID, created: now.UnixNano(), lastS: now.UnixNano()}
}

// get returns the session's user id, created and last-seen times, noting
// it seen at now.
func (ms *memSessions) get(hash []byte, now time.Time) (userID, created, seen int64, ok bool) {
	ms.mu.Lock()
	defer ms.mu.Unlock()
	s := ms.m[string(hash)]
	if s == nil {
		return 0, 0, 0, false
	}
	userID, created, seen = s.userID, s.created, s.lastS
	s.lastS = now.UnixNano()
	return userID, created, seen, true
}

// removeUser ends every session of the user (a new password, a
// deactivation).
func (ms *memSessions) removeUser(userID int64) {
	ms.mu.Lock()
	defer ms.mu.Unlock()
	for k, s := range ms.m {
		if s.userID == userID {
			delete(ms.m, k)
		}
	}
}

func (ms *memSessions) remove(hash []byte) {
	ms.mu.Lock()
	defer ms.mu.Unlock()
	delete(ms.m, string(hash))
}

// memSessionUser is SessionUser for a read-only database.
func (db *DB) memSessionUser(ctx context.Context, h []byte, now time.Time, idle, absolute time.Duration) (User, error) {
	uid, created, seen, ok := db.mem.get(h, now)
	if !ok {
		return User{}, fmt.Errorf("session: %w", ErrNotFound)
	}
	u, err := scanUser(db.r.QueryRowContext(ctx, "SELECT "+userCols+" FROM users WHERE id = ?", uid))
	if errors.Is(err, sql.ErrNoRows) {
		db.mem.remove(h)
		return User{}, fmt.Errorf("session: %w", ErrNotFound)
	}
	if err != nil {
		return User{}, err
	}
	n := now.UnixNano()
	if !u.Active || (idle > 0 && n-seen > int64(idle)) || (absolute > 0 && n-created > int64(absolute)) {
		db.mem.remove(h)
		return User{}, fmt.Errorf("session expired: %w", ErrNotFound)
	}
	return u, nil
}

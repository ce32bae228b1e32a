package store

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"syscall"
)

// ErrInUse is returned when the database file is open in another store
// (a running `lotwatch serve`, or a command) and an operation would
// replace it, or when a restore is replacing it and a store would open it.
var ErrInUse = errors.New("database is in use")

// The lock beside a database: every open store holds a shared lock on
// FILE.lock for as long as it is open, and whatever replaces FILE (a
// restore, a backup written over it) takes the lock exclusively first.
// So a restore cannot pull the file from under a running server, and two
// stores (the server and a command-line import) do not block each other.
// The locks are flock(2) locks: the system drops them when the process
// ends, also by kill -9, so a stale lock file holds nobody up. The lock
// file is left in place on purpose (removing it would let two programs
// lock two different files).

// dbLock is a held lock on a database's lock file.
type dbLock struct{ f *os.File }

func lockPath(path string) string { return path + ".lock" }

// lockShared takes the shared lock of an open store. In a folder where
// the lock file cannot be made (read-only media) it returns a nil lock:
// nothing can replace the database there either.
func lockShared(path string) (*dbLock, error) {
	f, err := os.OpenFile(lockPath(path), os.O_RDWR|os.O_CREATE, 0o600)
	if errors.Is(err, fs.ErrPermission) {
		// Another user's lock file: a handle for reading locks as well.
		f, err = os.Open(lockPath(path))
	}
	if err != nil {
		if errors.Is(err, fs.ErrPermission) || errors.Is(err, fs.ErrNotExist) || errors.Is(err, syscall.EROFS) {
			return nil, nil
		}
		return nil, fmt.Errorf("store: %w", err)
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_SH|syscall.LOCK_NB); err != nil {
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return nil, fmt.Errorf("store: %s is being replaced by a restore; open it when that is done: %w", path, ErrInUse)
		}
		return nil, fmt.Errorf("store: lock %s: %w", lockPath(path), err)
	}
	return &dbLock{f}, nil
}

// lockExclusive takes the lock of whatever replaces the database: it is
// refused with ErrInUse while any store has the file open.
func lockExclusive(path string) (*dbLock, error) {
	f, err := os.OpenFile(lockPath(path), os.O_RDWR|os.O_CREATE, 0o600)
	if errors.Is(err, syscall.EROFS) {
		return nil, nil // read-only media: nothing there can be replaced
	}
	if err != nil {
		return nil, fmt.Errorf("store: %w", err)
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return nil, fmt.Errorf("store: %s is open in another program (a running lotwatch serve, or a command still working); stop it first, nothing was replaced: %w", path, ErrInUse)
		}
		return nil, fmt.Errorf("store: lock %s: %w", lockPath(path), err)
	}
	return &dbLock{f}, nil
}

// lockIfDatabase is lockExclusive for a file that may be a database: a
// backup's destination. Without a lock file no store has ever opened it,
// and none is made.
func lockIfDatabase(path string) (*dbLock, error) {
	if _, err := os.Stat(lockPath(path)); errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	return lockExclusive(path)
}

// createPrivate makes an empty database file readable by its owner only
// (mode 0600 whatever the umask: it will hold password and token hashes)
// when there is none at path; SQLite gives its journal files the mode of
// the database. An existing file is left as it is.
func createPrivate(path string) error {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if errors.Is(err, fs.ErrExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("store: %w", err)
	}
	if err := f.Chmod(0o600); err != nil {
		f.Close()
		return fmt.Errorf("store: %w", err)
	}
	return f.Close()
}

// release gives the lock up; a nil lock is no lock.
func (l *dbLock) release() {
	if l != nil {
		l.f.Close()
	}
}

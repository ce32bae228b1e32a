package store

import (
	"os"
	"path/filepath"
	"syscall"
	"testing"
)

// A database holds bcrypt and token hashes: the database, its journal
// files, its lock file, a backup and a restored file are made readable by
// their owner only, whatever the umask (the probe of issue 12 found them
// 0644 under umask 022).
//
// SQLite only: file modes of the database file.
func TestFilesArePrivate(t *testing.T) {
	old := syscall.Umask(0o022)
	defer syscall.Umask(old)
	dir := t.TempDir()
	path := filepath.Join(dir, "plant.db")
	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddUser(ctx, "t", "ana", RoleAdmin, "a-long-password"); err != nil {
		t.Fatal(err)
	}
	backup := filepath.Join(dir, "copy.db")
	if err := db.Backup(ctx, backup); err != nil {
		t.Fatal(err)
	}
	files := []string{path, path + "-wal", path + "-shm", lockPath(path), backup}
	for _, f := range files {
		checkMode(t, f)
	}
	db.Close()
	kept, err := Restore(ctx, path, backup)
	if err != nil {
		t.Fatal(err)
	}
	checkMode(t, path)
	checkMode(t, kept)
}

func checkMode(t *testing.T, f string) {
	t.Helper()
	st, err := os.Stat(f)
	if err != nil {
		t.Errorf("%s: %v", filepath.Base(f), err)
		return
	}
	if m := st.Mode().Perm(); m != 0o600 {
		t.Errorf("%s has mode %#o, want 0600", filepath.Base(f), m)
	}
}

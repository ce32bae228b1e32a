package store

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"lotwatch/spc"
)

// A backup is one self-contained file: its header says rollback journal
// (bytes 18 and 19 are 1; 2 would be WAL, see "Database File Format",
// sqlite.org/fileformat2.html §1.3.3), and checking it leaves no -wal or
// -shm file beside it.
//
// SQLite only: the journal mode of a SQLite backup file.
func TestBackupIsOneFile(t *testing.T) {
	db, path := openTemp(t)
	addProcess(t, db, "weld", spc.ChartP)
	backup := filepath.Join(filepath.Dir(path), "copy.db")
	if err := db.Backup(ctx, backup); err != nil {
		t.Fatal(err)
	}
	head := make([]byte, 20)
	f, err := os.Open(backup)
	if err != nil {
		t.Fatal(err)
	}
	f.Read(head)
	f.Close()
	if head[18] != 1 || head[19] != 1 {
		t.Errorf("backup header bytes 18-19 = %d %d, want 1 1 (not WAL)", head[18], head[19])
	}
	if chk, err := CheckFile(ctx, backup); err != nil || !chk.OK {
		t.Fatalf("check: %+v %v", chk, err)
	}
	for _, s := range []string{"-wal", "-shm", "-journal"} {
		if _, err := os.Stat(backup + s); err == nil {
			t.Errorf("checking the backup left %s beside it", filepath.Base(backup+s))
		}
	}
}

// A live database with a write-ahead log beside it is not a backup: its
// log may hold committed lots that a copy of the file alone would lose.
//
// SQLite only: a live SQLite file and its WAL.
func TestCheckFileRefusesLiveDatabase(t *testing.T) {
	db, path := openTemp(t)
	addProcess(t, db, "weld", spc.ChartP)
	if _, err := CheckFile(ctx, path); err == nil {
		t.Error("CheckFile of a database with its write-ahead log beside it passed")
	}
}

// readOnlyDir makes dir read-only with a read-only bind mount of itself,
// as read-only media are. Tests run as root, for whom file modes do not
// stop writes; without the right to mount it skips with a message.
func readOnlyDir(t *testing.T, dir string) {
	t.Helper()
	if err := syscall.Mount(dir, dir, "", syscall.MS_BIND, ""); err != nil {
		t.Skipf("cannot bind-mount %s to make it read-only (%v): the read-only checks need root in a mount namespace", dir, err)
	}
	t.Cleanup(func() { syscall.Unmount(dir, syscall.MNT_DETACH) })
	if err := syscall.Mount("", dir, "", syscall.MS_REMOUNT|syscall.MS_BIND|syscall.MS_RDONLY, ""); err != nil {
		t.Skipf("cannot remount %s read-only: %v", dir, err)
	}
	if err := os.WriteFile(filepath.Join(dir, "probe"), nil, 0o600); err == nil {
		t.Fatalf("%s is still writable after the read-only remount", dir)
	}
}

// On read-only media (a read-only mount): a backup is checked and
// restored from; a database is opened read-only, read, exported and
// verified, signs a user in (the session is kept in memory) and refuses
// every change with ErrReadOnly. The probe of issue 12 found "unable to
// open database file" for each of these.
//
// SQLite only: read-only files.
func TestReadOnlyMedia(t *testing.T) {
	media := t.TempDir()
	plant := filepath.Join(media, "plant.db")
	db, err := Open(plant)
	if err != nil {
		t.Fatal(err)
	}
	p := addProcess(t, db, "weld", spc.ChartP)
	if _, err := db.AddUser(ctx, "t", "ana", RoleViewer, "a-long-password"); err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC)
	if _, err := db.AddLots(ctx, "t", p.ID, []LotInput{{Lot: "A1", Time: t0, Inspected: 10, Count: 1}}); err != nil {
		t.Fatal(err)
	}
	backup := filepath.Join(media, "backup.db")
	if err := db.Backup(ctx, backup); err != nil {
		t.Fatal(err)
	}
	db.Close()
	before, _ := os.ReadDir(media)
	readOnlyDir(t, media)

	if chk, err := CheckFile(ctx, backup); err != nil || !chk.OK {
		t.Fatalf("check of a backup on read-only media: %+v %v", chk, err)
	}
	live := filepath.Join(t.TempDir(), "live.db")
	if _, err := Restore(ctx, live, backup); err != nil {
		t.Fatalf("restore from read-only media: %v", err)
	}
	for _, path := range []string{plant, backup} {
		ro, err := Open(path)
		if err != nil {
			t.Fatalf("open %s on read-only media: %v", filepath.Base(path), err)
		}
		if !ro.ReadOnly() {
			t.Errorf("%s: not opened read-only", filepath.Base(path))
		}
		if lots, err := ro.Lots(ctx, p.ID, time.Time{}, time.Time{}); err != nil || len(lots) != 1 {
			t.Errorf("%s: lots %v %v", filepath.Base(path), lots, err)
		}
		if chk, err := ro.VerifyAudit(ctx); err != nil || !chk.OK {
			t.Errorf("%s: verify %+v %v", filepath.Base(path), chk, err)
		}
		var out bytes.Buffer
		if err := ro.Export(ctx, &out, p.ID, ExportOptions{}); err != nil || !bytes.Contains(out.Bytes(), []byte("A1,")) {
			t.Errorf("%s: export %q %v", filepath.Base(path), out.String(), err)
		}
		u, err := ro.Authenticate(ctx, "ana", "a-long-password")
		if err != nil {
			t.Fatalf("%s: sign-in: %v", filepath.Base(path), err)
		}
		sid, err := ro.CreateSession(ctx, u.ID, time.Now())
		if err != nil {
			t.Fatalf("%s: session: %v", filepath.Base(path), err)
		}
		if got, err := ro.SessionUser(ctx, sid, time.Now().Add(2*time.Minute), time.Hour, 0); err != nil || got.Name != "ana" {
			t.Errorf("%s: session user %v %v", filepath.Base(path), got, err)
		}
		if err := ro.DeleteSession(ctx, sid); err != nil {
			t.Errorf("%s: sign-out: %v", filepath.Base(path), err)
		}
		if _, err := ro.SessionUser(ctx, sid, time.Now(), time.Hour, 0); !errors.Is(err, ErrNotFound) {
			t.Errorf("%s: session after sign-out: %v", filepath.Base(path), err)
		}
		if _, err := ro.AddLots(ctx, "t", p.ID, []LotInput{{Lot: "A2", Inspected: 10}}); !errors.Is(err, ErrReadOnly) {
			t.Errorf("%s: add lots: %v, want ErrReadOnly", filepath.Base(path), err)
		}
		if err := ro.Close(); err != nil {
			t.Errorf("%s: close: %v", filepath.Base(path), err)
		}
	}
	after, _ := os.ReadDir(media)
	if len(after) != len(before) {
		t.Errorf("files on the read-only media changed: %v, were %v", names(after), names(before))
	}
}

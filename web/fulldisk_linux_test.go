package web

import (
	"errors"
	"io"
	"log/slog"
	"net/http"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
)

// fullDisk mounts a small tmpfs for a database, or skips the test when
// it may not (mounting needs root, which the tests have in CI). It
// returns the folder and a function that fills the disk to the last byte.
func fullDisk(t *testing.T) (dir string, fill func()) {
	t.Helper()
	storetest.SQLiteOnly(t, "a database file on a full disk")
	dir = t.TempDir()
	if err := syscall.Mount("tmpfs", dir, "tmpfs", 0, "size=8m"); err != nil {
		t.Skipf("cannot mount a small tmpfs to fill (needs root): %v", err)
	}
	t.Cleanup(func() { syscall.Unmount(dir, syscall.MNT_DETACH) })
	fill = func() {
		f, err := os.Create(filepath.Join(dir, "filler"))
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		chunk := make([]byte, 64<<10)
		for len(chunk) > 0 {
			if _, err := f.Write(chunk); err != nil {
				if !errors.Is(err, syscall.ENOSPC) {
					t.Fatal(err)
				}
				chunk = chunk[:len(chunk)/2]
			}
		}
	}
	return dir, fill
}

// TestPagesReadableOnAFullDisk: with the disk full, a signed-in user
// still reads the board, a chart and the API, although the session's
// last-seen time cannot be written (before, every page answered 500), and
// a user can sign in. Writes fail, and work again when space returns.
func TestPagesReadableOnAFullDisk(t *testing.T) {
	dir, fill := fullDisk(t)
	db, err := store.Open(filepath.Join(dir, "lotwatch.db"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	clk := &fakeClock{t: time.Now().Truncate(time.Second)}
	srv, err := NewServer(Config{DB: db, Now: clk.Now, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	e := &testEnv{db: db, srv: srv, h: srv.Handler(), clock: clk, tokens: map[store.Role]string{}}
	ctx := t.Context()
	if _, err := db.AddUser(ctx, "setup", "viewer1", store.RoleViewer, testPassword); err != nil {
		t.Fatal(err)
	}
	if e.tokens[store.RoleViewer], _, err = db.CreateToken(ctx, "setup", "viewer1", "station"); err != nil {
		t.Fatal(err)
	}
	if e.proc, err = db.AddProcess(ctx, "setup", store.Process{Name: "Final visual check", Chart: spc.ChartP,
		Method: spc.MethodSigma, K: 3, Rules: "we", TimeZone: "UTC", Active: true}); err != nil {
		t.Fatal(err)
	}
	e.addLots(t, 40, func(i int) int64 { return int64(i % 5) })
	cookie := e.signIn(t, "viewer1", testPassword)

	fill()
	clk.Advance(5 * time.Minute) // the session's last-seen time is due
	if _, err := db.AddLots(ctx, "setup", e.proc.ID, []store.LotInput{{Lot: "FULL-1", Inspected: 10, Count: 0, Time: clk.Now()}}); err == nil {
		t.Fatal("a lot was stored on a full disk: the disk is not full, the test proves nothing")
	}
	for _, path := range []string{"/", "/processes/" + formatID(e.proc.ID), "/processes/" + formatID(e.proc.ID) + "?period=all&by=day"} {
		if rec := e.do(req{method: "GET", path: path, cookie: cookie}); rec.Code != http.StatusOK {
			t.Errorf("GET %s on a full disk: %d, want 200", path, rec.Code)
		}
	}
	if rec := e.do(req{method: "GET", path: "/api/v1/processes/" + formatID(e.proc.ID) + "/chart", token: e.tokens[store.RoleViewer]}); rec.Code != http.StatusOK {
		t.Errorf("API chart on a full disk: %d, want 200", rec.Code)
	}
	// Signing in works too: the session is kept in memory.
	fresh := e.signIn(t, "viewer1", testPassword)
	if rec := e.do(req{method: "GET", path: "/", cookie: fresh}); rec.Code != http.StatusOK {
		t.Errorf("the board for a session begun on a full disk: %d, want 200", rec.Code)
	}

	// Space returns: the next write works.
	if err := os.Remove(filepath.Join(dir, "filler")); err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddLots(ctx, "setup", e.proc.ID, []store.LotInput{{Lot: "FULL-2", Inspected: 10, Count: 0, Time: clk.Now()}}); err != nil {
		t.Errorf("after space returned: %v", err)
	}
	// A new password ends the sessions kept in memory as well.
	if err := db.SetPassword(ctx, "setup", "viewer1", "another-long-password"); err != nil {
		t.Fatal(err)
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: fresh}); rec.Code != http.StatusSeeOther {
		t.Errorf("a session begun on a full disk outlived a new password: %d, want 303 to sign in", rec.Code)
	}
}

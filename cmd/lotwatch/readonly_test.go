package main

import (
	"context"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"lotwatch/store"
	"lotwatch/store/storetest"
	"lotwatch/web"
)

// readOnlyDir makes dir read-only with a read-only bind mount of itself,
// as read-only media are (tests run as root, for whom file modes do not
// stop writes); without the right to mount it skips with a message.
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

// A database and its backup on read-only media: audit verify and export
// work on both, restore takes the backup, and the database is served
// read-only: a user signs in and reads the chart, a posted lot is refused
// with 503 saying why. (The probe of issue 12 found "unable to open
// database file" for each.)
func TestReadOnlyMediaCommands(t *testing.T) {
	storetest.SQLiteOnly(t, "a database file on read-only media")
	media := t.TempDir()
	plant := filepath.Join(media, "plant.db")
	csv := writeFile(t, t.TempDir(), "lots.csv", "lot,time,inspected,defective\nH1,2025-04-01T07:00:00Z,50,1\nH2,2025-04-01T08:00:00Z,50,2\n")
	for _, args := range [][]string{
		{"import", "--db", plant, "--process", "weld", "--create", "--as", "t", csv},
		{"user", "add", "--db", plant, "--name", "ana", "--role", "inspector", "--as", "t"},
		{"backup", "--db", plant, "--to", filepath.Join(media, "backup.db")},
	} {
		if code, out, errs := runCLI(t, "a-long-password\n", args...); code != exitOK {
			t.Fatalf("%v: %d %s %s", args, code, out, errs)
		}
	}
	code, tok, errs := runCLI(t, "", "token", "create", "--db", plant, "--user", "ana", "--as", "t")
	if code != exitOK {
		t.Fatalf("token create: %s", errs)
	}
	readOnlyDir(t, media)

	for _, f := range []string{"plant.db", "backup.db"} {
		path := filepath.Join(media, f)
		if code, out, errs := runCLI(t, "", "audit", "verify", "--db", path); code != exitOK || !strings.Contains(out, "holds") {
			t.Errorf("audit verify of %s on read-only media: %d %q %q", f, code, out, errs)
		}
		if code, out, errs := runCLI(t, "", "export", "--db", path, "--process", "weld"); code != exitOK || !strings.Contains(out, "H2,") {
			t.Errorf("export of %s on read-only media: %d %q %q", f, code, out, errs)
		}
	}
	live := filepath.Join(t.TempDir(), "live.db")
	if code, out, errs := runCLI(t, "", "restore", "--db", live, "--from", filepath.Join(media, "backup.db")); code != exitOK {
		t.Errorf("restore from read-only media: %d %q %q", code, out, errs)
	}

	db, err := store.Open(plant)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	srv, err := web.NewServer(web.Config{DB: db, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	h := srv.Handler()
	do := func(r *http.Request) *httptest.ResponseRecorder {
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, r)
		return rec
	}
	r := httptest.NewRequest("POST", "http://lotwatch.test/signin", strings.NewReader("name=ana&password=a-long-password"))
	r.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	r.Header.Set("Sec-Fetch-Site", "same-origin")
	rec := do(r)
	if rec.Code != http.StatusSeeOther || len(rec.Result().Cookies()) == 0 {
		t.Fatalf("sign-in on a read-only database: %d %s", rec.Code, rec.Body.String())
	}
	page := httptest.NewRequest("GET", "http://lotwatch.test/processes/1", nil)
	for _, c := range rec.Result().Cookies() {
		page.AddCookie(c)
	}
	if rec := do(page); rec.Code != http.StatusOK || !strings.Contains(rec.Body.String(), "weld") {
		t.Errorf("chart page on a read-only database: %d", rec.Code)
	}
	post := httptest.NewRequest("POST", "http://lotwatch.test/api/v1/processes/1/lots", strings.NewReader(`{"lot":"H3","inspected":5,"defective":0}`))
	post.Header.Set("Authorization", "Bearer "+strings.TrimSpace(tok))
	post.Header.Set("Content-Type", "application/json")
	if rec := do(post); rec.Code != http.StatusServiceUnavailable || !strings.Contains(rec.Body.String(), "read-only") {
		t.Errorf("post to a read-only database: %d %s, want 503 saying it is read-only", rec.Code, rec.Body.String())
	}
	if lots, _ := db.Lots(context.Background(), 1, time.Time{}, time.Time{}); len(lots) != 2 {
		t.Errorf("%d lots, want 2", len(lots))
	}
}

package main

import (
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
	"lotwatch/store/storetest"
	"lotwatch/web"
)

// TestTwoServersShareSignInLimits runs two `lotwatch serve` on one
// PostgreSQL database: five bad passwords for a name, sent from one
// address to the two servers in turn, block the name from that address
// on both (429 with the same kind of Retry-After), as one server alone
// would; another name from the address still signs in. With the counts
// kept by each server for itself neither server would have seen five.
func TestTwoServersShareSignInLimits(t *testing.T) {
	pg := storetest.PostgresSchema(t)
	bin := buildLotwatch(t)
	for _, name := range []string{"eve", "ana"} {
		args := []string{"user", "add", "--db", pg, "--name", name, "--role", "viewer", "--as", "t"}
		if code, out := lotwatchCmd(t, bin, "shared-limits-pass\n", args...); code != exitOK {
			t.Fatalf("%v: %d %s", args, code, out)
		}
	}
	bases, _ := startServers(t, bin, pg, 2)
	signIn := func(base, name, password string) (int, string, string) {
		t.Helper()
		form := url.Values{"name": {name}, "password": {password}}.Encode()
		res, err := noRedirect.Post(base+"/signin", "application/x-www-form-urlencoded", strings.NewReader(form))
		if err != nil {
			t.Fatal(err)
		}
		defer res.Body.Close()
		b, _ := io.ReadAll(res.Body)
		return res.StatusCode, res.Header.Get("Retry-After"), string(b)
	}
	for i := range 5 {
		base := bases[i%2]
		code, _, body := signIn(base, "eve", "wrong-password")
		if code != http.StatusUnauthorized {
			t.Fatalf("wrong password %d to %s: %d, want 401", i+1, base, code)
		}
		if told := strings.Contains(body, "Too many failed attempts"); told != (i == 4) {
			t.Errorf("wrong password %d to %s: told to wait: %v, want %v", i+1, base, told, i == 4)
		}
	}
	for _, base := range bases {
		code, after, _ := signIn(base, "eve", "shared-limits-pass")
		if s, err := strconv.Atoi(after); code != http.StatusTooManyRequests || err != nil || s < 1 || s > 60 {
			t.Errorf("%s, the right password after five failures over both servers: %d Retry-After %q, want 429 and 1 to 60 seconds", base, code, after)
		}
		if code, _, _ := signIn(base, "ana", "shared-limits-pass"); code != http.StatusSeeOther {
			t.Errorf("%s, another name from the same address: %d, want 303", base, code)
		}
	}
}

// TestReadOnlyServerLimitsSignIns: a server of a database on read-only
// media counts failed sign-ins in its memory: five bad passwords for a
// name from one address block it there (429, Retry-After 60), another
// address still signs the user in, and the file is left as it was.
//
// SQLite only: read-only files.
func TestReadOnlyServerLimitsSignIns(t *testing.T) {
	storetest.SQLiteOnly(t, "a database file on read-only media")
	media := t.TempDir()
	plant := filepath.Join(media, "plant.db")
	if code, out, errs := runCLI(t, "a-long-password\n", "user", "add", "--db", plant, "--name", "ana", "--role", "viewer", "--as", "t"); code != exitOK {
		t.Fatalf("user add: %d %s %s", code, out, errs)
	}
	before, err := os.ReadFile(plant)
	if err != nil {
		t.Fatal(err)
	}
	readOnlyDir(t, media)
	db, err := store.Open(plant)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if !db.ReadOnly() {
		t.Fatal("not opened read-only")
	}
	now := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	srv, err := web.NewServer(web.Config{DB: db, Now: func() time.Time { return now }, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	signIn := func(password, addr string) *httptest.ResponseRecorder {
		r := httptest.NewRequest("POST", "http://lotwatch.test/signin", strings.NewReader("name=ana&password="+password))
		r.Header.Set("Content-Type", "application/x-www-form-urlencoded")
		r.Header.Set("Sec-Fetch-Site", "same-origin")
		r.RemoteAddr = addr + ":40000"
		rec := httptest.NewRecorder()
		srv.Handler().ServeHTTP(rec, r)
		return rec
	}
	for i := range 5 {
		if rec := signIn("wrong-password", "10.0.0.1"); rec.Code != http.StatusUnauthorized {
			t.Fatalf("wrong password %d: %d, want 401", i+1, rec.Code)
		}
	}
	if rec := signIn("a-long-password", "10.0.0.1"); rec.Code != http.StatusTooManyRequests || rec.Header().Get("Retry-After") != "60" {
		t.Errorf("the right password from the failing address: %d Retry-After %q, want 429 and 60", rec.Code, rec.Header().Get("Retry-After"))
	}
	if rec := signIn("a-long-password", "10.0.0.2"); rec.Code != http.StatusSeeOther {
		t.Errorf("the right password from another address: %d, want 303", rec.Code)
	}
	if after, _ := os.ReadFile(plant); string(after) != string(before) {
		t.Error("sign-ins changed the read-only file")
	}
}

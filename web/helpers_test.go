package web

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
)

// testPassword is every test user's password.
const testPassword = "quality-first-7"

// testEnv is a server on a real store of the chosen backend (a file in a
// temporary directory, or a schema of its own on PostgreSQL: see
// storetest.DB), with a settable clock, one user and one API token per
// role, and one process.
type testEnv struct {
	t      *testing.T
	db     *store.DB
	dbPath string // the --db value: a file, or a URL with its password
	srv    *Server
	h      http.Handler
	clock  *fakeClock
	tokens map[store.Role]string
	proc   store.Process
}

var roles = []store.Role{store.RoleViewer, store.RoleInspector, store.RoleEngineer, store.RoleAdmin}

func newTestEnv(t testing.TB) *testEnv {
	t.Helper()
	return newTestEnvOn(t, storetest.DB(t))
}

// newTestEnvOn is newTestEnv on the database path (a file or a URL, see
// storetest.Backends).
func newTestEnvOn(t testing.TB, path string) *testEnv {
	t.Helper()
	ctx := context.Background()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	clk := &fakeClock{t: time.Now().Truncate(time.Second)}
	srv, err := NewServer(Config{DB: db, Now: clk.Now, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	e := &testEnv{db: db, dbPath: path, srv: srv, h: srv.Handler(), clock: clk, tokens: map[store.Role]string{}}
	if tt, ok := t.(*testing.T); ok {
		e.t = tt
	}
	for _, r := range roles {
		if _, err := db.AddUser(ctx, "setup", string(r)+"1", r, testPassword); err != nil {
			t.Fatal(err)
		}
		raw, _, err := db.CreateToken(ctx, "setup", string(r)+"1", "test")
		if err != nil {
			t.Fatal(err)
		}
		e.tokens[r] = raw
	}
	e.proc, err = db.AddProcess(ctx, "setup", store.Process{
		Name: "Final visual check", Description: "Line 2 <cosmetic> inspection", Chart: spc.ChartP,
		Method: spc.MethodSigma, K: 3, Rules: "we", Categories: []string{"scratch", "dent"},
		TimeZone: "Europe/Berlin", Active: true,
	})
	if err != nil {
		t.Fatal(err)
	}
	return e
}

// addLots stores lots straight through the store, one hour apart ending
// an hour before the clock.
func (e *testEnv) addLots(t testing.TB, n int, count func(i int) int64) []store.Lot {
	t.Helper()
	in := make([]store.LotInput, n)
	start := e.clock.Now().Add(-time.Duration(n+1) * time.Hour)
	for i := range in {
		in[i] = store.LotInput{Lot: lotCode(i), Time: start.Add(time.Duration(i) * time.Hour), Inspected: 200, Count: count(i)}
	}
	lots, err := e.db.AddLots(context.Background(), "setup", e.proc.ID, in)
	if err != nil {
		t.Fatal(err)
	}
	return lots
}

func lotCode(i int) string { return fmt.Sprintf("L%05d", i) }

// req describes one request.
type req struct {
	method, path, body string
	token              string // Bearer token
	cookie             *http.Cookie
	headers            map[string]string
	form               bool // body is a form
}

func (e *testEnv) do(r req) *httptest.ResponseRecorder {
	var body io.Reader
	if r.body != "" {
		body = strings.NewReader(r.body)
	}
	hr := httptest.NewRequest(r.method, "http://lotwatch.test"+r.path, body)
	if r.form {
		hr.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	} else if r.body != "" {
		hr.Header.Set("Content-Type", "application/json")
	}
	if r.token != "" {
		hr.Header.Set("Authorization", "Bearer "+r.token)
	}
	if r.cookie != nil {
		hr.AddCookie(r.cookie)
	}
	for k, v := range r.headers {
		hr.Header.Set(k, v)
	}
	rec := httptest.NewRecorder()
	e.h.ServeHTTP(rec, hr)
	return rec
}

// signIn signs the user in through the form and returns the session
// cookie.
func (e *testEnv) signIn(t testing.TB, name, password string) *http.Cookie {
	t.Helper()
	rec := e.do(req{method: "POST", path: "/signin", form: true,
		body:    "name=" + name + "&password=" + password,
		headers: map[string]string{"Sec-Fetch-Site": "same-origin"}})
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("sign-in of %s: status %d: %s", name, rec.Code, rec.Body.String())
	}
	for _, c := range rec.Result().Cookies() {
		if c.Name == e.srv.cookieName() && c.Value != "" {
			return c
		}
	}
	t.Fatalf("sign-in of %s set no session cookie", name)
	return nil
}

func decodeJSON[T any](t testing.TB, rec *httptest.ResponseRecorder) T {
	t.Helper()
	var v T
	if err := json.Unmarshal(rec.Body.Bytes(), &v); err != nil {
		t.Fatalf("response is not the JSON expected: %v\n%s", err, rec.Body.String())
	}
	return v
}

func (e *testEnv) lotCount(t testing.TB) int {
	t.Helper()
	lots, err := e.db.Lots(context.Background(), e.proc.ID, time.Time{}, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	return len(lots)
}

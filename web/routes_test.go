package web

import (
	"fmt"
	"net/http"
	"strings"
	"testing"

	"lotwatch/store"
)

// TestRouteRoles checks every route of the table for every role and for
// an anonymous caller. The expected statuses follow the project's role
// model: a viewer reads; an inspector also logs lots; an engineer also
// manages processes and limit sets; an admin also manages users.
func TestRouteRoles(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return int64(4 + i%3) })
	id := fmt.Sprint(e.proc.ID)
	anon := store.Role("anonymous")
	const (
		ok      = http.StatusOK
		created = http.StatusCreated
		see     = http.StatusSeeOther
		bad     = http.StatusBadRequest
		unauth  = http.StatusUnauthorized
		forbid  = http.StatusForbidden
	)
	type want map[store.Role]int
	all := func(anonStatus, status int) want {
		return want{anon: anonStatus, store.RoleViewer: status, store.RoleInspector: status, store.RoleEngineer: status, store.RoleAdmin: status}
	}
	seq := 0
	cases := []struct {
		method, path string
		body         func() string // a fresh body per call
		form         bool
		want         want
	}{
		{"GET", "/static/charts.js", nil, false, all(ok, ok)},
		{"GET", "/static/echarts.min.js", nil, false, all(ok, ok)},
		{"GET", "/healthz", nil, false, all(ok, ok)},
		{"GET", "/signin", nil, false, all(ok, see)}, // signed in: sent on
		{"POST", "/signin", func() string { return "name=&password=" }, true, all(bad, bad)},
		{"GET", "/", nil, false, all(see, ok)},
		{"GET", "/processes/" + id, nil, false, all(see, ok)},
		{"GET", "/password", nil, false, all(see, ok)},
		{"POST", "/password", func() string { return "" }, true, all(see, bad)},
		{"GET", "/api/v1/me", nil, false, all(unauth, ok)},
		{"GET", "/api/v1/processes", nil, false, all(unauth, ok)},
		{"GET", "/api/v1/processes/" + id, nil, false, all(unauth, ok)},
		{"GET", "/api/v1/processes/" + id + "/chart", nil, false, all(unauth, ok)},
		{"GET", "/api/v1/processes/" + id + "/lots", nil, false, all(unauth, ok)},
		{"GET", "/api/v1/processes/" + id + "/signals", nil, false, all(unauth, ok)},
		{"GET", "/api/v1/processes/" + id + "/limits", nil, false, all(unauth, ok)},
		{"POST", "/api/v1/processes/" + id + "/lots", func() string {
			seq++
			return fmt.Sprintf(`{"lot":"R%03d","inspected":100,"defective":2}`, seq)
		}, false, want{anon: unauth, store.RoleViewer: forbid, store.RoleInspector: created, store.RoleEngineer: created, store.RoleAdmin: created}},
		{"GET", "/api/v1/users", nil, false, want{anon: unauth, store.RoleViewer: forbid, store.RoleInspector: forbid, store.RoleEngineer: forbid, store.RoleAdmin: ok}},
		{"POST", "/signout", func() string { return "" }, true, all(see, see)},
	}
	// Every route of the table must be covered here.
	covered := map[string]bool{}
	for _, c := range cases {
		covered[c.method+" "+patternOf(c.path, id)] = true
	}
	for _, rt := range e.srv.routes() {
		if !covered[rt.method+" "+rt.pattern] {
			t.Errorf("route %s %s has no case in the role table", rt.method, rt.pattern)
		}
	}
	for _, c := range cases {
		for _, role := range append([]store.Role{anon}, roles...) {
			r := req{method: c.method, path: c.path, form: c.form, headers: map[string]string{"Sec-Fetch-Site": "same-origin"}}
			if c.body != nil {
				r.body = c.body()
			}
			if role != anon {
				if strings.HasPrefix(c.path, "/api/") {
					r.token = e.tokens[role]
				} else {
					r.cookie = e.signIn(t, string(role)+"1", testPassword)
				}
			}
			rec := e.do(r)
			if got := rec.Code; got != c.want[role] {
				t.Errorf("%s %s as %s: status %d, want %d\n%s", c.method, c.path, role, got, c.want[role], trim(rec.Body.String()))
			}
			if role == anon && rec.Code == http.StatusSeeOther && c.path != "/signout" {
				if loc := rec.Header().Get("Location"); !strings.HasPrefix(loc, "/signin?next=") {
					t.Errorf("%s %s anonymous: redirected to %q, want the sign-in page", c.method, c.path, loc)
				}
			}
			if rec.Code == http.StatusForbidden || rec.Code == http.StatusUnauthorized {
				if strings.HasPrefix(c.path, "/api/") && !strings.Contains(rec.Body.String(), `"error"`) {
					t.Errorf("%s %s as %s: error body is not {\"error\": ...}: %s", c.method, c.path, role, rec.Body.String())
				}
			}
		}
	}
}

// patternOf turns a concrete test path back into its route pattern.
func patternOf(path, id string) string {
	switch {
	case strings.HasPrefix(path, "/static/"):
		return "/static/*"
	}
	return strings.Replace(path, "/"+id, "/{id}", 1)
}

func trim(s string) string {
	if len(s) > 300 {
		return s[:300] + "…"
	}
	return s
}

// TestSessionAuthenticatesAPI: the pages' own scripts may call the API
// with the session cookie.
func TestSessionAuthenticatesAPI(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "inspector1", testPassword)
	rec := e.do(req{method: "GET", path: "/api/v1/me", cookie: c})
	me := decodeJSON[map[string]any](t, rec)
	if rec.Code != 200 || me["name"] != "inspector1" || me["role"] != "inspector" || me["via"] != "session" {
		t.Fatalf("GET /api/v1/me with session: %d %v", rec.Code, me)
	}
	// A bad token is refused even when a good cookie comes along: the
	// token decides.
	rec = e.do(req{method: "GET", path: "/api/v1/me", cookie: c, token: "not-a-token"})
	if rec.Code != http.StatusUnauthorized {
		t.Fatalf("bad token with good cookie: status %d, want 401", rec.Code)
	}
}

func TestNotFound(t *testing.T) {
	e := newTestEnv(t)
	tok := e.tokens[store.RoleViewer]
	for _, c := range []struct {
		path string
		want int
	}{
		{"/api/v1/processes/999999/chart", 404},
		{"/api/v1/processes/999999/lots", 404},
		{"/api/v1/processes/abc/chart", 400},
		{"/api/v1/nothing", 404},
		{"/static/nothing.js", 404},
	} {
		rec := e.do(req{method: "GET", path: c.path, token: tok})
		if rec.Code != c.want {
			t.Errorf("GET %s: status %d, want %d", c.path, rec.Code, c.want)
		}
		if strings.HasPrefix(c.path, "/api/") {
			if m := decodeJSON[map[string]any](t, rec); m["error"] == nil {
				t.Errorf("GET %s: no error field: %v", c.path, m)
			}
		}
	}
}

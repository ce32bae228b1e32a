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
	lots := e.addLots(t, 30, func(i int) int64 { return int64(4 + i%3) })
	id := fmt.Sprint(e.proc.ID)
	lot := fmt.Sprint(lots[1].ID)
	if _, err := e.db.AddUser(t.Context(), "setup", "spare", store.RoleViewer, testPassword); err != nil {
		t.Fatal(err)
	}
	_, spareTok, err := e.db.CreateToken(t.Context(), "setup", "spare", "spare")
	if err != nil {
		t.Fatal(err)
	}
	tok := fmt.Sprint(spareTok.ID)
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
	// least gives status to the roles from min up, forbid below, and sends
	// an anonymous browser to the sign-in page.
	least := func(min store.Role, status int) want {
		w := want{anon: see}
		for _, r := range roles {
			w[r] = forbid
			if r.AtLeast(min) {
				w[r] = status
			}
		}
		return w
	}
	const notFound = http.StatusNotFound
	seq := 0
	fresh := func(format string) func() string {
		return func() string { seq++; return fmt.Sprintf(format, seq) }
	}
	cases := []struct {
		method, path string
		body         func() string // a fresh body per call
		form         bool
		want         want
		pattern      string // the route pattern, when the path does not give it
	}{
		// Pages: the handler ran when the status is not 403 (a 400 or 404
		// comes from the handler itself, after the role check).
		{"GET", "/processes/" + id + "/chart.csv", nil, false, all(see, ok), ""},
		{"GET", "/processes/" + id + "?period=7d&by=shift", nil, false, all(see, ok), "/processes/{id}"},
		{"GET", "/log", nil, false, least(store.RoleInspector, ok), ""},
		{"GET", "/processes/" + id + "/log", nil, false, least(store.RoleInspector, ok), ""},
		{"POST", "/processes/" + id + "/lots", fresh("lot=F%03d&inspected=100&count=2"), true, least(store.RoleInspector, see), ""},
		{"GET", "/lots/" + lot, nil, false, all(see, ok), "/lots/{lot}"},
		{"POST", "/lots/" + lot + "/causes", fresh("cause=cause+%d"), true, least(store.RoleInspector, see), "/lots/{lot}/causes"},
		{"POST", "/lots/" + lot + "/causes/999999/close", func() string { return "action=x" }, true, least(store.RoleInspector, notFound), "/lots/{lot}/causes/{ann}/close"},
		{"POST", "/lots/" + lot + "/correct", fresh("lot=" + lots[1].Lot + "&inspected=200&count=5&reason=recount+%d"), true, least(store.RoleInspector, see), "/lots/{lot}/correct"},
		{"POST", "/lots/" + lot + "/void", func() string { return "reason=" }, true, least(store.RoleInspector, bad), "/lots/{lot}/void"},
		{"GET", "/processes/" + id + "/limits", nil, false, least(store.RoleEngineer, ok), ""},
		{"POST", "/processes/" + id + "/limits", func() string { return "reason=" }, true, least(store.RoleEngineer, bad), ""},
		{"GET", "/processes/" + id + "/settings", nil, false, least(store.RoleEngineer, ok), ""},
		{"POST", "/processes/" + id + "/settings", func() string { return "name=x&reason=" }, true, least(store.RoleEngineer, bad), ""},
		{"GET", "/settings/processes", nil, false, least(store.RoleEngineer, ok), ""},
		{"GET", "/alerts", nil, false, least(store.RoleEngineer, ok), ""},
		{"POST", "/alerts", func() string { return "process=" }, true, least(store.RoleEngineer, bad), ""},
		{"POST", "/alerts/999999/remove", func() string { return "" }, true, least(store.RoleEngineer, notFound), "/alerts/{rule}/remove"},
		{"POST", "/alerts/999999/test", func() string { return "" }, true, least(store.RoleEngineer, notFound), "/alerts/{rule}/test"},
		{"POST", "/settings/processes", fresh("name=Press+%d&chart=c&method=sigma&k=3&rules=we&tz=UTC"), true, least(store.RoleEngineer, see), ""},
		{"POST", "/settings/plant", func() string { return "tz=UTC&reason=" }, true, least(store.RoleEngineer, bad), ""},
		{"GET", "/upload", nil, false, least(store.RoleInspector, ok), ""},
		{"POST", "/upload", func() string { return "process=" + id }, true, least(store.RoleInspector, bad), ""},
		{"POST", "/upload/0123456789abcdef", func() string { return "" }, true, least(store.RoleInspector, notFound), "/upload/{key}"},
		{"GET", "/attention?kind=run_rule", nil, false, all(see, ok), "/attention"},
		{"POST", "/attention/causes", fresh("lot=" + lot + "&cause=cause+%d"), true, least(store.RoleInspector, see), ""},
		{"POST", "/upload/0123456789abcdef/ignore", func() string { return "ignore=x" }, true, least(store.RoleInspector, notFound), "/upload/{key}/ignore"},
		{"POST", "/upload/0123456789abcdef/map", func() string { return "header=x&target=lot" }, true, least(store.RoleEngineer, notFound), "/upload/{key}/map"},
		{"GET", "/review", nil, false, all(see, ok), ""},
		{"GET", "/review/download?format=json", nil, false, all(see, ok), "/review/download"},
		{"GET", "/review/review.css", nil, false, all(ok, ok), ""},
		{"GET", "/plan?process=" + id, nil, false, all(see, ok), "/plan"},
		{"GET", "/admin/users", nil, false, least(store.RoleAdmin, ok), ""},
		{"POST", "/admin/users", fresh("name=new%03d&role=viewer&password=" + testPassword), true, least(store.RoleAdmin, see), ""},
		{"POST", "/admin/users/viewer1/password", func() string { return "password=" }, true, least(store.RoleAdmin, bad), "/admin/users/{name}/password"},
		{"POST", "/admin/users/spare/active", func() string { return "active=1" }, true, least(store.RoleAdmin, see), "/admin/users/{name}/active"},
		{"POST", "/admin/tokens", func() string { return "user=spare&label=station" }, true, least(store.RoleAdmin, ok), ""},
		{"POST", "/admin/tokens/" + tok + "/revoke", func() string { return "" }, true, least(store.RoleAdmin, see), "/admin/tokens/{tok}/revoke"},

		{"GET", "/static/charts.js", nil, false, all(ok, ok), ""},
		{"GET", "/static/echarts.min.js", nil, false, all(ok, ok), ""},
		{"GET", "/healthz", nil, false, all(ok, ok), ""},
		{"GET", "/api/v1/openapi.json", nil, false, all(ok, ok), ""},
		{"GET", "/signin", nil, false, all(ok, see), ""}, // signed in: sent on
		{"POST", "/signin", func() string { return "name=&password=" }, true, all(bad, bad), ""},
		{"GET", "/", nil, false, all(see, ok), ""},
		{"GET", "/processes/" + id, nil, false, all(see, ok), ""},
		{"GET", "/password", nil, false, all(see, ok), ""},
		{"POST", "/password", func() string { return "" }, true, all(see, bad), ""},
		{"GET", "/api/v1/me", nil, false, all(unauth, ok), ""},
		{"GET", "/api/v1/processes", nil, false, all(unauth, ok), ""},
		{"GET", "/api/v1/processes/" + id, nil, false, all(unauth, ok), ""},
		{"GET", "/api/v1/processes/" + id + "/chart", nil, false, all(unauth, ok), ""},
		{"GET", "/api/v1/processes/" + id + "/lots", nil, false, all(unauth, ok), ""},
		{"GET", "/api/v1/processes/" + id + "/signals", nil, false, all(unauth, ok), ""},
		{"GET", "/api/v1/processes/" + id + "/limits", nil, false, all(unauth, ok), ""},
		{"POST", "/api/v1/processes/" + id + "/lots", func() string {
			seq++
			return fmt.Sprintf(`{"lot":"R%03d","inspected":100,"defective":2}`, seq)
		}, false, want{anon: unauth, store.RoleViewer: forbid, store.RoleInspector: created, store.RoleEngineer: created, store.RoleAdmin: created}, ""},
		{"GET", "/api/v1/attention", nil, false, all(unauth, ok), ""},
		{"POST", "/api/v1/processes/" + id + "/lots/" + lots[1].Lot + "/causes", fresh(`{"cause":"cause %d"}`), false,
			want{anon: unauth, store.RoleViewer: forbid, store.RoleInspector: created, store.RoleEngineer: created, store.RoleAdmin: created}, "/api/v1/processes/{id}/lots/{lot}/causes"},
		{"GET", "/api/v1/users", nil, false, want{anon: unauth, store.RoleViewer: forbid, store.RoleInspector: forbid, store.RoleEngineer: forbid, store.RoleAdmin: ok}, ""},
		{"POST", "/signout", func() string { return "" }, true, all(see, see), ""},
	}
	// Every route of the table must be covered here.
	covered := map[string]bool{}
	for _, c := range cases {
		pat := c.pattern
		if pat == "" {
			pat = patternOf(c.path, id)
		}
		covered[c.method+" "+pat] = true
	}
	for _, rt := range e.srv.routes() {
		if !covered[rt.method+" "+rt.pattern] {
			t.Errorf("route %s %s has no case in the role table", rt.method, rt.pattern)
		}
	}
	cookies := map[store.Role]*http.Cookie{}
	for _, c := range cases {
		for _, role := range append([]store.Role{anon}, roles...) {
			r := req{method: c.method, path: c.path, form: c.form, headers: map[string]string{"Sec-Fetch-Site": "same-origin"}}
			if c.body != nil {
				r.body = c.body()
			}
			if role != anon {
				if strings.HasPrefix(c.path, "/api/") {
					r.token = e.tokens[role]
				} else if c.path == "/signout" {
					r.cookie = e.signIn(t, string(role)+"1", testPassword)
				} else {
					if cookies[role] == nil {
						cookies[role] = e.signIn(t, string(role)+"1", testPassword)
					}
					r.cookie = cookies[role]
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

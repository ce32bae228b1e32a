package web

import (
	"context"
	"fmt"
	"net/http"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
)

// authzRoute is the expectation for one route of the table: the least
// role the project's role model gives it, a request that succeeds for a
// caller who may use it, and the status of that success.
//
// The role model (README, DEVELOPERS.md, `lotwatch user -h`): a viewer
// reads charts and reports; an inspector also logs lots; an engineer also
// sets limits, corrects lots and annotates; an admin also manages users
// and processes. Sign-in, static files and the health check are open.
type authzRoute struct {
	min    store.Role // anyone for open routes
	path   string     // with {id} filled in by the test
	body   string     // for POST; "lot" gets a fresh lot object per call
	form   bool
	ok     int // status for a caller who may use the route
	signed int // status for a signed-in caller on an open route, if it differs
}

// authzRoutes must hold every route of Server.routes, keyed "METHOD
// pattern". A route added to the table without an entry here fails
// TestAuthzMatrix, so that nobody ships a route whose access was never
// stated.
var authzRoutes = map[string]authzRoute{
	"GET /static/*":                      {min: anyone, path: "/static/charts.js", ok: 200},
	"GET /signin":                        {min: anyone, path: "/signin", ok: 200, signed: 303},
	"POST /signin":                       {min: anyone, path: "/signin", body: "name=&password=", form: true, ok: 400},
	"GET /healthz":                       {min: anyone, path: "/healthz", ok: 200},
	"POST /signout":                      {min: store.RoleViewer, path: "/signout", form: true, ok: 303},
	"GET /password":                      {min: store.RoleViewer, path: "/password", ok: 200},
	"POST /password":                     {min: store.RoleViewer, path: "/password", body: "current=&new=&confirm=", form: true, ok: 400},
	"GET /":                              {min: store.RoleViewer, path: "/", ok: 200},
	"GET /processes/{id}":                {min: store.RoleViewer, path: "/processes/{id}", ok: 200},
	"GET /api/v1/me":                     {min: store.RoleViewer, path: "/api/v1/me", ok: 200},
	"GET /api/v1/processes":              {min: store.RoleViewer, path: "/api/v1/processes", ok: 200},
	"GET /api/v1/processes/{id}":         {min: store.RoleViewer, path: "/api/v1/processes/{id}", ok: 200},
	"GET /api/v1/processes/{id}/chart":   {min: store.RoleViewer, path: "/api/v1/processes/{id}/chart", ok: 200},
	"GET /api/v1/processes/{id}/lots":    {min: store.RoleViewer, path: "/api/v1/processes/{id}/lots", ok: 200},
	"POST /api/v1/processes/{id}/lots":   {min: store.RoleInspector, path: "/api/v1/processes/{id}/lots", body: "lot", ok: 201},
	"GET /api/v1/processes/{id}/signals": {min: store.RoleViewer, path: "/api/v1/processes/{id}/signals", ok: 200},
	"GET /api/v1/processes/{id}/limits":  {min: store.RoleViewer, path: "/api/v1/processes/{id}/limits", ok: 200},
	"GET /api/v1/users":                  {min: store.RoleAdmin, path: "/api/v1/users", ok: 200},
}

// caller is who makes a request in the matrix.
type caller struct {
	name  string
	role  store.Role // "" for anonymous
	via   string     // "session", "token" or "" (anonymous)
	token string
}

// matrixEnv is a test server with the route table's expectations checked
// and a way to send the matrix's requests.
type matrixEnv struct {
	*testEnv
	seq     int
	cookies map[store.Role]*http.Cookie
}

func (m *matrixEnv) path(rt authzRoute) string {
	return strings.ReplaceAll(rt.path, "{id}", fmt.Sprint(m.proc.ID))
}

func (m *matrixEnv) body(rt authzRoute) string {
	if rt.body == "lot" {
		m.seq++
		return fmt.Sprintf(`{"lot":"AZ%05d","inspected":100,"defective":1}`, m.seq)
	}
	return rt.body
}

// cookie returns a live session of the role, signing in again when a
// route of the matrix (sign-out) ended it.
func (m *matrixEnv) cookie(t *testing.T, role store.Role) *http.Cookie {
	c := m.cookies[role]
	if c != nil {
		if rec := m.do(req{method: "GET", path: "/api/v1/me", cookie: c}); rec.Code == 200 {
			return c
		}
	}
	c = m.signIn(t, string(role)+"1", testPassword)
	m.cookies[role] = c
	return c
}

// send makes the request of rt as who, with extra headers.
func (m *matrixEnv) send(t *testing.T, method string, rt authzRoute, who caller, headers map[string]string) (int, string, string) {
	r := req{method: method, path: m.path(rt), form: rt.form, headers: map[string]string{"Sec-Fetch-Site": "same-origin"}}
	for k, v := range headers {
		r.headers[k] = v
	}
	if method != "GET" && method != "HEAD" {
		r.body = m.body(rt)
	}
	switch who.via {
	case "session":
		r.cookie = m.cookie(t, who.role)
	case "token":
		r.token = who.token
	}
	rec := m.do(r)
	return rec.Code, rec.Header().Get("Location"), rec.Body.String()
}

// expected is the status the role model gives who on rt: the route's
// success status for a caller with at least its role; otherwise 401 for
// the API (a token or sign-in is needed), a redirect to the sign-in page
// for a page, 403 for a signed-in caller below the role. A token
// authenticates the API only: on a page its bearer is anonymous.
func expected(pattern string, rt authzRoute, who caller) int {
	api := strings.HasPrefix(pattern, "/api/")
	anonymous := who.via == "" || (who.via == "token" && !api)
	switch {
	case rt.min == anyone:
		if !anonymous && rt.signed != 0 {
			return rt.signed
		}
		return rt.ok
	case anonymous && api:
		return http.StatusUnauthorized
	case anonymous:
		return http.StatusSeeOther
	case who.role.AtLeast(rt.min):
		return rt.ok
	}
	return http.StatusForbidden
}

func newMatrixEnv(t *testing.T) (*matrixEnv, []caller) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return int64(3 + i%4) })
	m := &matrixEnv{testEnv: e, cookies: map[store.Role]*http.Cookie{}}
	callers := []caller{{name: "anonymous"}}
	for _, r := range roles {
		callers = append(callers, caller{name: string(r) + " (session)", role: r, via: "session"},
			caller{name: string(r) + " (token)", role: r, via: "token", token: e.tokens[r]})
	}
	return m, callers
}

// TestAuthzMatrix sends every route of the server's table, as every
// caller (anonymous, and each role by session and by API token), and
// checks the status against the role model; GET routes are also sent as
// HEAD (answered like GET). Refusals of the API are JSON with an error;
// anonymous page requests are sent to the sign-in page.
func TestAuthzMatrix(t *testing.T) {
	m, callers := newMatrixEnv(t)
	table := m.srv.routes()
	seen := map[string]bool{}
	for _, rt := range table {
		key := rt.method + " " + rt.pattern
		seen[key] = true
		if _, ok := authzRoutes[key]; !ok {
			t.Errorf("route %s has no expectation in authzRoutes: state who may use it", key)
		}
	}
	for key := range authzRoutes {
		if !seen[key] {
			t.Errorf("authzRoutes expects %s, which is not in the route table", key)
		}
	}
	checked := 0
	for _, rt := range table {
		key := rt.method + " " + rt.pattern
		exp, ok := authzRoutes[key]
		if !ok {
			continue
		}
		methods := []string{rt.method}
		if rt.method == "GET" {
			methods = append(methods, "HEAD")
		}
		for _, method := range methods {
			for _, who := range callers {
				want := expected(rt.pattern, exp, who)
				got, loc, body := m.send(t, method, exp, who, nil)
				checked++
				if got != want {
					t.Errorf("%s %s as %s: status %d, want %d\n%s", method, rt.pattern, who.name, got, want, trim(body))
					continue
				}
				if got == http.StatusSeeOther && exp.min != anyone && who.via != "session" && !strings.HasPrefix(loc, "/signin?next=") {
					t.Errorf("%s %s as %s: redirected to %q, want the sign-in page", method, rt.pattern, who.name, loc)
				}
				if (got == 401 || got == 403) && strings.HasPrefix(rt.pattern, "/api/") && method != "HEAD" && !strings.Contains(body, `"error"`) {
					t.Errorf("%s %s as %s: refusal is not a JSON error: %s", method, rt.pattern, who.name, trim(body))
				}
			}
		}
	}
	t.Logf("%d routes × %d callers: %d requests checked", len(table), len(callers), checked)
}

// TestAuthzCrossOrigin: every state-changing route of the table refuses
// a request that a browser marks as coming from another site — by Origin
// or by Sec-Fetch-Site (Fetch Metadata, W3C) — whatever credentials it
// carries, and the refused request changes nothing.
func TestAuthzCrossOrigin(t *testing.T) {
	m, _ := newMatrixEnv(t)
	foreign := []map[string]string{
		{"Origin": "http://evil.example", "Sec-Fetch-Site": ""},
		{"Sec-Fetch-Site": "cross-site"},
		{"Origin": "http://evil.example", "Sec-Fetch-Site": "cross-site"},
		{"Origin": "null", "Sec-Fetch-Site": ""},
	}
	n := 0
	for _, rt := range m.srv.routes() {
		if rt.method == "GET" || rt.method == "HEAD" {
			continue
		}
		exp, ok := authzRoutes[rt.method+" "+rt.pattern]
		if !ok {
			t.Errorf("route %s %s has no expectation in authzRoutes", rt.method, rt.pattern)
			continue
		}
		for _, h := range foreign {
			for _, who := range []caller{{name: "anonymous"}, {name: "admin (session)", role: store.RoleAdmin, via: "session"},
				{name: "admin (token)", role: store.RoleAdmin, via: "token", token: m.tokens[store.RoleAdmin]}} {
				before := m.lotCount(t)
				auditBefore := m.auditOf(t)
				hdr := map[string]string{}
				for k, v := range h {
					hdr[k] = v
				}
				got, _, body := m.send(t, rt.method, exp, who, hdr)
				n++
				if got != http.StatusForbidden {
					t.Errorf("%s %s as %s with %v: status %d, want 403\n%s", rt.method, rt.pattern, who.name, h, got, trim(body))
				}
				if m.lotCount(t) != before || m.auditOf(t) != auditBefore {
					t.Errorf("%s %s as %s with %v changed the store", rt.method, rt.pattern, who.name, h)
				}
			}
		}
	}
	// The admin's session survived every refused sign-out.
	if c := m.cookies[store.RoleAdmin]; c == nil || m.do(req{method: "GET", path: "/", cookie: c}).Code != 200 {
		t.Error("a refused cross-origin request ended the session")
	}
	t.Logf("%d cross-origin requests refused", n)
}

// TestAuthzSessions: a session id that exists before sign-in is never the
// one after it (session fixation, OWASP Session Management Cheat Sheet);
// an expired session is anonymous on every route; a revoked token and the
// token of a disabled user are refused on every API route.
func TestAuthzSessions(t *testing.T) {
	m, _ := newMatrixEnv(t)
	// Fixation: a planted id (valid for another user, or unknown).
	planted := m.signIn(t, "viewer1", testPassword)
	for _, c := range []*http.Cookie{planted, {Name: m.srv.cookieName(), Value: "attacker-chosen-session-id-0123456789abcdef"}} {
		rec := m.do(req{method: "POST", path: "/signin", form: true, cookie: c, headers: sameOrigin(), body: "name=admin1&password=" + testPassword})
		if rec.Code != http.StatusSeeOther {
			t.Fatalf("sign-in: %d", rec.Code)
		}
		var after *http.Cookie
		for _, k := range rec.Result().Cookies() {
			if k.Name == m.srv.cookieName() && k.Value != "" {
				after = k
			}
		}
		if after == nil || after.Value == c.Value {
			t.Fatalf("the session id after sign-in is the one planted before it (%q)", c.Value)
		}
		if m.do(req{method: "GET", path: "/api/v1/me", cookie: c}).Code != http.StatusUnauthorized {
			t.Errorf("the planted id %q still authenticates after the sign-in", c.Value)
		}
		if me := decodeJSON[map[string]any](t, m.do(req{method: "GET", path: "/api/v1/me", cookie: after})); me["name"] != "admin1" {
			t.Errorf("the new session is %v, want admin1", me)
		}
	}

	// Expiry: 31 idle minutes (SessionIdle is 30) make every route treat
	// the cookie as anonymous.
	cookies := map[store.Role]*http.Cookie{}
	for _, r := range roles {
		cookies[r] = m.signIn(t, string(r)+"1", testPassword)
	}
	m.clock.Advance(SessionIdle + time.Minute)
	anon := caller{name: "anonymous"}
	for _, rt := range m.srv.routes() {
		exp, ok := authzRoutes[rt.method+" "+rt.pattern]
		if !ok || exp.min == anyone {
			continue
		}
		for _, r := range roles {
			rq := req{method: rt.method, path: m.path(exp), form: exp.form, cookie: cookies[r], headers: sameOrigin()}
			if rt.method != "GET" {
				rq.body = m.body(exp)
			}
			if got, want := m.do(rq).Code, expected(rt.pattern, exp, anon); got != want {
				t.Errorf("%s %s with the expired session of %s: status %d, want %d", rt.method, rt.pattern, r, got, want)
			}
		}
	}

	// Revoked tokens and disabled users.
	ctx := context.Background()
	for _, r := range roles {
		raw, tok, err := m.db.CreateToken(ctx, "setup", string(r)+"1", "to revoke")
		if err != nil {
			t.Fatal(err)
		}
		if got := m.do(req{method: "GET", path: "/api/v1/me", token: raw}).Code; got != 200 {
			t.Fatalf("fresh token of %s: %d", r, got)
		}
		if err := m.db.RevokeToken(ctx, "setup", tok.ID); err != nil {
			t.Fatal(err)
		}
		m.checkTokenRefused(t, raw, "revoked token of "+string(r))
	}
	if err := m.db.SetUserActive(ctx, "setup", "inspector1", false, "left the plant"); err != nil {
		t.Fatal(err)
	}
	m.checkTokenRefused(t, m.tokens[store.RoleInspector], "token of a disabled user")
	for _, bad := range []string{"Bearer lw_not-a-token", "Bearer ", "Basic YWRtaW4xOnF1YWxpdHktZmlyc3QtNw==", "lw_no-scheme"} {
		rec := m.do(req{method: "GET", path: "/api/v1/me", headers: map[string]string{"Authorization": bad}})
		if rec.Code != http.StatusUnauthorized {
			t.Errorf("Authorization %q: status %d, want 401", bad, rec.Code)
		}
	}
}

// checkTokenRefused: every API route answers 401 with a Bearer challenge
// to the token, and a refused post stores nothing.
func (m *matrixEnv) checkTokenRefused(t *testing.T, raw, what string) {
	t.Helper()
	before := m.lotCount(t)
	for _, rt := range m.srv.routes() {
		exp, ok := authzRoutes[rt.method+" "+rt.pattern]
		if !ok || !strings.HasPrefix(rt.pattern, "/api/") {
			continue
		}
		rq := req{method: rt.method, path: m.path(exp), token: raw}
		if rt.method != "GET" {
			rq.body = m.body(exp)
		}
		rec := m.do(rq)
		if rec.Code != http.StatusUnauthorized || !strings.HasPrefix(rec.Header().Get("WWW-Authenticate"), "Bearer") {
			t.Errorf("%s %s with the %s: status %d (WWW-Authenticate %q), want 401 with a Bearer challenge", rt.method, rt.pattern, what, rec.Code, rec.Header().Get("WWW-Authenticate"))
		}
	}
	if m.lotCount(t) != before {
		t.Errorf("the %s stored lots", what)
	}
}

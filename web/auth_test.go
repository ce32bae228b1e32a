package web

import (
	"context"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"net/url"
	"strconv"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
	"lotwatch/store/storetest"
)

func sameOrigin() map[string]string { return map[string]string{"Sec-Fetch-Site": "same-origin"} }

func TestSessionCookieFlags(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "viewer1", testPassword)
	if !c.HttpOnly || c.SameSite != http.SameSiteLaxMode || c.Path != "/" || c.Secure {
		t.Errorf("cookie %+v: want HttpOnly, SameSite=Lax, Path=/, not Secure over HTTP", c)
	}
	if len(c.Value) < 40 {
		t.Errorf("session id %q is short; want 32 random bytes", c.Value)
	}

	// Under TLS the cookie is Secure and __Host- prefixed.
	db, err := store.Open(storetest.DB(t))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.AddUser(context.Background(), "setup", "kim", store.RoleViewer, testPassword); err != nil {
		t.Fatal(err)
	}
	srv, err := NewServer(Config{DB: db, Secure: true, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	e2 := &testEnv{db: db, srv: srv, h: srv.Handler()}
	c2 := e2.signIn(t, "kim", testPassword)
	if !c2.Secure || !strings.HasPrefix(c2.Name, "__Host-") {
		t.Errorf("secure cookie %+v: want Secure and the __Host- prefix", c2)
	}
	rec := e2.do(req{method: "GET", path: "/signin"})
	if rec.Header().Get("Strict-Transport-Security") == "" {
		t.Error("no HSTS when secure")
	}
}

func TestSignInNewSessionEachTime(t *testing.T) {
	e := newTestEnv(t)
	c1 := e.signIn(t, "viewer1", testPassword)
	// Signing in again with the old cookie issues a new id and ends the
	// old session (no fixation).
	rec := e.do(req{method: "POST", path: "/signin", form: true, cookie: c1, headers: sameOrigin(),
		body: "name=viewer1&password=" + testPassword})
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("second sign-in: %d", rec.Code)
	}
	var c2 *http.Cookie
	for _, c := range rec.Result().Cookies() {
		if c.Name == e.srv.cookieName() {
			c2 = c
		}
	}
	if c2 == nil || c2.Value == c1.Value {
		t.Fatalf("second sign-in kept the session id")
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: c1}); rec.Code != http.StatusSeeOther {
		t.Errorf("old session still works: %d", rec.Code)
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: c2}); rec.Code != http.StatusOK {
		t.Errorf("new session refused: %d", rec.Code)
	}
	// A planted, unknown id is not taken over by sign-in.
	planted := &http.Cookie{Name: e.srv.cookieName(), Value: "planted-by-someone-else"}
	rec = e.do(req{method: "POST", path: "/signin", form: true, cookie: planted, headers: sameOrigin(),
		body: "name=viewer1&password=" + testPassword})
	for _, c := range rec.Result().Cookies() {
		if c.Name == e.srv.cookieName() && c.Value == planted.Value {
			t.Error("sign-in adopted a planted session id")
		}
	}
}

func TestSignInRedirectsOnlyLocally(t *testing.T) {
	e := newTestEnv(t)
	for next, want := range map[string]string{
		"/processes/1":       "/processes/1",
		"//evil.test/":       "/",
		"https://evil.test/": "/",
		"/\\evil.test":       "/",
		"":                   "/",
	} {
		rec := e.do(req{method: "POST", path: "/signin", form: true, headers: sameOrigin(),
			body: "name=viewer1&password=" + testPassword + "&next=" + url.QueryEscape(next)})
		if got := rec.Header().Get("Location"); got != want {
			t.Errorf("next=%q: redirected to %q, want %q", next, got, want)
		}
	}
}

func TestSessionExpiry(t *testing.T) {
	e := newTestEnv(t)
	// Idle expiry: 30 minutes without a request.
	c := e.signIn(t, "viewer1", testPassword)
	e.clock.Advance(29 * time.Minute)
	if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != 200 {
		t.Fatalf("after 29 idle minutes: %d, want 200", rec.Code)
	}
	e.clock.Advance(29 * time.Minute) // activity above reset the idle clock
	if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != 200 {
		t.Fatalf("29 minutes after the last request: %d, want 200", rec.Code)
	}
	e.clock.Advance(31 * time.Minute)
	if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != http.StatusSeeOther {
		t.Fatalf("after 31 idle minutes: %d, want a redirect to sign-in", rec.Code)
	}
	if rec := e.do(req{method: "GET", path: "/api/v1/me", cookie: c}); rec.Code != http.StatusUnauthorized {
		t.Fatalf("API with an expired session: %d, want 401", rec.Code)
	}
	// Absolute expiry: 12 hours after sign-in, however busy.
	c = e.signIn(t, "viewer1", testPassword)
	for elapsed := time.Duration(0); elapsed < 12*time.Hour-20*time.Minute; elapsed += 20 * time.Minute {
		e.clock.Advance(20 * time.Minute)
		if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != 200 {
			t.Fatalf("busy session refused after %v: %d", elapsed+20*time.Minute, rec.Code)
		}
	}
	e.clock.Advance(21 * time.Minute)
	if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != http.StatusSeeOther {
		t.Fatalf("busy session still valid after 12 h: %d", rec.Code)
	}
}

func TestSignOut(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "viewer1", testPassword)
	rec := e.do(req{method: "POST", path: "/signout", cookie: c, headers: sameOrigin()})
	if rec.Code != http.StatusSeeOther || rec.Header().Get("Location") != "/signin" {
		t.Fatalf("sign-out: %d %q", rec.Code, rec.Header().Get("Location"))
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != http.StatusSeeOther {
		t.Errorf("session works after sign-out: %d", rec.Code)
	}
	// Sign-out is a POST: a GET does not sign anyone out.
	c = e.signIn(t, "viewer1", testPassword)
	e.do(req{method: "GET", path: "/signout", cookie: c})
	if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != 200 {
		t.Errorf("GET /signout ended the session: %d", rec.Code)
	}
}

func TestChangePassword(t *testing.T) {
	e := newTestEnv(t)
	here := e.signIn(t, "inspector1", testPassword)
	there := e.signIn(t, "inspector1", testPassword)
	const newPassword = "brand-new-secret-9"
	form := func(cur, n, conf string) string {
		return url.Values{"current": {cur}, "new": {n}, "confirm": {conf}}.Encode()
	}
	for _, c := range []struct {
		body string
		want int
	}{
		{form("wrong-password-1", newPassword, newPassword), http.StatusUnauthorized},
		{form("", newPassword, newPassword), http.StatusBadRequest},
		{form(testPassword, newPassword, newPassword+"x"), http.StatusBadRequest},
		{form(testPassword, "short", "short"), http.StatusBadRequest},
	} {
		rec := e.do(req{method: "POST", path: "/password", form: true, cookie: here, headers: sameOrigin(), body: c.body})
		if rec.Code != c.want {
			t.Errorf("%s: %d, want %d", c.body, rec.Code, c.want)
		}
	}
	if _, err := e.db.Authenticate(t.Context(), "inspector1", testPassword); err != nil {
		t.Fatalf("a refused change altered the password: %v", err)
	}
	rec := e.do(req{method: "POST", path: "/password", form: true, cookie: here, headers: sameOrigin(), body: form(testPassword, newPassword, newPassword)})
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("change: %d %s", rec.Code, rec.Body.String())
	}
	var fresh *http.Cookie
	for _, c := range rec.Result().Cookies() {
		if c.Name == e.srv.cookieName() && c.Value != "" {
			fresh = c
		}
	}
	if fresh == nil {
		t.Fatal("no fresh session after the change")
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: there}); rec.Code != http.StatusSeeOther {
		t.Errorf("the other session survived the change: %d", rec.Code)
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: here}); rec.Code != http.StatusSeeOther {
		t.Errorf("the old id of this browser survived the change: %d", rec.Code)
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: fresh}); rec.Code != 200 {
		t.Errorf("the fresh session is refused: %d", rec.Code)
	}
	if _, err := e.db.Authenticate(t.Context(), "inspector1", newPassword); err != nil {
		t.Errorf("new password does not work: %v", err)
	}
}

// TestAdminEndsSessions: an administrator who resets a user's password
// or deactivates the user ends every session the user has (OWASP Session
// Management Cheat Sheet, from memory: sessions end when credentials change or an
// account is disabled); the user can sign in with the new password, and an
// inactive user cannot.
func TestAdminEndsSessions(t *testing.T) {
	e := newTestEnv(t)
	admin := e.signIn(t, "admin1", testPassword)
	const newPassword = "a new password of the inspector"
	post := func(path, body string) {
		t.Helper()
		rec := e.do(req{method: "POST", path: path, form: true, cookie: admin, headers: sameOrigin(), body: body})
		if rec.Code != http.StatusSeeOther {
			t.Fatalf("%s: status %d %s", path, rec.Code, trim(rec.Body.String()))
		}
	}
	session := e.signIn(t, "inspector1", testPassword)
	post("/admin/users/inspector1/password", url.Values{"password": {newPassword}}.Encode())
	if rec := e.do(req{method: "GET", path: "/", cookie: session}); rec.Code != http.StatusSeeOther {
		t.Errorf("the inspector's session survived the password reset: %d", rec.Code)
	}
	session = e.signIn(t, "inspector1", newPassword)
	post("/admin/users/inspector1/active", url.Values{"active": {"0"}, "reason": {"left the line"}}.Encode())
	if rec := e.do(req{method: "GET", path: "/", cookie: session}); rec.Code != http.StatusSeeOther {
		t.Errorf("the inspector's session survived the deactivation: %d", rec.Code)
	}
	if _, err := e.db.Authenticate(t.Context(), "inspector1", newPassword); err == nil {
		t.Error("an inactive user can still sign in")
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: admin}); rec.Code != http.StatusOK {
		t.Errorf("the administrator's own session ended: %d", rec.Code)
	}
}

func TestSignInRateLimit(t *testing.T) {
	e := newTestEnv(t)
	try := func(name, pw, addr string) *http.Response {
		body := strings.NewReader(url.Values{"name": {name}, "password": {pw}}.Encode())
		r := httptest.NewRequest("POST", "http://lotwatch.test/signin", body)
		r.Header.Set("Content-Type", "application/x-www-form-urlencoded")
		r.Header.Set("Sec-Fetch-Site", "same-origin")
		r.RemoteAddr = addr + ":40000"
		rec := httptest.NewRecorder()
		e.h.ServeHTTP(rec, r)
		return rec.Result()
	}
	// Five wrong passwords for one name from one address …
	for i := range 5 {
		if res := try("viewer1", "wrong-password", "10.0.0.1"); res.StatusCode != http.StatusUnauthorized {
			t.Fatalf("wrong password %d: %d, want 401", i+1, res.StatusCode)
		}
	}
	// … and the next attempt from there is refused even with the right password.
	res := try("viewer1", testPassword, "10.0.0.1")
	if res.StatusCode != http.StatusTooManyRequests || res.Header.Get("Retry-After") != "60" {
		t.Fatalf("6th attempt: %d Retry-After %q, want 429 and 60", res.StatusCode, res.Header.Get("Retry-After"))
	}
	// Other names from other addresses are unaffected.
	if res := try("inspector1", testPassword, "10.0.1.1"); res.StatusCode != http.StatusSeeOther {
		t.Fatalf("another user: %d", res.StatusCode)
	}
	e.clock.Advance(61 * time.Second)
	if res := try("viewer1", testPassword, "10.0.0.1"); res.StatusCode != http.StatusSeeOther {
		t.Fatalf("after the block: %d, want sign-in", res.StatusCode)
	}
	// One address guessing many names is stopped by the address limit.
	for i := range addrAttempts {
		try("nobody"+strconv.Itoa(i), "wrong-password", "10.0.2.2")
	}
	if res := try("admin1", testPassword, "10.0.2.2"); res.StatusCode != http.StatusTooManyRequests {
		t.Fatalf("address over its limit: %d, want 429", res.StatusCode)
	}
}

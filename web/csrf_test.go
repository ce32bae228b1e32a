package web

import (
	"net/http"
	"testing"
)

// TestCrossOriginRefused: state-changing requests that a browser marks as
// coming from another site are refused and change nothing, whatever
// cookie they carry.
func TestCrossOriginRefused(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "inspector1", testPassword)
	foreign := []map[string]string{
		{"Sec-Fetch-Site": "cross-site"},
		{"Sec-Fetch-Site": "same-site"},
		{"Origin": "https://evil.test"},
		{"Origin": "null"},
	}
	for _, h := range foreign {
		before := e.lotCount(t)
		rec := e.do(req{method: "POST", path: lotsPath(e), cookie: c, headers: h, body: `{"lot":"F1","inspected":10,"defective":1}`})
		if rec.Code != http.StatusForbidden {
			t.Errorf("lot post with %v: %d, want 403", h, rec.Code)
		}
		if e.lotCount(t) != before {
			t.Errorf("lot post with %v stored a lot", h)
		}
		rec = e.do(req{method: "POST", path: "/signout", cookie: c, headers: h})
		if rec.Code != http.StatusForbidden {
			t.Errorf("sign-out with %v: %d, want 403", h, rec.Code)
		}
		rec = e.do(req{method: "POST", path: "/password", cookie: c, headers: h, form: true,
			body: "current=" + testPassword + "&new=hijacked-pass-1&confirm=hijacked-pass-1"})
		if rec.Code != http.StatusForbidden {
			t.Errorf("password change with %v: %d, want 403", h, rec.Code)
		}
		rec = e.do(req{method: "POST", path: "/signin", headers: h, form: true, body: "name=viewer1&password=" + testPassword})
		if rec.Code != http.StatusForbidden {
			t.Errorf("sign-in with %v: %d, want 403 (login CSRF)", h, rec.Code)
		}
	}
	if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != 200 {
		t.Errorf("the session was ended by a refused request: %d", rec.Code)
	}
	if _, err := e.db.Authenticate(t.Context(), "inspector1", testPassword); err != nil {
		t.Errorf("the password was changed by a refused request: %v", err)
	}
	// The same requests from the page itself go through.
	rec := e.do(req{method: "POST", path: lotsPath(e), cookie: c, headers: map[string]string{"Origin": "http://lotwatch.test"},
		body: `{"lot":"F1","inspected":10,"defective":1}`})
	if rec.Code != http.StatusCreated {
		t.Errorf("same-origin lot post: %d %s", rec.Code, rec.Body.String())
	}
	// A Bearer-token client sends neither header and passes.
	rec = e.do(req{method: "POST", path: lotsPath(e), token: e.tokens["inspector"], body: `{"lot":"F2","inspected":10,"defective":1}`})
	if rec.Code != http.StatusCreated {
		t.Errorf("token lot post: %d %s", rec.Code, rec.Body.String())
	}
	if e.lotCount(t) != 2 {
		t.Errorf("%d lots stored, want 2", e.lotCount(t))
	}
}

package web

import (
	"bytes"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"net/netip"
	"net/url"
	"strconv"
	"strings"
	"testing"
)

// signInFrom posts the sign-in form as if from addr, with extra headers.
func signInFrom(e *testEnv, name, pw, addr string, headers map[string]string) *httptest.ResponseRecorder {
	body := strings.NewReader(url.Values{"name": {name}, "password": {pw}}.Encode())
	r := httptest.NewRequest("POST", "http://lotwatch.test/signin", body)
	r.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	r.Header.Set("Sec-Fetch-Site", "same-origin")
	for k, v := range headers {
		r.Header.Set(k, v)
	}
	r.RemoteAddr = addr + ":40000"
	rec := httptest.NewRecorder()
	e.h.ServeHTTP(rec, r)
	return rec
}

// TestLongSignInNamesAreNotKept: 50 failed sign-ins with 1 MiB names
// from one address are refused before they are counted or logged: the
// address is not held back, and the log stays small. Before the bound
// each name became a limiter key kept for an hour and a log field (a
// probe grew the server by 750 MB with 8 MB names).
func TestLongSignInNamesAreNotKept(t *testing.T) {
	e := newTestEnv(t)
	var logged bytes.Buffer
	e.srv.log = slog.New(slog.NewTextHandler(&logged, nil))
	long := strings.Repeat("x", 1<<20)
	for i := range 50 {
		rec := signInFrom(e, long+strconv.Itoa(i), "wrong-password", "127.0.0.1", nil)
		if rec.Code != http.StatusBadRequest || !strings.Contains(rec.Body.String(), "64 bytes") {
			t.Fatalf("sign-in %d with a 1 MiB name: %d, want 400 naming the 64-byte bound", i, rec.Code)
		}
		if rec.Body.Len() > 64<<10 {
			t.Fatalf("sign-in %d: the answer is %d bytes; the name must not be echoed", i, rec.Body.Len())
		}
	}
	// Counted, 50 failures would have blocked the address (20 a minute).
	if rec := signInFrom(e, "admin1", testPassword, "127.0.0.1", nil); rec.Code != http.StatusSeeOther {
		t.Errorf("sign-in from the address after 50 long names: %d, want 303 (long names are not counted)", rec.Code)
	}
	if logged.Len() > 4<<10 {
		t.Errorf("50 long-name sign-ins wrote %d bytes of log", logged.Len())
	}
}

// TestFailedSignInsDoNotLockANameForEveryone: five bad passwords from one
// address throttle that address's attempts at the name, not the user
// signing in from elsewhere.
func TestFailedSignInsDoNotLockANameForEveryone(t *testing.T) {
	e := newTestEnv(t)
	for i := range 5 {
		if rec := signInFrom(e, "admin1", "wrong-password", "10.0.0.1", nil); rec.Code != http.StatusUnauthorized {
			t.Fatalf("wrong password %d: %d, want 401", i+1, rec.Code)
		}
	}
	if rec := signInFrom(e, "admin1", testPassword, "10.0.0.2", nil); rec.Code != http.StatusSeeOther {
		t.Fatalf("right password from another address after five failures elsewhere: %d, want 303", rec.Code)
	}
	// The address that failed five times is held back on that name.
	rec := signInFrom(e, "admin1", testPassword, "10.0.0.1", nil)
	if rec.Code != http.StatusTooManyRequests || rec.Header().Get("Retry-After") != "60" {
		t.Fatalf("sixth attempt from the failing address: %d Retry-After %q, want 429 and 60", rec.Code, rec.Header().Get("Retry-After"))
	}
}

// TestSignInBehindTrustedProxy: behind a proxy whose address is trusted,
// the client address is read from X-Forwarded-For, so one user's typos
// do not hold back the others behind the same proxy; from any other
// address the header is ignored, so it cannot be used to dodge the limit.
func TestSignInBehindTrustedProxy(t *testing.T) {
	e := newTestEnv(t)
	e.srv.gate.proxies = []netip.Prefix{netip.MustParsePrefix("10.9.9.9/32")}
	xff := func(v string) map[string]string { return map[string]string{"X-Forwarded-For": v} }
	for range 25 {
		signInFrom(e, "viewer1", "wrong-password", "10.9.9.9", xff("192.168.1.5"))
	}
	if rec := signInFrom(e, "viewer1", "wrong-password", "10.9.9.9", xff("192.168.1.5")); rec.Code != http.StatusTooManyRequests {
		t.Fatalf("the failing client behind the proxy: %d, want 429", rec.Code)
	}
	if rec := signInFrom(e, "inspector1", testPassword, "10.9.9.9", xff("192.168.1.6")); rec.Code != http.StatusSeeOther {
		t.Fatalf("another client behind the same proxy: %d, want 303", rec.Code)
	}
	if rec := signInFrom(e, "viewer1", testPassword, "10.9.9.9", xff("192.168.1.6")); rec.Code != http.StatusSeeOther {
		t.Fatalf("the same user from another client behind the proxy: %d, want 303", rec.Code)
	}
	// A spoofed header from an untrusted address changes nothing.
	for i := range 5 {
		signInFrom(e, "engineer1", "wrong-password", "10.0.0.7", xff("172.16.0."+strconv.Itoa(i)))
	}
	if rec := signInFrom(e, "engineer1", testPassword, "10.0.0.7", xff("172.16.0.99")); rec.Code != http.StatusTooManyRequests {
		t.Fatalf("X-Forwarded-For from an untrusted address was believed: %d, want 429", rec.Code)
	}
}

func TestClientAddr(t *testing.T) {
	proxies := []netip.Prefix{netip.MustParsePrefix("10.9.0.0/16"), netip.MustParsePrefix("::1/128")}
	for _, c := range []struct {
		remote, xff, want string
	}{
		{"192.0.2.1:5000", "", "192.0.2.1"},
		{"192.0.2.1:5000", "198.51.100.7", "192.0.2.1"},                // not a proxy: header ignored
		{"10.9.1.1:5000", "198.51.100.7", "198.51.100.7"},              // one trusted hop
		{"10.9.1.1:5000", "203.0.113.9, 198.51.100.7", "198.51.100.7"}, // the rightmost untrusted hop; the left one is the client's claim
		{"10.9.1.1:5000", "198.51.100.7, 10.9.2.2", "198.51.100.7"},    // two trusted proxies in a row
		{"10.9.1.1:5000", "not-an-address", "10.9.1.1"},                // a garbled header: the proxy itself
		{"10.9.1.1:5000", "", "10.9.1.1"},                              // no header
		{"[::1]:5000", "2001:db8::5", "2001:db8::5"},                   // IPv6
	} {
		r := httptest.NewRequest("GET", "/", nil)
		r.RemoteAddr = c.remote
		if c.xff != "" {
			r.Header.Set("X-Forwarded-For", c.xff)
		}
		if got := clientAddr(r, proxies); got != c.want {
			t.Errorf("remote %s, X-Forwarded-For %q: %q, want %q", c.remote, c.xff, got, c.want)
		}
	}
}

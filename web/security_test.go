package web

import (
	"net/http"
	"net/http/httptest"
	"testing"
	"time"
)

// fakeClock is a settable clock for expiry and rate-limit tests.
type fakeClock struct{ t time.Time }

func (c *fakeClock) Now() time.Time          { return c.t }
func (c *fakeClock) Advance(d time.Duration) { c.t = c.t.Add(d) }

func TestAttemptLimiter(t *testing.T) {
	clk := &fakeClock{t: time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)}
	l := newAttemptLimiter(clk.Now, 5)
	// Five failures a minute block the key for a minute (the project's
	// limit, common practice, no source).
	for i := range 4 {
		if w := l.fail("name:kim"); w != 0 {
			t.Fatalf("failure %d blocked for %v", i+1, w)
		}
		clk.Advance(time.Second)
	}
	if w := l.fail("name:kim"); w != time.Minute {
		t.Fatalf("5th failure: blocked for %v, want 1m", w)
	}
	if w := l.wait("name:kim"); w != time.Minute {
		t.Fatalf("after 5th failure: wait %v, want 1m", w)
	}
	// Other keys are not affected.
	if w := l.wait("name:lee"); w != 0 {
		t.Fatalf("another user name must wait %v", w)
	}
	// Still blocked half-way through, with the remaining wait; the
	// longest wait among the keys counts.
	clk.Advance(30 * time.Second)
	if w := l.wait("name:lee", "name:kim"); w != 30*time.Second {
		t.Fatalf("during block: wait %v, want 30s", w)
	}
	clk.Advance(30 * time.Second)
	if w := l.wait("name:kim"); w != 0 {
		t.Fatalf("after block: wait %v, want 0", w)
	}
	// Failures spread beyond the window do not add up.
	for i := range 8 {
		if w := l.fail("name:ann"); w != 0 {
			t.Fatalf("spread failure %d blocked for %v", i+1, w)
		}
		clk.Advance(16 * time.Second)
	}
	// Being blocked again doubles the block (backoff).
	for range 4 {
		l.fail("name:kim")
	}
	if w := l.fail("name:kim"); w != 2*time.Minute {
		t.Fatalf("second block: %v, want 2m", w)
	}
	// A quiet hour forgets the key: the next block is one minute again.
	clk.Advance(2*time.Minute + time.Hour + time.Second)
	for range 4 {
		l.fail("name:kim")
	}
	if w := l.fail("name:kim"); w != time.Minute {
		t.Fatalf("after forgetting: %v, want 1m (first strike again)", w)
	}
	// reset clears a key at once (successful sign-in).
	l.reset("name:kim")
	if w := l.wait("name:kim"); w != 0 {
		t.Fatalf("after reset: wait %v", w)
	}
}

func TestAttemptLimiterBackoffCap(t *testing.T) {
	clk := &fakeClock{t: time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)}
	l := newAttemptLimiter(clk.Now, 5)
	var last time.Duration
	for range 8 {
		for range 5 {
			last = l.fail("addr:10.0.0.9")
		}
		clk.Advance(last)
	}
	if last != 15*time.Minute {
		t.Fatalf("block after many strikes: %v, want the 15m cap", last)
	}
}

func TestRetryAfter(t *testing.T) {
	for _, c := range []struct {
		d    time.Duration
		want string
	}{{0, "1"}, {time.Millisecond, "1"}, {time.Second, "1"}, {1500 * time.Millisecond, "2"}, {time.Minute, "60"}} {
		if got := retryAfter(c.d); got != c.want {
			t.Errorf("retryAfter(%v) = %q, want %q", c.d, got, c.want)
		}
	}
}

func TestSecurityHeaders(t *testing.T) {
	h := securityHeaders(false, http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {}))
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest("GET", "/", nil))
	// The policy the project requires, word for word.
	want := map[string]string{
		"Content-Security-Policy": "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; object-src 'none'; base-uri 'none'; frame-ancestors 'none'; form-action 'self'",
		"X-Content-Type-Options":  "nosniff",
		"Referrer-Policy":         "same-origin",
		"X-Frame-Options":         "DENY",
	}
	for k, v := range want {
		if got := rec.Header().Get(k); got != v {
			t.Errorf("%s = %q, want %q", k, got, v)
		}
	}
	if got := rec.Header().Get("Strict-Transport-Security"); got != "" {
		t.Errorf("HSTS sent over plain HTTP: %q", got)
	}
	rec = httptest.NewRecorder()
	securityHeaders(true, h).ServeHTTP(rec, httptest.NewRequest("GET", "/", nil))
	if got := rec.Header().Get("Strict-Transport-Security"); got == "" {
		t.Error("no HSTS when secure")
	}
}

func TestCrossOriginGuard(t *testing.T) {
	reached := 0
	deny := func(w http.ResponseWriter, r *http.Request, err error) { w.WriteHeader(statusOf(err)) }
	h := crossOriginGuard(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { reached++ }), deny)
	cases := []struct {
		name    string
		method  string
		headers map[string]string
		want    int
	}{
		{"same-origin fetch", "POST", map[string]string{"Sec-Fetch-Site": "same-origin"}, 200},
		{"typed into address bar", "POST", map[string]string{"Sec-Fetch-Site": "none"}, 200},
		{"no browser headers (API client)", "POST", nil, 200},
		{"same Origin as Host", "POST", map[string]string{"Origin": "http://lotwatch.test"}, 200},
		{"cross-site fetch", "POST", map[string]string{"Sec-Fetch-Site": "cross-site"}, 403},
		{"same-site other origin", "POST", map[string]string{"Sec-Fetch-Site": "same-site"}, 403},
		{"foreign Origin", "POST", map[string]string{"Origin": "http://evil.test"}, 403},
		{"foreign Origin, DELETE", "DELETE", map[string]string{"Origin": "http://evil.test"}, 403},
		{"cross-site GET is harmless", "GET", map[string]string{"Sec-Fetch-Site": "cross-site"}, 200},
	}
	for _, c := range cases {
		reached = 0
		req := httptest.NewRequest(c.method, "http://lotwatch.test/api/v1/processes/1/lots", nil)
		for k, v := range c.headers {
			req.Header.Set(k, v)
		}
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		if rec.Code != c.want {
			t.Errorf("%s: status %d, want %d", c.name, rec.Code, c.want)
		}
		if c.want == 403 && reached != 0 {
			t.Errorf("%s: refused request reached the handler", c.name)
		}
	}
}

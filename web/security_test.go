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
	l := newAttemptLimiter(clk.Now)
	// Five attempts a minute pass (the project's limit, common practice,
	// no source); the sixth is refused for a minute.
	for i := range 5 {
		if ok, _ := l.allow("user:kim"); !ok {
			t.Fatalf("attempt %d refused", i+1)
		}
		clk.Advance(time.Second)
	}
	ok, wait := l.allow("user:kim")
	if ok || wait != time.Minute {
		t.Fatalf("6th attempt: ok=%v wait=%v, want refused for 1m", ok, wait)
	}
	// Other keys are not affected.
	if ok, _ := l.allow("user:lee"); !ok {
		t.Fatal("another user name was refused")
	}
	// Still blocked half-way through, with the remaining wait.
	clk.Advance(30 * time.Second)
	if ok, wait := l.allow("user:kim"); ok || wait != 30*time.Second {
		t.Fatalf("during block: ok=%v wait=%v, want refused for 30s", ok, wait)
	}
	clk.Advance(30 * time.Second)
	for i := range 5 {
		if ok, _ := l.allow("user:kim"); !ok {
			t.Fatalf("after block, attempt %d refused", i+1)
		}
	}
	// Going over again doubles the block (backoff).
	if ok, wait := l.allow("user:kim"); ok || wait != 2*time.Minute {
		t.Fatalf("second block: ok=%v wait=%v, want 2m", ok, wait)
	}
	// A quiet hour forgets the key.
	clk.Advance(2*time.Minute + time.Hour + time.Second)
	for i := range 5 {
		if ok, _ := l.allow("user:kim"); !ok {
			t.Fatalf("after quiet hour, attempt %d refused", i+1)
		}
	}
	if ok, wait := l.allow("user:kim"); ok || wait != time.Minute {
		t.Fatalf("after forgetting: ok=%v wait=%v, want 1m (first strike again)", ok, wait)
	}
	// reset clears a key at once (successful sign-in).
	l.reset("user:kim")
	if ok, _ := l.allow("user:kim"); !ok {
		t.Fatal("refused after reset")
	}
}

func TestAttemptLimiterSeveralKeys(t *testing.T) {
	clk := &fakeClock{t: time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)}
	l := newAttemptLimiter(clk.Now)
	// One address trying many names is stopped by the address key.
	for i := range 5 {
		if ok, _ := l.allow("name:u"+string(rune('a'+i)), "addr:10.0.0.9"); !ok {
			t.Fatalf("attempt %d refused", i+1)
		}
	}
	if ok, _ := l.allow("name:uz", "addr:10.0.0.9"); ok {
		t.Fatal("sixth attempt from one address allowed")
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
	h := crossOriginGuard(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { reached++ }))
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

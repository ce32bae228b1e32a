package web

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
	"lotwatch/store/storetest"
)

// fakeClock is a settable clock for expiry and rate-limit tests.
type fakeClock struct{ t time.Time }

func (c *fakeClock) Now() time.Time          { return c.t }
func (c *fakeClock) Advance(d time.Duration) { c.t = c.t.Add(d) }

// gateOnFile is a sign-in gate counting in a new database of the chosen
// backend (storetest.DB), with the clock it reads.
func gateOnFile(t *testing.T) (*signInGate, *fakeClock) {
	t.Helper()
	db, err := store.Open(storetest.DB(t))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	clk := &fakeClock{t: time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)}
	return newSignInGate(db, clk.Now, slog.New(slog.NewTextHandler(io.Discard, nil)), nil), clk
}

// TestSignInGate: the project's figures, through the gate and the store.
func TestSignInGate(t *testing.T) {
	ctx := t.Context()
	g, clk := gateOnFile(t)
	// Five failures a minute block the name from the address for a
	// minute (the project's limit, common practice, no source).
	for i := range 4 {
		if w := g.fail(ctx, "kim", "10.0.0.1"); w != 0 {
			t.Fatalf("failure %d blocked for %v", i+1, w)
		}
		clk.Advance(time.Second)
	}
	if w := g.fail(ctx, "Kim", "10.0.0.1"); w != time.Minute {
		t.Fatalf("5th failure (the name in other case): blocked for %v, want 1m", w)
	}
	if w := g.wait(ctx, "kim", "10.0.0.1"); w != time.Minute {
		t.Fatalf("after 5th failure: wait %v, want 1m", w)
	}
	// Other names from the address, and the name from elsewhere, are not
	// affected.
	if w := g.wait(ctx, "lee", "10.0.0.1"); w != 0 {
		t.Fatalf("another user name must wait %v", w)
	}
	if w := g.wait(ctx, "kim", "10.0.0.2"); w != 0 {
		t.Fatalf("the name from another address must wait %v", w)
	}
	// Still blocked half-way through, with the remaining wait.
	clk.Advance(30 * time.Second)
	if w := g.wait(ctx, "kim", "10.0.0.1"); w != 30*time.Second {
		t.Fatalf("during block: wait %v, want 30s", w)
	}
	clk.Advance(30 * time.Second)
	if w := g.wait(ctx, "kim", "10.0.0.1"); w != 0 {
		t.Fatalf("after block: wait %v, want 0", w)
	}
	// Failures spread beyond the window do not add up.
	for i := range 8 {
		if w := g.fail(ctx, "ann", "10.0.0.3"); w != 0 {
			t.Fatalf("spread failure %d blocked for %v", i+1, w)
		}
		clk.Advance(16 * time.Second)
	}
	// Being blocked again doubles the block (backoff).
	for range 4 {
		g.fail(ctx, "kim", "10.0.0.1")
	}
	if w := g.fail(ctx, "kim", "10.0.0.1"); w != 2*time.Minute {
		t.Fatalf("second block: %v, want 2m", w)
	}
	// A quiet hour forgets the pair: the next block is one minute again.
	clk.Advance(2*time.Minute + time.Hour + time.Second)
	for range 4 {
		g.fail(ctx, "kim", "10.0.0.1")
	}
	if w := g.fail(ctx, "kim", "10.0.0.1"); w != time.Minute {
		t.Fatalf("after forgetting: %v, want 1m (first strike again)", w)
	}
	// A success clears the pair at once.
	g.succeed(ctx, "kim", "10.0.0.1")
	if w := g.wait(ctx, "kim", "10.0.0.1"); w != 0 {
		t.Fatalf("after a success: wait %v", w)
	}
	// Twenty failures from one address, each at another name, block the
	// address for every name.
	for i := range 19 {
		if w := g.fail(ctx, fmt.Sprint("user", i), "10.0.0.4"); w != 0 {
			t.Fatalf("failure %d from the address blocked for %v", i+1, w)
		}
	}
	if w := g.fail(ctx, "user19", "10.0.0.4"); w != time.Minute {
		t.Fatalf("20th failure from the address: blocked for %v, want 1m", w)
	}
	if w := g.wait(ctx, "someone", "10.0.0.4"); w != time.Minute {
		t.Fatalf("a new name from the blocked address: wait %v, want 1m", w)
	}
}

func TestSignInGateBackoffCap(t *testing.T) {
	ctx := t.Context()
	g, clk := gateOnFile(t)
	var last time.Duration
	for range 8 {
		for range 5 {
			last = g.fail(ctx, "kim", "10.0.0.9")
		}
		clk.Advance(last)
	}
	if last != 15*time.Minute {
		t.Fatalf("block after many strikes: %v, want the 15m cap", last)
	}
}

// troubledCounter answers with fixed waits and errors, as the store
// does when the database cannot be reached (the waits then come from its
// memory).
type troubledCounter struct {
	wait time.Duration
	err  error
}

func (c troubledCounter) RecordSignInFailure(context.Context, time.Time, ...store.AttemptLimit) (time.Duration, error) {
	return c.wait, c.err
}

func (c troubledCounter) SignInWait(context.Context, time.Time, ...string) (time.Duration, error) {
	return c.wait, c.err
}

func (c troubledCounter) ClearSignInFailures(context.Context, time.Time, string) error { return c.err }

// TestSignInGateDatabaseTrouble: when the counts cannot be written or
// read, the gate still holds the client to the waits the store reports
// from memory, and logs the trouble.
func TestSignInGateDatabaseTrouble(t *testing.T) {
	ctx := t.Context()
	var logged bytes.Buffer
	g := newSignInGate(troubledCounter{wait: 42 * time.Second, err: errors.New("connection refused")},
		time.Now, slog.New(slog.NewTextHandler(&logged, nil)), nil)
	if w := g.fail(ctx, "kim", "10.0.0.1"); w != 42*time.Second {
		t.Errorf("fail: %v, want the 42s from memory", w)
	}
	if w := g.wait(ctx, "kim", "10.0.0.1"); w != 42*time.Second {
		t.Errorf("wait: %v, want the 42s from memory", w)
	}
	g.succeed(ctx, "kim", "10.0.0.1")
	if n := strings.Count(logged.String(), "connection refused"); n != 3 {
		t.Errorf("the trouble was logged %d times, want 3:\n%s", n, logged.String())
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

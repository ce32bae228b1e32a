package web

import (
	"net"
	"net/http"
	"strconv"
	"sync"
	"time"
)

// contentSecurityPolicy allows the page to load scripts, styles and images
// only from its own origin (images also as data: URLs, which ECharts uses
// for "save as image"), and forbids inline scripts and styles, plug-ins,
// framing and form posts elsewhere.
const contentSecurityPolicy = "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; " +
	"object-src 'none'; base-uri 'none'; frame-ancestors 'none'; form-action 'self'"

// securityHeaders sets the headers every response carries. HSTS is sent
// only when the server is reached over TLS (directly, or behind a
// TLS-terminating proxy when Config.Secure is set).
func securityHeaders(secure bool, next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		h := w.Header()
		h.Set("Content-Security-Policy", contentSecurityPolicy)
		h.Set("X-Content-Type-Options", "nosniff")
		h.Set("Referrer-Policy", "same-origin")
		h.Set("X-Frame-Options", "DENY")
		h.Set("Cross-Origin-Opener-Policy", "same-origin")
		if secure || r.TLS != nil {
			h.Set("Strict-Transport-Security", "max-age=31536000")
		}
		next.ServeHTTP(w, r)
	})
}

// crossOriginGuard refuses state-changing requests (POST, PUT, PATCH,
// DELETE) that a browser marks as coming from another origin, using the
// Sec-Fetch-Site header or, failing that, Origin against Host
// (net/http.CrossOriginProtection). Together with SameSite session cookies
// this is the CSRF defence. Requests without either header (command-line
// clients with a Bearer token) pass: they carry no ambient credentials.
func crossOriginGuard(next http.Handler) http.Handler {
	p := http.NewCrossOriginProtection()
	p.SetDenyHandler(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		msg := "cross-origin request refused: the request did not come from a lotwatch page"
		if isAPI(r) {
			writeError(w, http.StatusForbidden, msg)
			return
		}
		http.Error(w, msg, http.StatusForbidden)
	}))
	return p.Handler(next)
}

// clientAddr is the address the request came from, without the port.
// Forwarding headers are not trusted: they can be set by anyone.
func clientAddr(r *http.Request) string {
	host, _, err := net.SplitHostPort(r.RemoteAddr)
	if err != nil {
		return r.RemoteAddr
	}
	return host
}

// attemptLimiter limits sign-in attempts per key (a user name or a client
// address): at most max attempts within window. A key that goes over the
// limit is blocked, for window the first time and twice as long each time
// it goes over again (up to maxBlock); a quiet spell of forgetAfter clears
// its record. The figures are common practice, no source.
type attemptLimiter struct {
	max         int
	window      time.Duration
	maxBlock    time.Duration
	forgetAfter time.Duration
	now         func() time.Time

	mu    sync.Mutex
	keys  map[string]*attempts
	swept time.Time
}

type attempts struct {
	times   []time.Time // within the window, oldest first
	blocked time.Time   // refused until this instant
	strikes int         // times the limit was exceeded
	last    time.Time
}

func newAttemptLimiter(now func() time.Time) *attemptLimiter {
	return &attemptLimiter{
		max:         5,
		window:      time.Minute,
		maxBlock:    15 * time.Minute,
		forgetAfter: time.Hour,
		now:         now,
		keys:        map[string]*attempts{},
	}
}

// allow records an attempt for every key and reports whether it may go
// ahead; if not, it returns how long the caller must wait. An attempt
// refused for one key is still counted against the others, so that
// spreading guesses over names or addresses does not help.
func (l *attemptLimiter) allow(keys ...string) (ok bool, wait time.Duration) {
	l.mu.Lock()
	defer l.mu.Unlock()
	now := l.now()
	l.sweep(now)
	ok = true
	for _, k := range keys {
		a := l.keys[k]
		if a == nil {
			a = &attempts{}
			l.keys[k] = a
		}
		if now.Sub(a.last) > l.forgetAfter {
			*a = attempts{}
		}
		a.last = now
		if now.Before(a.blocked) {
			ok = false
			wait = max(wait, a.blocked.Sub(now))
			continue
		}
		cut := 0
		for cut < len(a.times) && now.Sub(a.times[cut]) >= l.window {
			cut++
		}
		a.times = append(a.times[cut:], now)
		if len(a.times) > l.max {
			block := l.window << a.strikes
			if block > l.maxBlock || block <= 0 {
				block = l.maxBlock
			}
			a.strikes++
			a.blocked = now.Add(block)
			a.times = a.times[:0]
			ok = false
			wait = max(wait, block)
		}
	}
	return ok, wait
}

// reset forgets a key, after a successful sign-in for its user name.
func (l *attemptLimiter) reset(key string) {
	l.mu.Lock()
	delete(l.keys, key)
	l.mu.Unlock()
}

// sweep drops forgotten keys now and then so that the map stays small.
func (l *attemptLimiter) sweep(now time.Time) {
	if now.Sub(l.swept) < l.window {
		return
	}
	l.swept = now
	for k, a := range l.keys {
		if now.Sub(a.last) > l.forgetAfter && !now.Before(a.blocked) {
			delete(l.keys, k)
		}
	}
}

// retryAfter formats a wait as whole seconds, rounded up, for the
// Retry-After header.
func retryAfter(d time.Duration) string {
	s := int64((d + time.Second - 1) / time.Second)
	if s < 1 {
		s = 1
	}
	return strconv.FormatInt(s, 10)
}

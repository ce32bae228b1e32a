package web

import (
	"fmt"
	"net"
	"net/http"
	"net/netip"
	"strconv"
	"strings"
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
// A refused request is answered by deny (Server.fail: 403).
func crossOriginGuard(next http.Handler, deny func(http.ResponseWriter, *http.Request, error)) http.Handler {
	p := http.NewCrossOriginProtection()
	p.SetDenyHandler(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		deny(w, r, refuse(errForbidden, "cross-origin request refused: the request did not come from a lotwatch page", ""))
	}))
	return p.Handler(next)
}

// clientAddr is the address the request came from, without the port.
// X-Forwarded-For is believed only when the request comes from one of
// the trusted proxies, and then only as far back as the proxies go: the
// address is the rightmost one in the header that is not itself a
// trusted proxy (what the nearest proxy saw). Anything to its left was
// written by the client and could be anything.
func clientAddr(r *http.Request, proxies []netip.Prefix) string {
	host, _, err := net.SplitHostPort(r.RemoteAddr)
	if err != nil {
		host = r.RemoteAddr
	}
	addr, err := netip.ParseAddr(host)
	if err != nil || !trusted(addr, proxies) {
		return host
	}
	hops := strings.Split(strings.Join(r.Header.Values("X-Forwarded-For"), ","), ",")
	for i := len(hops) - 1; i >= 0; i-- {
		hop, err := netip.ParseAddr(strings.TrimSpace(hops[i]))
		if err != nil {
			break // a garbled header: keep the last address known good
		}
		addr = hop.Unmap()
		if !trusted(addr, proxies) {
			break
		}
	}
	return addr.String()
}

// trusted reports whether a is one of the trusted proxies.
func trusted(a netip.Addr, proxies []netip.Prefix) bool {
	a = a.Unmap()
	for _, p := range proxies {
		if p.Contains(a) {
			return true
		}
	}
	return false
}

// ParseProxies reads a comma-separated list of proxy addresses or CIDR
// ranges ("10.0.0.5, 192.168.4.0/24") for Config.TrustedProxies.
func ParseProxies(list string) ([]netip.Prefix, error) {
	var out []netip.Prefix
	for _, f := range strings.Split(list, ",") {
		f = strings.TrimSpace(f)
		if f == "" {
			continue
		}
		if strings.Contains(f, "/") {
			p, err := netip.ParsePrefix(f)
			if err != nil {
				return nil, fmt.Errorf("proxy range %q: %w", f, err)
			}
			out = append(out, p.Masked())
			continue
		}
		a, err := netip.ParseAddr(f)
		if err != nil {
			return nil, fmt.Errorf("proxy address %q is not an IP address", f)
		}
		a = a.Unmap()
		out = append(out, netip.PrefixFrom(a, a.BitLen()))
	}
	return out, nil
}

// maxNameBytes is the longest user name a sign-in is even looked at
// with; store.AddUser refuses longer names, so no user has one. Longer
// names are refused before they are counted or logged.
const maxNameBytes = 64

// signInGate throttles failed sign-ins. Failures are counted per pair of
// user name and client address, so that someone guessing one user's
// password is slowed down without locking that user out everywhere, and
// per client address with a higher limit, so that one address guessing
// many names is slowed down too. A name alone is never locked.
type signInGate struct {
	pair    *attemptLimiter // keyed by lower-case name, NUL, address
	addr    *attemptLimiter
	proxies []netip.Prefix
}

// Failures allowed within a minute before a block: five per name and
// address (a user's typos), twenty per address (a shared terminal or an
// untrusted proxy carries several users' typos). Common practice, no
// source.
const (
	pairAttempts = 5
	addrAttempts = 20
)

func newSignInGate(now func() time.Time, proxies []netip.Prefix) *signInGate {
	return &signInGate{pair: newAttemptLimiter(now, pairAttempts), addr: newAttemptLimiter(now, addrAttempts), proxies: proxies}
}

func pairKey(name, addr string) string { return strings.ToLower(name) + "\x00" + addr }

// wait reports how long the name from the address must still wait.
func (g *signInGate) wait(name, addr string) time.Duration {
	return max(g.pair.wait(pairKey(name, addr)), g.addr.wait(addr))
}

// fail records a failure and reports the wait it now causes.
func (g *signInGate) fail(name, addr string) time.Duration {
	return max(g.pair.fail(pairKey(name, addr)), g.addr.fail(addr))
}

// succeed forgets the failures of the name from the address.
func (g *signInGate) succeed(name, addr string) { g.pair.reset(pairKey(name, addr)) }

// attemptLimiter limits failed sign-in attempts per key (a user name and
// address, or an address): after max failures within window the key is
// blocked, for window the first time and twice as long each time it is
// blocked again (up to maxBlock); a quiet spell of forgetAfter clears its
// record. Successful sign-ins are not counted, so that a shift signing in
// through one shared address is not held up. The figures are common
// practice, no source.
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
	fails   []time.Time // failures within the window, oldest first
	blocked time.Time   // refused until this instant
	strikes int         // times the key was blocked
	last    time.Time
}

func newAttemptLimiter(now func() time.Time, max int) *attemptLimiter {
	return &attemptLimiter{
		max:         max,
		window:      time.Minute,
		maxBlock:    15 * time.Minute,
		forgetAfter: time.Hour,
		now:         now,
		keys:        map[string]*attempts{},
	}
}

// wait reports how long the longest block among the keys still lasts;
// 0 lets the attempt go ahead.
func (l *attemptLimiter) wait(keys ...string) time.Duration {
	l.mu.Lock()
	defer l.mu.Unlock()
	now := l.now()
	var w time.Duration
	for _, k := range keys {
		if a := l.keys[k]; a != nil && now.Before(a.blocked) {
			w = max(w, a.blocked.Sub(now))
		}
	}
	return w
}

// fail records a failed attempt against every key and reports how long
// the keys are now blocked (0 if none is).
func (l *attemptLimiter) fail(keys ...string) time.Duration {
	l.mu.Lock()
	defer l.mu.Unlock()
	now := l.now()
	l.sweep(now)
	var w time.Duration
	for _, k := range keys {
		a := l.keys[k]
		if a == nil || now.Sub(a.last) > l.forgetAfter {
			a = &attempts{}
			l.keys[k] = a
		}
		a.last = now
		cut := 0
		for cut < len(a.fails) && now.Sub(a.fails[cut]) >= l.window {
			cut++
		}
		a.fails = append(a.fails[cut:], now)
		if len(a.fails) >= l.max {
			block := l.window << a.strikes
			if block > l.maxBlock || block <= 0 {
				block = l.maxBlock
			}
			a.strikes++
			a.blocked = now.Add(block)
			a.fails = a.fails[:0]
		}
		if now.Before(a.blocked) {
			w = max(w, a.blocked.Sub(now))
		}
	}
	return w
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

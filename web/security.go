package web

import (
	"context"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"net/netip"
	"strconv"
	"strings"
	"time"

	"lotwatch/store"
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
// many names is slowed down too. A name alone is never locked. The
// counts live in the database (store.DB.RecordSignInFailure), so that
// every server on it holds a client to the same limits.
type signInGate struct {
	counts  attemptCounter
	now     func() time.Time
	log     *slog.Logger
	proxies []netip.Prefix
}

// attemptCounter keeps the failed sign-ins: the store, or in a test
// anything that counts alike.
type attemptCounter interface {
	RecordSignInFailure(ctx context.Context, now time.Time, limits ...store.AttemptLimit) (time.Duration, error)
	SignInWait(ctx context.Context, now time.Time, keys ...string) (time.Duration, error)
	ClearSignInFailures(ctx context.Context, now time.Time, key string) error
}

// Failures allowed within a minute before a block: five per name and
// address (a user's typos), twenty per address (a shared terminal or an
// untrusted proxy carries several users' typos). A key is blocked for
// the minute the first time and twice as long each time it is blocked
// again, up to a quarter of an hour; an hour's quiet clears its record.
// Successful sign-ins are not counted, so that a shift signing in
// through one shared address is not held up. Common practice, no source.
const (
	pairAttempts  = 5
	addrAttempts  = 20
	attemptWindow = time.Minute
	maxBlock      = 15 * time.Minute
	forgetAfter   = time.Hour
)

func newSignInGate(counts attemptCounter, now func() time.Time, log *slog.Logger, proxies []netip.Prefix) *signInGate {
	return &signInGate{counts: counts, now: now, log: log, proxies: proxies}
}

// pairKey is the key of a name from an address. A client address holds
// no NUL, so no pair has the key of an address.
func pairKey(name, addr string) string { return strings.ToLower(name) + "\x00" + addr }

// limit is the rule a key is held to, allowing max failures a minute.
func limit(key string, max int) store.AttemptLimit {
	return store.AttemptLimit{Key: key, Max: max, Window: attemptWindow, MaxBlock: maxBlock, Forget: forgetAfter}
}

// wait reports how long the name from the address must still wait. If the
// database cannot be read, the failures this server counted in memory
// still hold (the store answers with them) and the trouble is logged.
func (g *signInGate) wait(ctx context.Context, name, addr string) time.Duration {
	w, err := g.counts.SignInWait(ctx, g.now(), pairKey(name, addr), addr)
	if err != nil {
		g.log.Warn("sign-in limits: database not read, this server's own counts used", "err", err)
	}
	return w
}

// fail records a failure and reports the wait it now causes. A failure
// the database cannot take is counted in memory by the store, and the
// trouble logged.
func (g *signInGate) fail(ctx context.Context, name, addr string) time.Duration {
	w, err := g.counts.RecordSignInFailure(ctx, g.now(), limit(pairKey(name, addr), pairAttempts), limit(addr, addrAttempts))
	if err != nil {
		g.log.Warn("sign-in limits: failure not written, counted by this server alone", "err", err)
	}
	return w
}

// succeed forgets the failures of the name from the address; the
// address's own count stays.
func (g *signInGate) succeed(ctx context.Context, name, addr string) {
	if err := g.counts.ClearSignInFailures(ctx, g.now(), pairKey(name, addr)); err != nil {
		g.log.Warn("sign-in limits: earlier failures not cleared", "err", err)
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

package web

import (
	"context"
	"errors"
	"net/http"
	"net/url"
	"strings"

	"github.com/go-chi/chi/v5"
	"github.com/go-chi/chi/v5/middleware"

	"lotwatch/store"
)

// anyone marks a route open without sign-in.
const anyone store.Role = ""

// route is one entry of the route table: the least role a caller must
// have (anyone for open routes) is checked by Server.guard before the
// handler runs, the same way for every route.
type route struct {
	method  string
	pattern string
	min     store.Role
	handle  func(w http.ResponseWriter, r *http.Request)
}

// routes is the route table, holding the least role of every route as
// README's table of roles states them: a viewer reads; an inspector also
// logs, corrects and voids lots and records causes; an engineer also adds
// and changes processes and freezes limit sets; an admin also manages
// users and tokens (TestRolesAsWrittenInREADME).
func (s *Server) routes() []route {
	return []route{
		// Static files and sign-in are open.
		{"GET", "/static/*", anyone, serveStatic},
		{"GET", "/signin", anyone, s.signInPage},
		{"POST", "/signin", anyone, s.signIn},
		{"GET", "/healthz", anyone, s.healthz},

		// Pages.
		{"POST", "/signout", store.RoleViewer, s.signOut},
		{"GET", "/password", store.RoleViewer, s.passwordPage},
		{"POST", "/password", store.RoleViewer, s.changePassword},
		{"GET", "/", store.RoleViewer, s.boardPage},
		{"GET", "/processes/{id}", store.RoleViewer, s.chartPage},
		{"GET", "/processes/{id}/chart.csv", store.RoleViewer, s.chartCSV},
		{"GET", "/log", store.RoleInspector, s.chooseProcessPage},
		{"GET", "/processes/{id}/log", store.RoleInspector, s.lotFormPage},
		{"POST", "/processes/{id}/lots", store.RoleInspector, s.postLot},
		{"GET", "/lots/{lot}", store.RoleViewer, s.lotPage},
		{"POST", "/lots/{lot}/causes", store.RoleInspector, s.postCause},
		{"POST", "/lots/{lot}/causes/{ann}/close", store.RoleInspector, s.closeCause},
		{"POST", "/lots/{lot}/correct", store.RoleInspector, s.correctLot},
		{"POST", "/lots/{lot}/void", store.RoleInspector, s.voidLot},
		{"GET", "/processes/{id}/limits", store.RoleEngineer, s.limitsPage},
		{"POST", "/processes/{id}/limits", store.RoleEngineer, s.freezeLimits},
		{"GET", "/upload", store.RoleInspector, s.uploadPage},
		{"POST", "/upload", store.RoleInspector, s.postUpload},
		{"POST", "/upload/{key}", store.RoleInspector, s.confirmUpload},
		{"GET", "/attention", store.RoleViewer, s.worklistPage},
		{"POST", "/attention/causes", store.RoleInspector, s.postWorklistCauses},
		{"POST", "/upload/{key}/ignore", store.RoleInspector, s.ignoreColumns},
		{"POST", "/upload/{key}/map", store.RoleEngineer, s.mapColumns},
		{"GET", "/review", store.RoleViewer, s.reviewPage},
		{"GET", "/review/download", store.RoleViewer, s.reviewDownload},
		{"GET", "/review/review.css", anyone, reviewCSS},
		{"GET", "/plan", store.RoleViewer, s.planPage},
		{"GET", "/admin/users", store.RoleAdmin, s.adminPage},
		{"POST", "/admin/users", store.RoleAdmin, s.addUser},
		{"POST", "/admin/users/{name}/password", store.RoleAdmin, s.resetPassword},
		{"POST", "/admin/users/{name}/active", store.RoleAdmin, s.setUserActive},
		{"POST", "/admin/tokens", store.RoleAdmin, s.createToken},
		{"POST", "/admin/tokens/{tok}/revoke", store.RoleAdmin, s.revokeToken},
		{"GET", "/settings/processes", store.RoleEngineer, s.processListPage},
		{"POST", "/settings/processes", store.RoleEngineer, s.addProcess},
		{"POST", "/settings/plant", store.RoleEngineer, s.setPlantZone},
		{"GET", "/processes/{id}/settings", store.RoleEngineer, s.processSettingsPage},
		{"POST", "/processes/{id}/settings", store.RoleEngineer, s.updateProcess},
		{"GET", "/alerts", store.RoleEngineer, s.alertsPage},
		{"POST", "/alerts", store.RoleEngineer, s.addAlertRule},
		{"POST", "/alerts/{rule}/remove", store.RoleEngineer, s.removeAlertRule},
		{"POST", "/alerts/{rule}/test", store.RoleEngineer, s.testAlertRule},

		// JSON API.
		{"GET", "/api/v1/openapi.json", anyone, s.apiOpenAPI},
		{"GET", "/api/v1/me", store.RoleViewer, s.apiMe},
		{"GET", "/api/v1/processes", store.RoleViewer, s.apiProcesses},
		{"GET", "/api/v1/processes/{id}", store.RoleViewer, s.apiProcess},
		{"GET", "/api/v1/processes/{id}/chart", store.RoleViewer, s.apiChart},
		{"GET", "/api/v1/processes/{id}/lots", store.RoleViewer, s.apiLots},
		{"POST", "/api/v1/processes/{id}/lots", store.RoleInspector, s.apiPostLots},
		{"GET", "/api/v1/processes/{id}/signals", store.RoleViewer, s.apiSignals},
		{"GET", "/api/v1/processes/{id}/limits", store.RoleViewer, s.apiLimitSets},
		{"POST", "/api/v1/processes/{id}/lots/{lot}/causes", store.RoleInspector, s.apiPostCause},
		{"GET", "/api/v1/attention", store.RoleViewer, s.apiAttention},
		{"GET", "/api/v1/users", store.RoleAdmin, s.apiUsers},
	}
}

// buildHandler assembles the router from the route table and wraps it in
// the cross-origin guard and the security headers.
func (s *Server) buildHandler() http.Handler {
	r := chi.NewRouter()
	r.Use(middleware.GetHead) // HEAD is answered like GET, with no body
	for _, rt := range s.routes() {
		r.Method(rt.method, rt.pattern, s.observed(rt, s.guard(rt)))
	}
	r.NotFound(func(w http.ResponseWriter, r *http.Request) {
		s.fail(w, r, refuse(store.ErrNotFound, "no such resource: "+r.URL.Path, "There is no page at this address."))
	})
	r.MethodNotAllowed(func(w http.ResponseWriter, r *http.Request) {
		s.fail(w, r, refuse(errMethod, "method "+r.Method+" is not allowed on "+r.URL.Path, "This address does not accept that request."))
	})
	var h http.Handler = r
	h = http.MaxBytesHandler(h, 8<<20)
	h = crossOriginGuard(h, s.fail)
	h = securityHeaders(s.secure, h)
	return h
}

// principal is who is making a request.
type principal struct {
	user    store.User
	session string // raw session id, when signed in with a cookie
	token   bool   // authenticated with a Bearer token
}

type principalKey struct{}

// who returns the request's principal, or nil for an anonymous request.
func who(r *http.Request) *principal {
	p, _ := r.Context().Value(principalKey{}).(*principal)
	return p
}

// errBadToken is a Bearer token that is unknown, revoked or malformed.
var errBadToken = refuse(errSignIn, "the API token is not valid (unknown, revoked, or its user is disabled)", "")

// guard authenticates the request and enforces the route's least role.
func (s *Server) guard(rt route) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		p, err := s.identify(w, r)
		if err != nil {
			if errors.Is(err, errBadToken) {
				w.Header().Set("WWW-Authenticate", `Bearer error="invalid_token"`)
			}
			s.fail(w, r, err)
			return
		}
		if p != nil {
			r = r.WithContext(context.WithValue(r.Context(), principalKey{}, p))
		}
		if rt.min == anyone {
			rt.handle(w, r)
			return
		}
		if p == nil {
			if isAPI(r) {
				w.Header().Set("WWW-Authenticate", `Bearer`)
				s.fail(w, r, refuse(errSignIn, "authentication required: send an API token as \"Authorization: Bearer TOKEN\"", ""))
				return
			}
			next := r.URL.Path
			if r.Method == http.MethodGet && r.URL.RawQuery != "" {
				next += "?" + r.URL.RawQuery
			}
			http.Redirect(w, r, "/signin?next="+url.QueryEscape(next), http.StatusSeeOther)
			return
		}
		if !p.user.Role.AtLeast(rt.min) {
			s.fail(w, r, refuse(errForbidden, "this needs the "+string(rt.min)+" role; you are signed in as "+p.user.Name+", whose role is "+string(p.user.Role), ""))
			return
		}
		rt.handle(w, r)
	})
}

// identify finds the caller: an API request may carry a Bearer token
// (which then decides, and a bad one is an error); otherwise the session
// cookie is used. A missing or expired session is anonymous.
func (s *Server) identify(w http.ResponseWriter, r *http.Request) (*principal, error) {
	ctx := r.Context()
	if authz := r.Header.Get("Authorization"); authz != "" && isAPI(r) {
		scheme, raw, ok := strings.Cut(authz, " ")
		raw = strings.TrimSpace(raw)
		if !ok || !strings.EqualFold(scheme, "Bearer") || raw == "" {
			return nil, errBadToken
		}
		u, err := s.db.TokenUser(ctx, raw)
		if errors.Is(err, store.ErrNotFound) || (err == nil && !u.Active) {
			return nil, errBadToken
		}
		if err != nil {
			return nil, err
		}
		return &principal{user: u, token: true}, nil
	}
	c, err := r.Cookie(s.cookieName())
	if err != nil || c.Value == "" {
		return nil, nil
	}
	u, err := s.db.SessionUser(ctx, c.Value, s.now(), SessionIdle, SessionAbsolute)
	if errors.Is(err, store.ErrNotFound) || (err == nil && !u.Active) {
		s.clearSessionCookie(w)
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	return &principal{user: u, session: c.Value}, nil
}

// internalError answers an error the handler does not answer itself
// (fail: one mapping of errors to statuses).
func (s *Server) internalError(w http.ResponseWriter, r *http.Request, err error) {
	s.fail(w, r, err)
}

func (s *Server) healthz(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "text/plain; charset=utf-8")
	w.Header().Set("Cache-Control", "no-store")
	w.Write([]byte("ok\n"))
}

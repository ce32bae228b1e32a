package web

import (
	"errors"
	"net/http"
	"strconv"
	"strings"

	"lotwatch/store"
)

// cookieName is the session cookie's name. Under HTTPS the __Host- prefix
// makes browsers insist on Secure, Path=/ and no Domain, so that no other
// host can plant or read it.
func (s *Server) cookieName() string {
	if s.secure {
		return "__Host-lotwatch_session"
	}
	return "lotwatch_session"
}

// setSessionCookie gives the browser its session id. The cookie has no
// Max-Age: the server decides expiry (SessionIdle, SessionAbsolute), and
// closing the browser ends it too.
func (s *Server) setSessionCookie(w http.ResponseWriter, raw string) {
	http.SetCookie(w, &http.Cookie{
		Name:     s.cookieName(),
		Value:    raw,
		Path:     "/",
		HttpOnly: true,
		Secure:   s.secure,
		SameSite: http.SameSiteLaxMode,
	})
}

func (s *Server) clearSessionCookie(w http.ResponseWriter) {
	http.SetCookie(w, &http.Cookie{
		Name:     s.cookieName(),
		Value:    "",
		Path:     "/",
		MaxAge:   -1,
		HttpOnly: true,
		Secure:   s.secure,
		SameSite: http.SameSiteLaxMode,
	})
}

// safeNext returns the local path to go to after sign-in, refusing
// anything that could lead to another site.
func safeNext(next string) string {
	if next == "" || !strings.HasPrefix(next, "/") || strings.HasPrefix(next, "//") ||
		strings.HasPrefix(next, "/\\") || strings.ContainsAny(next, "\r\n\t") {
		return "/"
	}
	return next
}

type signInData struct {
	Name    string
	Next    string
	Problem string
}

func (s *Server) signInPage(w http.ResponseWriter, r *http.Request) {
	if who(r) != nil {
		http.Redirect(w, r, safeNext(r.URL.Query().Get("next")), http.StatusSeeOther)
		return
	}
	s.render(w, r, http.StatusOK, "signin.html", "Sign in", signInData{Next: safeNext(r.URL.Query().Get("next"))})
}

// signIn checks a user name and password. Failed attempts are limited
// per user name and client address, and per address, before the password
// is even looked at (signInGate); a name longer than any user's is
// refused before it is counted or logged. On success any earlier session
// of this browser is ended and a new session id is issued, so that an id
// planted before sign-in is worthless.
func (s *Server) signIn(w http.ResponseWriter, r *http.Request) {
	name := strings.TrimSpace(r.PostFormValue("name"))
	password := r.PostFormValue("password")
	data := signInData{Name: name, Next: safeNext(r.PostFormValue("next"))}
	// The form is shown again with what refused the sign-in, under its
	// status.
	again := func(err error) {
		data.Problem = err.Error()
		s.render(w, r, statusOf(err), "signin.html", "Sign in", data)
	}
	if len(name) > maxNameBytes {
		data.Name = ""
		again(invalid("A user name is at most " + strconv.Itoa(maxNameBytes) + " bytes long."))
		return
	}
	addr := s.clientAddr(r)
	if wait := s.gate.wait(r.Context(), name, addr); wait > 0 {
		w.Header().Set("Retry-After", retryAfter(wait))
		again(refuse(errTooMany, "Too many sign-in attempts. Wait "+retryAfter(wait)+" seconds and try again.", ""))
		return
	}
	if name == "" || password == "" {
		again(invalid("Enter your user name and password."))
		return
	}
	u, err := s.db.Authenticate(r.Context(), name, password)
	if err == nil && !u.Active {
		err = store.ErrBadCredentials
	}
	if errors.Is(err, store.ErrBadCredentials) {
		s.log.Warn("sign-in refused", "name", name, "addr", addr)
		msg := "The user name or password is not right."
		if wait := s.gate.fail(r.Context(), name, addr); wait > 0 {
			msg += " Too many failed attempts: wait " + retryAfter(wait) + " seconds before the next."
		}
		again(refuse(errSignIn, msg, ""))
		return
	}
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	if p := who(r); p != nil && p.session != "" {
		if err := s.db.DeleteSession(r.Context(), p.session); err != nil {
			s.internalError(w, r, err)
			return
		}
	} else if c, err := r.Cookie(s.cookieName()); err == nil && c.Value != "" {
		_ = s.db.DeleteSession(r.Context(), c.Value)
	}
	raw, err := s.db.CreateSession(r.Context(), u.ID, s.now())
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	s.gate.succeed(r.Context(), name, addr)
	s.setSessionCookie(w, raw)
	s.log.Info("signed in", "user", u.Name, "addr", addr)
	http.Redirect(w, r, data.Next, http.StatusSeeOther)
}

func (s *Server) signOut(w http.ResponseWriter, r *http.Request) {
	if p := who(r); p.session != "" {
		if err := s.db.DeleteSession(r.Context(), p.session); err != nil {
			s.internalError(w, r, err)
			return
		}
	}
	s.clearSessionCookie(w)
	http.Redirect(w, r, "/signin", http.StatusSeeOther)
}

type passwordData struct {
	Problem string
	Done    bool
}

func (s *Server) passwordPage(w http.ResponseWriter, r *http.Request) {
	s.render(w, r, http.StatusOK, "password.html", "Change password", passwordData{Done: r.URL.Query().Get("done") == "1"})
}

// changePassword sets a new password after checking the current one. All
// the user's sessions end, and this browser gets a fresh one, so that a
// session stolen before the change stops working.
func (s *Server) changePassword(w http.ResponseWriter, r *http.Request) {
	p := who(r)
	current := r.PostFormValue("current")
	next := r.PostFormValue("new")
	confirm := r.PostFormValue("confirm")
	// The form is shown again with what refused it, under its status.
	again := func(err error) {
		s.render(w, r, statusOf(err), "password.html", "Change password", passwordData{Problem: err.Error()})
	}
	if p.token {
		s.fail(w, r, refuse(errForbidden, "a password cannot be changed with an API token", ""))
		return
	}
	addr := s.clientAddr(r)
	if wait := s.gate.wait(r.Context(), p.user.Name, addr); wait > 0 {
		w.Header().Set("Retry-After", retryAfter(wait))
		again(refuse(errTooMany, "Too many attempts. Wait "+retryAfter(wait)+" seconds and try again.", ""))
		return
	}
	switch {
	case current == "":
		again(invalid("Enter your current password."))
		return
	case next == "":
		again(invalid("Enter a new password."))
		return
	case next != confirm:
		again(invalid("The new password and its confirmation differ."))
		return
	}
	if _, err := s.db.Authenticate(r.Context(), p.user.Name, current); err != nil {
		if errors.Is(err, store.ErrBadCredentials) {
			s.gate.fail(r.Context(), p.user.Name, addr)
			again(refuse(errSignIn, "The current password is not right.", ""))
			return
		}
		s.internalError(w, r, err)
		return
	}
	if err := s.db.SetPassword(r.Context(), p.user.Name, p.user.Name, next); err != nil {
		if errors.Is(err, store.ErrInvalid) {
			again(invalid("The new password was refused: " + err.Error()))
			return
		}
		s.internalError(w, r, err)
		return
	}
	// SetPassword ended every session of the user, this one too: a new
	// one keeps the user signed in here.
	raw, err := s.db.CreateSession(r.Context(), p.user.ID, s.now())
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	s.setSessionCookie(w, raw)
	s.log.Info("password changed", "user", p.user.Name)
	http.Redirect(w, r, "/password?done=1", http.StatusSeeOther)
}

// clientAddr is the address the request came from, read through the
// trusted proxies.
func (s *Server) clientAddr(r *http.Request) string { return clientAddr(r, s.gate.proxies) }

package web

import (
	"errors"
	"net/http"
	"net/url"
	"strconv"
	"strings"

	"github.com/go-chi/chi/v5"

	"lotwatch/store"
)

type adminData struct {
	Users    []store.User
	Tokens   []store.Token
	Roles    []option
	Problem  string
	Done     string
	NewToken string
	TokenFor string
	Values   map[string]string
}

// adminPage lists users and API tokens, with the forms that add a user,
// reset a password, deactivate or reactivate a user, and create or revoke
// a token.
func (s *Server) adminPage(w http.ResponseWriter, r *http.Request) {
	s.showAdmin(w, r, http.StatusOK, adminData{Done: r.URL.Query().Get("done")})
}

func (s *Server) showAdmin(w http.ResponseWriter, r *http.Request, status int, d adminData) {
	var err error
	if d.Users, err = s.db.Users(r.Context()); err != nil {
		s.internalError(w, r, err)
		return
	}
	if d.Tokens, err = s.db.Tokens(r.Context()); err != nil {
		s.internalError(w, r, err)
		return
	}
	if d.Values == nil {
		d.Values = map[string]string{"role": string(store.RoleInspector)}
	}
	d.Roles = options(d.Values["role"], "viewer", "viewer — reads charts and reports", "inspector", "inspector — also logs lots and records causes",
		"engineer", "engineer — also sets limits and processes", "admin", "admin — also manages users and tokens")
	s.render(w, r, status, "admin.html", "Users and tokens", d)
}

// adminFail shows the page again with the problem of the last post.
func (s *Server) adminFail(w http.ResponseWriter, r *http.Request, err error, vals map[string]string) {
	if errors.Is(err, store.ErrInvalid) || errors.Is(err, store.ErrConflict) || errors.Is(err, store.ErrNotFound) {
		msg := err.Error()
		if errors.Is(err, store.ErrConflict) {
			msg = "a user of that name already exists"
		}
		s.showAdmin(w, r, statusOf(errFormRefused), adminData{Problem: "Not done: " + msg, Values: vals})
		return
	}
	s.internalError(w, r, err)
}

func (s *Server) addUser(w http.ResponseWriter, r *http.Request) {
	vals := map[string]string{"name": strings.TrimSpace(r.PostFormValue("name")), "role": r.PostFormValue("role")}
	role, err := store.ParseRole(vals["role"])
	if err == nil {
		_, err = s.db.AddUser(r.Context(), who(r).user.Name, vals["name"], role, r.PostFormValue("password"))
	}
	if err != nil {
		s.adminFail(w, r, err, vals)
		return
	}
	http.Redirect(w, r, "/admin/users?done=added", http.StatusSeeOther)
}

func (s *Server) resetPassword(w http.ResponseWriter, r *http.Request) {
	name, ok := s.pathParam(w, r, "name")
	if !ok {
		return
	}
	// A reset password ends the user's sessions (store.SetPassword).
	if err := s.db.SetPassword(r.Context(), who(r).user.Name, name, r.PostFormValue("password")); err != nil {
		s.adminFail(w, r, err, nil)
		return
	}
	http.Redirect(w, r, "/admin/users?done=password", http.StatusSeeOther)
}

func (s *Server) setUserActive(w http.ResponseWriter, r *http.Request) {
	name, ok := s.pathParam(w, r, "name")
	if !ok {
		return
	}
	active := r.PostFormValue("active") == "1"
	if !active && name == who(r).user.Name {
		s.showAdmin(w, r, statusOf(errFormRefused), adminData{Problem: "You cannot deactivate yourself."})
		return
	}
	reason := strings.TrimSpace(r.PostFormValue("reason"))
	if reason == "" {
		reason = "changed on the users page"
	}
	// Deactivating ends the user's sessions (store.SetUserActive).
	if err := s.db.SetUserActive(r.Context(), who(r).user.Name, name, active, reason); err != nil {
		s.adminFail(w, r, err, nil)
		return
	}
	http.Redirect(w, r, "/admin/users?done=active", http.StatusSeeOther)
}

// createToken makes an API token and shows it once, on this answer only.
func (s *Server) createToken(w http.ResponseWriter, r *http.Request) {
	user := r.PostFormValue("user")
	label := strings.TrimSpace(r.PostFormValue("label"))
	raw, _, err := s.db.CreateToken(r.Context(), who(r).user.Name, user, label)
	if err != nil {
		s.adminFail(w, r, err, nil)
		return
	}
	s.showAdmin(w, r, http.StatusOK, adminData{NewToken: raw, TokenFor: user})
}

func (s *Server) revokeToken(w http.ResponseWriter, r *http.Request) {
	id, err := strconv.ParseInt(chi.URLParam(r, "tok"), 10, 64)
	if err != nil {
		s.badRequest(w, r, "token id "+strconv.Quote(chi.URLParam(r, "tok"))+" is not a whole number")
		return
	}
	if err := s.db.RevokeToken(r.Context(), who(r).user.Name, id); err != nil {
		s.adminFail(w, r, err, nil)
		return
	}
	http.Redirect(w, r, "/admin/users?done=revoked", http.StatusSeeOther)
}

// pathParam is a path segment of the route, unescaped. The router
// matches on the escaped path when the request's path has escapes that
// decoding would lose (a "%2F" in a name), and then gives the segment
// escaped.
func (s *Server) pathParam(w http.ResponseWriter, r *http.Request, key string) (string, bool) {
	v := chi.URLParam(r, key)
	if r.URL.RawPath == "" {
		return v, true
	}
	u, err := url.PathUnescape(v)
	if err != nil {
		s.badRequest(w, r, "the address part "+strconv.Quote(v)+" is not a valid escaped name")
		return "", false
	}
	return u, true
}

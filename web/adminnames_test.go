package web

import (
	"database/sql"
	"net/http"
	"net/url"
	"regexp"
	"strings"
	"testing"

	"lotwatch/store"

	_ "github.com/jackc/pgx/v5/stdlib"
	_ "github.com/mattn/go-sqlite3"
)

// TestAdminFormsTargetTheirOwnUser: a user name that looks like a path
// ("viewer1/active#x", possible in a database written before such names
// were refused) gets forms whose addresses lead to that user. Before the
// names were escaped, its Reset form posted to /admin/users/viewer1/active
// (the browser drops "#x"), which deactivated viewer1.
func TestAdminFormsTargetTheirOwnUser(t *testing.T) {
	e := newTestEnv(t)
	const odd = "viewer1/active#x"
	// The row goes in behind the store's back, as the store refuses
	// such a name now; $1 is a parameter to both databases.
	driver := "sqlite3"
	if store.IsURL(e.dbPath) {
		driver = "pgx"
	}
	raw, err := sql.Open(driver, e.dbPath)
	if err != nil {
		t.Fatal(err)
	}
	defer raw.Close()
	if _, err := raw.Exec(`INSERT INTO users (name, role, password_hash, active, created)
		SELECT $1, role, password_hash, 1, created FROM users WHERE name = 'viewer1'`, odd); err != nil {
		t.Fatal(err)
	}
	admin := e.signIn(t, "admin1", testPassword)
	page := e.do(req{method: "GET", path: "/admin/users", cookie: admin}).Body.String()
	// The row of the odd user: its password form's address, as the
	// browser resolves it (the fragment is not sent).
	actions := regexp.MustCompile(`action="(/admin/users/[^"]*/password)"`).FindAllStringSubmatch(page, -1)
	var target string
	for _, a := range actions {
		if strings.Contains(a[1], "viewer1") && a[1] != "/admin/users/viewer1/password" {
			target = strings.ReplaceAll(a[1], "&amp;", "&")
		}
	}
	if target == "" {
		t.Fatalf("no password form for %q on the page", odd)
	}
	u, err := url.Parse(target)
	if err != nil {
		t.Fatal(err)
	}
	u.Fragment = ""
	const newPassword = "a-new-long-password"
	rec := e.do(req{method: "POST", path: u.String(), cookie: admin, form: true, headers: sameOrigin(),
		body: url.Values{"password": {newPassword}}.Encode()})
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("POST %s: %d %.300s", u, rec.Code, rec.Body.String())
	}
	if _, err := e.db.Authenticate(t.Context(), odd, newPassword); err != nil {
		t.Errorf("the odd user's password was not reset: %v", err)
	}
	v, err := e.db.UserByName(t.Context(), "viewer1")
	if err != nil || !v.Active {
		t.Errorf("viewer1 after the odd user's reset: %+v %v, want active", v, err)
	}
	if _, err := e.db.Authenticate(t.Context(), "viewer1", testPassword); err != nil {
		t.Errorf("viewer1's password changed: %v", err)
	}
}

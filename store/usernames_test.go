package store

import (
	"errors"
	"testing"
)

// TestUserNamesFitInAPath: a user name is a path segment of the admin
// pages (/admin/users/NAME/password), so the characters that end or
// split a segment, and control characters, are refused. A name such as
// "viewer/active#x" made a form for that user post to viewer's address.
func TestUserNamesFitInAPath(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		for _, name := range []string{"viewer/active#x", "a/b", "who?", "x#1", "tab\there", "nul\x00x", "bell\a", "del\x7f", "next\u0085line"} {
			if _, err := db.AddUser(ctx, "root", name, RoleViewer, "longenough"); !errors.Is(err, ErrInvalid) {
				t.Errorf("AddUser(%q): %v, want ErrInvalid", name, err)
			}
		}
		for _, name := range []string{"qe.lead", "o'neil", "ann+1", "kim_2", "100%", "müller"} {
			if _, err := db.AddUser(ctx, "root", name, RoleViewer, "longenough"); err != nil {
				t.Errorf("AddUser(%q): %v, want it added", name, err)
			}
		}
	})
}

// TestTokenLabelsAreOneLine: a token label is shown in lists and logs
// one per line; a newline or another control character in it could
// forge a line, so it is refused.
func TestTokenLabelsAreOneLine(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		if _, err := db.AddUser(ctx, "root", "station", RoleInspector, "longenough"); err != nil {
			t.Fatal(err)
		}
		for _, label := range []string{"line 3\nrevoked", "cr\rhere", "tab\tlabel", "esc\x1b[31m"} {
			if _, _, err := db.CreateToken(ctx, "root", "station", label); !errors.Is(err, ErrInvalid) {
				t.Errorf("CreateToken label %q: %v, want ErrInvalid", label, err)
			}
		}
		if _, _, err := db.CreateToken(ctx, "root", "station", "line 3 — left bench"); err != nil {
			t.Errorf("a plain label: %v", err)
		}
		toks, err := db.Tokens(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if len(toks) != 1 {
			t.Errorf("%d tokens stored, want only the plain one", len(toks))
		}
	})
}

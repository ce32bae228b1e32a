package main

import (
	"lotwatch/store/storetest"
	"strings"
	"testing"
)

// TestCLIUserAddRefusesPathCharacters: a name that would split the users
// page's form addresses is refused, naming it, before a password is
// asked for.
func TestCLIUserAddRefusesPathCharacters(t *testing.T) {
	db := storetest.DB(t)
	for _, name := range []string{"viewer/active#x", "who?", "line\nbreak"} {
		code, _, errs := runCLI(t, "", "user", "add", "--db", db, "--name", name, "--role", "viewer")
		if code != exitUsage || !strings.Contains(errs, "name") || strings.Contains(errs, "password") {
			t.Errorf("user add --name %q: exit %d, %q; want 2 naming the name, before any password", name, code, errs)
		}
	}
}

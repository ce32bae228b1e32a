package web

import (
	"os"
	"strings"
	"testing"

	"lotwatch/store"
)

// readmeRoles reads the table of roles in README.md: role → what it may
// do, in the README's words.
func readmeRoles(t *testing.T) map[store.Role]string {
	t.Helper()
	b, err := os.ReadFile("../README.md")
	if err != nil {
		t.Fatal(err)
	}
	out := map[store.Role]string{}
	for _, line := range strings.Split(string(b), "\n") {
		cells := strings.Split(strings.Trim(line, "| "), " | ")
		if len(cells) != 2 {
			continue
		}
		if r, err := store.ParseRole(cells[0]); err == nil && strings.TrimSpace(cells[0]) != "" {
			out[r] = cells[1]
		}
	}
	if len(out) != 4 {
		t.Fatalf("README's table of roles has %d roles, want 4: %v", len(out), out)
	}
	return out
}

// TestRolesAsWrittenInREADME holds the route table to README's table of
// roles: each thing the table gives a role is a route whose least role is
// that role. The authorization matrix (authz_matrix_test.go) then checks
// every route against every role.
func TestRolesAsWrittenInREADME(t *testing.T) {
	table := readmeRoles(t)
	e := newTestEnv(t)
	least := map[string]store.Role{}
	for _, rt := range e.srv.routes() {
		least[rt.method+" "+rt.pattern] = rt.min
	}
	for _, c := range []struct {
		phrase string
		routes []string
	}{
		{"read the status board", []string{"GET /", "GET /processes/{id}", "GET /lots/{lot}", "GET /review", "GET /plan", "GET /attention"}},
		{"log lots", []string{"POST /processes/{id}/lots", "POST /upload", "POST /api/v1/processes/{id}/lots"}},
		{"correct and void lots", []string{"POST /lots/{lot}/correct", "POST /lots/{lot}/void"}},
		{"record and close assignable causes", []string{"POST /lots/{lot}/causes", "POST /lots/{lot}/causes/{ann}/close", "POST /api/v1/processes/{id}/lots/{lot}/causes"}},
		{"add and change processes", []string{"POST /settings/processes", "POST /processes/{id}/settings"}},
		{"freeze limit sets", []string{"POST /processes/{id}/limits"}},
		{"set the plant's time zone", []string{"POST /settings/plant"}},
		{"manage users and API tokens", []string{"POST /admin/users", "POST /admin/tokens"}},
	} {
		var role store.Role
		for r, what := range table {
			if strings.Contains(what, c.phrase) {
				role = r
			}
		}
		if role == "" {
			t.Errorf("README's table of roles does not say who may %q", c.phrase)
			continue
		}
		for _, rt := range c.routes {
			got, ok := least[rt]
			if !ok {
				t.Errorf("no route %s", rt)
			} else if got != role {
				t.Errorf("%s needs %s, but README gives %q to %s", rt, got, c.phrase, role)
			}
		}
	}
}

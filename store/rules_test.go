package store

import "testing"

// TestCheckRules holds a process's rule set to the rules that exist: the
// Western Electric handbook (1956) has four run rules and Nelson (1984,
// Journal of Quality Technology 16:237–239) eight tests (both from memory).
func TestCheckRules(t *testing.T) {
	for _, tc := range []struct {
		rules string
		ok    bool
	}{
		{"we", true},
		{"nelson", true},
		{"none", true},
		{"we1,we4,nelson8", true},
		{"we5", false}, // there is no fifth Western Electric rule
		{"we8", false},
		{"nelson9", false},
		{"WE1", false},
		{"we1,", false},
		{"", false},
	} {
		if err := CheckRules(tc.rules); (err == nil) != tc.ok {
			t.Errorf("CheckRules(%q) = %v, want ok=%v", tc.rules, err, tc.ok)
		}
	}
}

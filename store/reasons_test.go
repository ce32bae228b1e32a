package store

import (
	"context"
	"errors"
	"strings"
	"testing"
)

// TestReasonsAreCheckedText: every reason a user gives for a change (a
// correction, a void, a process change, frozen limits and the lots they
// leave out, a user made inactive) is held to the rules of a note: clean
// UTF-8 without NUL, at most 4000 bytes; the required ones must not be
// empty. A refused change names the field and leaves the lots, the limit
// sets, the users and the audit trail as they were.
func TestReasonsAreCheckedText(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		ctx := context.Background()
		db, p := badInputDB(t, open)
		if _, err := db.AddUser(ctx, "tester", "kim", RoleInspector, "a long enough password"); err != nil {
			t.Fatal(err)
		}
		lot := lotsOf(t, db, p)[0]
		long := strings.Repeat("r", 4001)
		freeze := func(reason string, excluded map[string]string) error {
			_, err := db.FreezeLimitSet(ctx, "tester", LimitSet{ProcessID: p.ID, Method: "sigma", K: 3, Center: 0.02, Excluded: excluded, Reason: reason})
			return err
		}
		cases := []struct {
			name   string
			change func() error
			field  string
			reason string
		}{
			{"correction reason empty", func() error { _, err := db.CorrectLot(ctx, "tester", " ", lot.ID, lot.LotInput); return err }, "reason", "is empty: say why the lot changes"},
			{"correction reason with NUL", func() error { _, err := db.CorrectLot(ctx, "tester", "mis\x00count", lot.ID, lot.LotInput); return err }, "reason", "must not contain NUL"},
			{"correction reason not UTF-8", func() error { _, err := db.CorrectLot(ctx, "tester", "mis\xffcount", lot.ID, lot.LotInput); return err }, "reason", "is not valid UTF-8"},
			{"correction reason 4001 bytes", func() error { _, err := db.CorrectLot(ctx, "tester", long, lot.ID, lot.LotInput); return err }, "reason", "is longer than 4000 bytes"},
			{"void reason 4001 bytes", func() error { return db.VoidLot(ctx, "tester", long, lot.ID) }, "reason", "is longer than 4000 bytes"},
			{"void reason with NUL", func() error { return db.VoidLot(ctx, "tester", "\x00", lot.ID) }, "reason", "must not contain NUL"},
			{"process change reason not UTF-8", func() error { _, err := db.UpdateProcess(ctx, "tester", "\xfe", p); return err }, "reason", "is not valid UTF-8"},
			{"process change reason empty", func() error { _, err := db.UpdateProcess(ctx, "tester", "", p); return err }, "reason", "is empty"},
			{"limits reason 4001 bytes", func() error { return freeze(long, nil) }, "reason", "is longer than 4000 bytes"},
			{"limits reason empty", func() error { return freeze("\t", nil) }, "reason", "is empty: say why the limits are frozen"},
			{"excluded lot reason with NUL", func() error { return freeze("baseline", map[string]string{lot.Lot: "spill\x00"}) }, "excluded", "has a reason that must not contain NUL"},
			{"excluded lot reason 4001 bytes", func() error { return freeze("baseline", map[string]string{lot.Lot: long}) }, "excluded", "has a reason that is longer than 4000 bytes"},
			{"deactivation reason not UTF-8", func() error { return db.SetUserActive(ctx, "tester", "kim", false, "left\xff") }, "reason", "is not valid UTF-8"},
		}
		for _, tc := range cases {
			t.Run(tc.name, func(t *testing.T) {
				before, audit := exportOf(t, db, p), auditOf(t, db)
				sets, err := db.LimitSets(ctx, p.ID)
				if err != nil {
					t.Fatal(err)
				}
				err = tc.change()
				var ve *ValidationError
				if !errors.As(err, &ve) || !errors.Is(err, ErrInvalid) {
					t.Fatalf("error %v, want a validation error", err)
				}
				found := false
				for _, pr := range ve.Problems {
					found = found || pr.Field == tc.field && strings.Contains(pr.Reason, tc.reason)
				}
				if !found {
					t.Errorf("problems %+v, want %s: %q", ve.Problems, tc.field, tc.reason)
				}
				if exportOf(t, db, p) != before || auditOf(t, db) != audit {
					t.Error("a refused change changed the stored lots or the audit trail")
				}
				if after, _ := db.LimitSets(ctx, p.ID); len(after) != len(sets) {
					t.Error("a refused change added a limit set")
				}
				users, err := db.Users(ctx)
				if err != nil {
					t.Fatal(err)
				}
				for _, u := range users {
					if u.Name == "kim" && !u.Active {
						t.Error("a refused change made kim inactive")
					}
				}
			})
		}
	})
}

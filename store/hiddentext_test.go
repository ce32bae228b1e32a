package store

import (
	"errors"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
)

// Invisible characters would let two lots, processes or categories look
// the same on every page and export: U+202E (right-to-left override) and
// U+200B (zero-width space) are Unicode format characters (category Cf,
// Unicode Standard §23.2 "Layout Controls"), refused like control
// characters. An annotation's rule must name a run rule, and a token
// label must be one clean line.
func TestHiddenCharactersRefused(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP, "dent")
		refused := func(what string, err error, field string) {
			t.Helper()
			var ve *ValidationError
			if !errors.As(err, &ve) || ve.Problems[0].Field != field {
				t.Errorf("%s: %v, want a problem naming %s", what, err, field)
			}
		}
		for _, code := range []string{"A\u202E1", "A\u200B1", "\u2060A1", "A\u00AD1"} {
			_, err := db.AddLots(ctx, "t", p.ID, []LotInput{{Lot: code, Inspected: 10}})
			refused("lot code "+strings.ToValidUTF8(code, "?"), err, "lot")
			if err != nil && !strings.Contains(err.Error(), "U+") {
				t.Errorf("lot code %+q: %v does not name the character", code, err)
			}
		}
		_, err := db.AddProcess(ctx, "t", Process{Name: "press\u200B", Chart: spc.ChartP})
		refused("process name", err, "name")
		_, err = db.AddProcess(ctx, "t", Process{Name: "press 2", Chart: spc.ChartP, Categories: []string{"dent\u202E"}})
		refused("category", err, "categories")
		_, err = db.AddLots(ctx, "t", p.ID, []LotInput{{Lot: "A1", Inspected: 10, Inspector: "kim\u200B"}})
		refused("inspector", err, "inspector")

		for _, rule := range []string{"gauge was off", "we", "WE1", "we9", "nelson1,we1"} {
			_, err := db.AddAnnotation(ctx, "t", Annotation{ProcessID: p.ID, Rule: rule, Cause: "c"})
			refused("annotation rule "+rule, err, "rule")
		}
		if _, err := db.AddAnnotation(ctx, "t", Annotation{ProcessID: p.ID, Rule: "nelson3", Cause: "c"}); err != nil {
			t.Errorf("annotation on nelson3: %v", err)
		}
		if _, err := db.AddUser(ctx, "t", "ana", RoleInspector, "a-long-password"); err != nil {
			t.Fatal(err)
		}
		for _, label := range []string{"line 3\nline 4", "line\u202E3"} {
			_, _, err := db.CreateToken(ctx, "t", "ana", label)
			refused("token label", err, "label")
		}
		if lots, _ := db.Lots(ctx, p.ID, time.Time{}, time.Time{}); len(lots) != 0 {
			t.Errorf("%d lots stored, want none", len(lots))
		}
	})
}

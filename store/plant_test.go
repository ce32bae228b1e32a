package store

import (
	"context"
	"errors"
	"testing"

	"lotwatch/spc"
)

// TestPlantTimeZone: new processes given no zone take the plant's (UTC
// until set); setting it needs an IANA name and a reason, changes no
// existing process, and is in the audit trail, which still verifies.
func TestPlantTimeZone(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		ctx := context.Background()
		db, _ := open(t)
		if tz, err := db.PlantTimeZone(ctx); err != nil || tz != "UTC" {
			t.Fatalf("unset plant zone %q, %v; want UTC", tz, err)
		}
		first, err := db.AddProcess(ctx, "qe", Process{Name: "before", Chart: spc.ChartP})
		if err != nil || first.TimeZone != "UTC" {
			t.Fatalf("process before the setting: %q, %v", first.TimeZone, err)
		}
		for _, bad := range []struct{ tz, reason, field string }{
			{"Mars/Olympus", "plant in Berlin", "tz"},
			{"Local", "plant in Berlin", "tz"},
			{"Europe/Berlin", " ", "reason"},
		} {
			err := db.SetPlantTimeZone(ctx, "qe", bad.reason, bad.tz)
			var ve *ValidationError
			if !errors.As(err, &ve) || len(ve.Problems) == 0 || ve.Problems[0].Field != bad.field {
				t.Errorf("SetPlantTimeZone(%q, %q): %v, want a problem with %s", bad.tz, bad.reason, err, bad.field)
			}
		}
		if err := db.SetPlantTimeZone(ctx, "qe", "the plant is in Berlin", "Europe/Berlin"); err != nil {
			t.Fatal(err)
		}
		if tz, _ := db.PlantTimeZone(ctx); tz != "Europe/Berlin" {
			t.Errorf("plant zone %q", tz)
		}
		p, err := db.AddProcess(ctx, "qe", Process{Name: "after", Chart: spc.ChartP})
		if err != nil || p.TimeZone != "Europe/Berlin" {
			t.Errorf("new process zone %q, %v; want the plant's", p.TimeZone, err)
		}
		own, err := db.AddProcess(ctx, "qe", Process{Name: "own zone", Chart: spc.ChartP, TimeZone: "America/Chicago"})
		if err != nil || own.TimeZone != "America/Chicago" {
			t.Errorf("process with its own zone: %q, %v", own.TimeZone, err)
		}
		if again, _ := db.ProcessByName(ctx, "before"); again.TimeZone != "UTC" {
			t.Errorf("an existing process changed zone to %q", again.TimeZone)
		}
		check, err := db.VerifyAudit(ctx)
		if err != nil || !check.OK {
			t.Errorf("audit after the setting: %+v, %v", check, err)
		}
		entries, err := db.AuditFor(ctx, "plant", 0)
		found := false
		for _, e := range entries {
			if e.Entity == "plant" && e.Reason == "the plant is in Berlin" {
				found = true
			}
		}
		if err != nil || !found {
			t.Errorf("no audit entry for the plant's zone (%v)", err)
		}
	})
}

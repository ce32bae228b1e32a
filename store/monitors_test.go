package store

import (
	"errors"
	"testing"

	"lotwatch/spc"
)

// TestProcessMonitors: a process keeps its CUSUM and EWMA settings through
// add, read and update, the audit trail covers them, and values the
// monitors cannot take are refused naming the field.
func TestProcessMonitors(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p, err := db.AddProcess(ctx, "setup", Process{Name: "press", Chart: spc.ChartP, Monitors: spc.Monitors{CUSUMShift: 0.02, CUSUMARL0: 500, EWMALambda: 0.1, EWMAWidth: 2.7}})
		if err != nil {
			t.Fatal(err)
		}
		back, err := db.Process(ctx, p.ID)
		if err != nil || back.Monitors != (spc.Monitors{CUSUMShift: 0.02, CUSUMARL0: 500, EWMALambda: 0.1, EWMAWidth: 2.7}) {
			t.Fatalf("read back %+v, %v", back.Monitors, err)
		}
		back.Monitors = spc.Monitors{EWMALambda: 0.2, EWMAARL0: 500}
		if _, err := db.UpdateProcess(ctx, "setup", "only the EWMA, for 500 lots between false alarms", back); err != nil {
			t.Fatal(err)
		}
		if again, _ := db.Process(ctx, p.ID); again.Monitors != (spc.Monitors{EWMALambda: 0.2, EWMAARL0: 500}) {
			t.Errorf("after update %+v", again.Monitors)
		}
		// A frozen set holds the width designed beside its target.
		ls, err := db.FreezeLimitSet(ctx, "setup", LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.01, Reason: "r",
			Monitors: spc.Monitors{EWMALambda: 0.2, EWMAARL0: 500, EWMAWidth: 2.97}})
		if err != nil {
			t.Fatal(err)
		}
		if sets, err := db.LimitSets(ctx, p.ID); err != nil || len(sets) != 1 || sets[0].Monitors != ls.Monitors {
			t.Errorf("limit set read back %+v %v, want %+v", sets, err, ls.Monitors)
		}
		if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK {
			t.Errorf("audit: %+v %v", chk, err)
		}
		for _, tc := range []struct {
			chart spc.Chart
			m     spc.Monitors
			field string
		}{
			{spc.ChartP, spc.Monitors{CUSUMShift: 1.5}, "cusum_shift"},
			{spc.ChartP, spc.Monitors{CUSUMShift: -0.1}, "cusum_shift"},
			{spc.ChartU, spc.Monitors{CUSUMShift: 0.5, CUSUMARL0: 0.5}, "cusum_arl0"},
			{spc.ChartP, spc.Monitors{CUSUMARL0: 370}, "cusum_arl0"},
			{spc.ChartP, spc.Monitors{EWMALambda: 1.5}, "ewma_lambda"},
			{spc.ChartC, spc.Monitors{EWMAWidth: 3}, "ewma_width"},
			{spc.ChartP, spc.Monitors{EWMALambda: 0.2, EWMAARL0: 0.5}, "ewma_arl0"},
			{spc.ChartP, spc.Monitors{EWMAARL0: 370}, "ewma_arl0"},
			{spc.ChartP, spc.Monitors{EWMALambda: 0.2, EWMAWidth: 3, EWMAARL0: 370}, "ewma_arl0"},
		} {
			_, err := db.AddProcess(ctx, "setup", Process{Name: "bad " + tc.field, Chart: tc.chart, Monitors: tc.m})
			var ve *ValidationError
			if !errors.As(err, &ve) || len(ve.Problems) == 0 || ve.Problems[0].Field != tc.field {
				t.Errorf("%+v: %v, want a problem with %s", tc.m, err, tc.field)
			}
		}
	})
}

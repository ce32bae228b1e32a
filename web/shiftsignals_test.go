package web

import (
	"encoding/json"
	"fmt"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
	"lotwatch/store"
)

// TestShiftSignalsOnTheChart: a process set up with a CUSUM and an EWMA
// gets their signals, of kind "shift", in the API's chart answer beside
// the run-rule signals, on a sustained rise from 1 % to about 2.7 % in
// lots of 200 that no single lot shows beyond its 3σ limit; the chart
// page lists them.
func TestShiftSignalsOnTheChart(t *testing.T) {
	e := newTestEnv(t)
	ctx := t.Context()
	p := e.proc
	p.Monitors = spc.Monitors{CUSUMShift: 0.02, EWMALambda: 0.2}
	p, err := e.db.UpdateProcess(ctx, "setup", "watch for a small rise", p)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.db.FreezeLimitSet(ctx, "setup", store.LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.01, SigmaZ: 1,
		EffectiveFrom: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC), Reason: "the customer's 1 %"}); err != nil {
		t.Fatal(err)
	}
	var in []store.LotInput
	t0 := time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)
	for i := 0; i < 60; i++ {
		d := int64([]int{2, 1, 3, 2, 2}[i%5])
		if i >= 40 {
			d = int64([]int{5, 6, 4, 6, 5}[i%5])
		}
		in = append(in, store.LotInput{Lot: fmt.Sprintf("R%02d", i), Time: t0.Add(time.Duration(i) * time.Hour), Inspected: 200, Count: d})
	}
	if _, err := e.db.AddLots(ctx, "setup", p.ID, in); err != nil {
		t.Fatal(err)
	}
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/chart", p.ID), token: e.tokens[store.RoleViewer]})
	if rec.Code != 200 {
		t.Fatalf("status %d: %s", rec.Code, rec.Body)
	}
	var got chartjson.Chart
	if err := json.Unmarshal(rec.Body.Bytes(), &got); err != nil {
		t.Fatal(err)
	}
	kinds := map[string]int{}
	for _, s := range got.Signals {
		if s.Kind == "shift" {
			kinds[s.Rule]++
			if s.First < 38 {
				t.Errorf("shift signal before the rise: %+v", s)
			}
		} else if s.Kind == "" {
			t.Errorf("signal without a kind: %+v", s)
		}
	}
	if kinds["cusum"] == 0 || kinds["ewma"] == 0 {
		t.Errorf("shift signals %v in %+v", kinds, got.Signals)
	}
	c := e.signIn(t, "viewer1", testPassword)
	page := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d?period=all", p.ID), cookie: c})
	if page.Code != 200 || !strings.Contains(page.Body.String(), "cusum") {
		t.Errorf("chart page %d does not list the CUSUM signal", page.Code)
	}
	// The summary counts the small shifts apart from the run rules'
	// patterns, as the API's kinds do.
	shifts := kinds["cusum"] + kinds["ewma"]
	want := plural(shifts, "small-shift signal", "small-shift signals")
	if !strings.Contains(page.Body.String(), "▲ "+plural(len(got.Signals)-shifts, "run-rule signal", "run-rule signals")+" and "+want) &&
		!strings.Contains(page.Body.String(), "▲ "+want) {
		t.Errorf("chart page summary does not count %s", want)
	}
}

// TestPlanPageComparesCUSUM: for a lot size and a shift, the planning
// page says whether the chart or a CUSUM with no more false alarms
// catches the shift sooner, and sets an EWMA beside them (here the CUSUM: lots of 200 at 2 %, a shift
// to 4 %).
func TestPlanPageComparesCUSUM(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 40, func(i int) int64 { return 4 }) // 4 of 200 each: p̄ = 0.02
	c := e.signIn(t, "viewer1", testPassword)
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/plan?process=%d&p1=0.04&n=200", e.proc.ID), cookie: c})
	body := rec.Body.String()
	if rec.Code != 200 || !strings.Contains(body, `id="plan-cusum"`) || !strings.Contains(body, "catches this shift sooner") {
		t.Errorf("status %d; the page does not compare the CUSUM:\n%.2000s", rec.Code, body)
	}
	// The EWMA beside them: the design spc.BestEWMA makes for no more
	// false alarms than the chart, its figures as the page states them.
	pl := spc.PlanLimits(0.02, 200, 3).WithShift(0.04)
	ewma, arl1, err := spc.BestEWMA(spc.ChartP, 0.02, 0.04, []int64{200}, pl.ARL0)
	if err != nil {
		t.Fatal(err)
	}
	want := fmt.Sprintf("An EWMA of the rates (weight %g, limits at %.2f standard deviations, a false alarm once every %.1f lots) signals this shift after %.1f lots on average",
		ewma.Lambda, ewma.L, ewma.ARL0, arl1)
	if !strings.Contains(body, `id="plan-ewma"`) || !strings.Contains(body, want) {
		t.Errorf("the page does not set the EWMA beside the chart, %q:\n%.3000s", want, body)
	}
}

// TestFrozenLimitsFreezeMonitors: freezing limits on the limits page
// freezes the process's CUSUM (with a decision interval designed from the
// baseline) and EWMA; a later change of the process's monitors leaves the
// judged chart on the frozen ones.
func TestFrozenLimitsFreezeMonitors(t *testing.T) {
	e := newTestEnv(t)
	ctx := t.Context()
	p := e.proc
	p.Monitors = spc.Monitors{CUSUMShift: 0.04, EWMALambda: 0.3, EWMAWidth: 2.8}
	p, err := e.db.UpdateProcess(ctx, "setup", "watch for a rise", p)
	if err != nil {
		t.Fatal(err)
	}
	e.addLots(t, 30, func(i int) int64 { return int64(2 + i%4) })
	c := e.signIn(t, "engineer1", testPassword)
	rec := e.do(req{method: "POST", path: fmt.Sprintf("/processes/%d/limits", p.ID), cookie: c,
		body: "reason=thirty+lots+in+control", form: true})
	if rec.Code >= 400 {
		t.Fatalf("freeze: status %d: %.500s", rec.Code, rec.Body.String())
	}
	sets, err := e.db.LimitSets(ctx, p.ID)
	if err != nil || len(sets) != 1 {
		t.Fatalf("sets %+v %v", sets, err)
	}
	m := sets[0].Monitors
	if m.CUSUMShift != 0.04 || !(m.CUSUMH > 0) || m.EWMALambda != 0.3 || m.EWMAWidth != 2.8 {
		t.Fatalf("frozen monitors %+v", m)
	}
	p.Monitors = spc.Monitors{EWMALambda: 0.1}
	if _, err := e.db.UpdateProcess(ctx, "setup", "try another weight", p); err != nil {
		t.Fatal(err)
	}
	rec = e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/chart", p.ID), token: e.tokens[store.RoleViewer]})
	if rec.Code != 200 {
		t.Fatalf("chart: %d", rec.Code)
	}
	if chk, err := e.db.VerifyAudit(ctx); err != nil || !chk.OK {
		t.Errorf("audit: %+v %v", chk, err)
	}
}

// TestProcessFormMonitors: the settings form sets the CUSUM and EWMA of
// a process, and refuses a shift the chart cannot have beside its field,
// changing nothing.
func TestProcessFormMonitors(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "engineer1", testPassword)
	form := func(shift string) string {
		return "name=Final+visual+check&chart=p&method=sigma&k=3&rules=we&categories=scratch,dent&tz=Europe/Berlin&reason=watch+small+shifts" +
			"&cusum_shift=" + shift + "&cusum_arl0=500&ewma_lambda=0.2&ewma_width="
	}
	rec := e.do(req{method: "POST", path: fmt.Sprintf("/processes/%d/settings", e.proc.ID), cookie: c, body: form("0.02"), form: true})
	if rec.Code != 303 {
		t.Fatalf("status %d: %.800s", rec.Code, rec.Body.String())
	}
	p, _ := e.db.Process(t.Context(), e.proc.ID)
	if p.Monitors != (spc.Monitors{CUSUMShift: 0.02, CUSUMARL0: 500, EWMALambda: 0.2}) {
		t.Errorf("monitors %+v", p.Monitors)
	}
	rec = e.do(req{method: "POST", path: fmt.Sprintf("/processes/%d/settings", e.proc.ID), cookie: c, body: form("1.5"), form: true})
	if rec.Code != 400 || !strings.Contains(rec.Body.String(), "1.5") {
		t.Errorf("a shift of 1.5: status %d", rec.Code)
	}
	if again, _ := e.db.Process(t.Context(), e.proc.ID); again.Monitors != p.Monitors {
		t.Errorf("a refused form changed the monitors: %+v", again.Monitors)
	}
}

// TestSettingsStateMonitorCosts: beside the shift monitors' settings, the
// settings page of a process with lots states what they cost as judged
// now: the CUSUM's false alarms and detection (spc.DesignCUSUM over the
// lots' sizes at the trial centre) and the EWMA's false alarms
// (spc.EWMA.ARL likewise); a process without monitors states none.
func TestSettingsStateMonitorCosts(t *testing.T) {
	e := newTestEnv(t)
	lots := e.addLots(t, 40, func(i int) int64 { return int64(2 + i%3) })
	c := e.signIn(t, "engineer1", testPassword)
	page := func() string {
		t.Helper()
		rec := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d/settings", e.proc.ID), cookie: c})
		if rec.Code != 200 {
			t.Fatalf("settings page: %d", rec.Code)
		}
		return rec.Body.String()
	}
	if body := page(); strings.Contains(body, "monitor-cost") {
		t.Errorf("costs stated for a process without monitors")
	}
	p := e.proc
	p.Monitors = spc.Monitors{CUSUMShift: 0.03, EWMALambda: 0.1, EWMAWidth: 2.7}
	if _, err := e.db.UpdateProcess(t.Context(), "setup", "watch for a rise", p); err != nil {
		t.Fatal(err)
	}
	sizes := make([]int64, len(lots))
	var d, n int64
	for i, l := range lots {
		sizes[i] = l.Inspected
		d, n = d+l.Count, n+l.Inspected
	}
	p0 := float64(d) / float64(n) // trial limits: the centre of all lots
	cusum, err := spc.DesignCUSUM(spc.ChartP, p0, 0.03, sizes, spc.DefaultARL0, 0)
	if err != nil {
		t.Fatal(err)
	}
	ewma := spc.EWMA{Chart: spc.ChartP, P0: p0, Lambda: 0.1, L: 2.7}
	body := page()
	for _, want := range []string{
		fmt.Sprintf("the CUSUM (h = %.2f) raises a false alarm once every %.1f lots on average and catches a shift to 0.03 after %.1f lots", cusum.H, cusum.ARL0, cusum.ARL1),
		fmt.Sprintf("the EWMA (weight 0.1, limits at 2.7 standard deviations) raises a false alarm once every %.1f lots on average", ewma.ARL(p0, sizes)),
	} {
		if !strings.Contains(body, want) {
			t.Errorf("the settings page does not say %q:\n%s", want, body[strings.Index(body, "monitors"):])
		}
	}
}

// TestEWMADesignedForFalseAlarms: an EWMA set on the settings form by its
// lots between false alarms, with no width, is drawn with the width
// spc.DesignEWMA gives over the lots' sizes at the chart's centre, and
// freezing limits freezes that width beside the target; a form giving a
// width and a target both is refused beside the target, changing nothing.
func TestEWMADesignedForFalseAlarms(t *testing.T) {
	e := newTestEnv(t)
	ctx := t.Context()
	lots := e.addLots(t, 30, func(i int) int64 { return int64(2 + i%4) })
	c := e.signIn(t, "engineer1", testPassword)
	form := func(width, arl0 string) string {
		return "name=Final+visual+check&chart=p&method=sigma&k=3&rules=we&categories=scratch,dent&tz=Europe/Berlin&reason=watch+small+shifts" +
			"&ewma_lambda=0.1&ewma_width=" + width + "&ewma_arl0=" + arl0
	}
	path := fmt.Sprintf("/processes/%d/settings", e.proc.ID)
	if rec := e.do(req{method: "POST", path: path, cookie: c, body: form("", "500"), form: true}); rec.Code != 303 {
		t.Fatalf("status %d: %.800s", rec.Code, rec.Body.String())
	}
	if rec := e.do(req{method: "POST", path: path, cookie: c, body: form("2.5", "500"), form: true}); rec.Code != 400 ||
		!strings.Contains(rec.Body.String(), "give the width, or the lots between false alarms to design it for, not both") {
		t.Errorf("a width and a target: status %d", rec.Code)
	}
	p, _ := e.db.Process(ctx, e.proc.ID)
	if p.Monitors != (spc.Monitors{EWMALambda: 0.1, EWMAARL0: 500}) {
		t.Fatalf("monitors %+v", p.Monitors)
	}
	sizes := make([]int64, len(lots))
	var d, n int64
	for i, l := range lots {
		sizes[i] = l.Inspected
		d, n = d+l.Count, n+l.Inspected
	}
	want, err := spc.DesignEWMA(spc.ChartP, float64(d)/float64(n), 0.1, sizes, 500)
	if err != nil {
		t.Fatal(err)
	}
	page := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d?period=all", p.ID), cookie: c}).Body.String()
	if legend := fmt.Sprintf("limits at %g standard deviations (a signal beyond them); on average %.0f lots between false alarms", want.L, want.ARL0); !strings.Contains(page, legend) {
		t.Errorf("the chart page does not draw the designed EWMA, %q", legend)
	}
	if rec := e.do(req{method: "POST", path: fmt.Sprintf("/processes/%d/limits", p.ID), cookie: c, body: "reason=thirty+lots+in+control", form: true}); rec.Code >= 400 {
		t.Fatalf("freeze: status %d: %.500s", rec.Code, rec.Body.String())
	}
	sets, err := e.db.LimitSets(ctx, p.ID)
	if err != nil || len(sets) != 1 || sets[0].Monitors != (spc.Monitors{EWMALambda: 0.1, EWMAARL0: 500, EWMAWidth: want.L}) {
		t.Fatalf("frozen monitors %+v %v, want the width %g", sets, err, want.L)
	}
	if chk, err := e.db.VerifyAudit(ctx); err != nil || !chk.OK {
		t.Errorf("audit: %+v %v", chk, err)
	}
}

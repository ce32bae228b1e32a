package web

import (
	"fmt"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// TestBadgesAgreeWithPage: the badge and the limits named on the chart
// page agree with the limit sets and the period shown.
func TestBadgesAgreeWithPage(t *testing.T) {
	e := newTestEnv(t)
	// 30 lots, the last an hour before now; few lots for trial limits and
	// small expected counts, so that the analysis has notes.
	lots := e.addLots(t, 30, func(i int) int64 { return int64(1 + i%3) })
	c := e.signIn(t, "viewer1", testPassword)
	page := func(q string) string {
		t.Helper()
		rec := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d?%s", e.proc.ID, q), cookie: c})
		if rec.Code != 200 {
			t.Fatalf("%s: status %d", q, rec.Code)
		}
		return rec.Body.String()
	}
	// A period with no lot (tomorrow), no set frozen: trial limits, and
	// no notes about the record's 30 lots.
	day := e.clock.Now().In(e.proc.Location()).AddDate(0, 0, 1).Format("2006-01-02")
	body := page("from=" + day + "&to=" + day)
	if !strings.Contains(body, `Judged against <span class="badge trial">`) || strings.Contains(body, "badge frozen") {
		t.Error("no lots, no set frozen: the badge does not say trial limits")
	}
	if strings.Contains(body, "Notes on the limits") {
		t.Error("a period with no lot shows notes on the record's lots")
	}
	// A 7-day period narrower than the record: notes say their scope.
	if body := page("period=all"); strings.Contains(body, "on which the lots of this period are judged") {
		t.Error("the whole record's notes claim a narrower period")
	}

	// Two frozen sets: set 1 (sigma, centre 0.01) from the first lot; set 2
	// (exact, centre 0.02) in force only after the last lot.
	freeze := func(m spc.Method, centre float64, from time.Time) {
		t.Helper()
		if _, err := e.db.FreezeLimitSet(t.Context(), "engineer1", store.LimitSet{ProcessID: e.proc.ID, Method: m, K: 3, Center: centre, SigmaZ: 1,
			BaselineFrom: lots[0].Time, BaselineTo: lots[29].Time, BaselineLots: 30, EffectiveFrom: from, Reason: "test"}); err != nil {
			t.Fatal(err)
		}
	}
	freeze(spc.MethodSigma, 0.01, lots[0].Time)
	freeze(spc.MethodExact, 0.02, lots[29].Time.Add(2*time.Hour))
	body = page("period=all")
	for _, want := range []string{`<span class="badge frozen">frozen limits</span>`, "limit set 1, in force from", "method sigma, centre rate 0.01", "limit set 2 comes into force from"} {
		if !strings.Contains(body, want) {
			t.Errorf("two sets, set 1 judging: page lacks %q", want)
		}
	}
	if strings.Contains(body, "method exact, centre rate 0.02") {
		t.Error("the page names set 2's method and centre while set 1 judges the lots")
	}
	// Once a lot falls after set 2's start, set 2's method and centre.
	e.clock.t = e.clock.t.Add(4 * time.Hour)
	if _, err := e.db.AddLots(t.Context(), "setup", e.proc.ID, []store.LotInput{{Lot: "late", Time: e.clock.Now().Add(-time.Minute), Inspected: 200, Count: 3}}); err != nil {
		t.Fatal(err)
	}
	c = e.signIn(t, "viewer1", testPassword)
	body = page("period=all")
	if !strings.Contains(body, "limit set 2, in force from") || !strings.Contains(body, "method exact, centre rate 0.02") {
		t.Error("set 2 judging the last lot: the page does not name it with its own method and centre")
	}
}

// TestDispersionNoteOnce: an overdispersed record gives its dispersion
// note once on the chart page.
func TestDispersionNoteOnce(t *testing.T) {
	e := newTestEnv(t)
	// Alternating 1 and 19 of 200: far more spread than binomial, lot to
	// lot, with no single wild lot.
	e.addLots(t, 40, func(i int) int64 { return int64(1 + 18*(i%2)) })
	c := e.signIn(t, "viewer1", testPassword)
	body := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d?period=all", e.proc.ID), cookie: c}).Body.String()
	if n := strings.Count(body, "Laney limits, which widen them by σ_z"); n != 1 {
		t.Errorf("dispersion advice shown %d times, want once", n)
	}
}

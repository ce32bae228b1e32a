package web

import (
	"fmt"
	"net/url"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// TestReviewPageFilters: the review page lists every process in its
// summary, filters by part of the name and by area, writes the sections
// only when few processes match, and says when it was generated.
func TestReviewPageFilters(t *testing.T) {
	e := newTestEnv(t)
	loc := e.proc.Location()
	year, week := spc.ISOWeekOf(e.clock.Now(), loc)
	year, week = spc.PreviousISOWeek(year, week)
	start, _ := spc.ISOWeekRange(year, week, loc)
	for i := 0; i < 15; i++ {
		area := "Press shop"
		if i%3 == 0 {
			area = "Paint shop"
		}
		p, err := e.db.AddProcess(t.Context(), "setup", store.Process{Name: fmt.Sprintf("Cell %02d", i), Area: area, Chart: spc.ChartP,
			Method: spc.MethodSigma, K: 3, Rules: "we", TimeZone: "Europe/Berlin", Active: true})
		if err != nil {
			t.Fatal(err)
		}
		if _, err := e.db.AddLots(t.Context(), "setup", p.ID, []store.LotInput{
			{Lot: fmt.Sprintf("C%02d-a", i), Time: start.Add(-24 * time.Hour), Inspected: 100, Count: 2},
			{Lot: fmt.Sprintf("C%02d-b", i), Time: start.Add(24 * time.Hour), Inspected: 100, Count: 3}}); err != nil {
			t.Fatal(err)
		}
	}
	c := e.signIn(t, "viewer1", testPassword)
	get := func(q url.Values) string {
		t.Helper()
		q.Set("week", spc.FormatISOWeek(year, week))
		rec := e.do(req{method: "GET", path: "/review?" + q.Encode(), cookie: c})
		if rec.Code != 200 {
			t.Fatalf("%v: status %d", q, rec.Code)
		}
		return rec.Body.String()
	}
	all := get(url.Values{})
	if n := strings.Count(all, `class="lw-process"`); n != 0 {
		t.Errorf("16 processes: %d sections written, want the summary alone", n)
	}
	if n := strings.Count(all, "<tr><td><a href="); n != 16 {
		t.Errorf("summary has %d linked rows, want 16", n)
	}
	for _, want := range []string{"Generated at", "Lots needing attention", `<option>Paint shop</option>`, "chance alone would give about 0.8"} {
		if !strings.Contains(all, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	paint := get(url.Values{"area": {"Paint shop"}})
	if n := strings.Count(paint, `class="lw-process"`); n != 5 {
		t.Errorf("Paint shop: %d sections, want 5", n)
	}
	one := get(url.Values{"process": {"cell 07"}})
	if n := strings.Count(one, `class="lw-process"`); n != 1 || !strings.Contains(one, "Cell 07") || strings.Contains(one, "Cell 08") {
		t.Errorf("filter cell 07: %d sections", n)
	}
}

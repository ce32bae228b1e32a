package web

import (
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"testing"

	"lotwatch/spc/chartjson"
	"lotwatch/store"
)

// TestAPIChartIsPaged: the API's chart of a long record answers at most
// maxChartPage lots at a time with the cursor of the next page, and the
// pages together hold every lot once, in order. Before the pages, the
// whole record came in one answer (a probe got 34 MB for 100,000 lots).
func TestAPIChartIsPaged(t *testing.T) {
	if testing.Short() {
		t.Skip("stores more lots than one page")
	}
	e := newTestEnv(t)
	n := maxChartPage + 1500
	// The rate rises half-way, so that a run-rule signal lasts thousands of lots.
	e.addLots(t, n, func(i int) int64 { return int64(i%7) + 1 + int64(i/(n/2))*6 })
	get := func(query string) chartjson.Chart {
		t.Helper()
		rec := e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/chart%s", e.proc.ID, query), token: e.tokens[store.RoleViewer]})
		if rec.Code != http.StatusOK {
			t.Fatalf("GET chart%s: %d %.300s", query, rec.Code, rec.Body.String())
		}
		return decodeJSON[chartjson.Chart](t, rec)
	}
	first := get("")
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/chart", e.proc.ID), token: e.tokens[store.RoleViewer]})
	t.Logf("%d lots: the first page has %d lots in %d bytes", n, maxChartPage, rec.Body.Len())
	if len(first.Lots) != maxChartPage || first.Next == "" || first.Total != n {
		t.Fatalf("the first page has %d lots, next %q, total %d; want %d, a cursor and %d", len(first.Lots), first.Next, first.Total, maxChartPage, n)
	}
	// Smaller pages, following the cursors, hold every lot once, in order.
	var codes []string
	cursor, longest := "", 0
	for pages := 0; ; pages++ {
		q := "?limit=4000"
		if cursor != "" {
			q += "&cursor=" + url.QueryEscape(cursor)
		}
		pg := get(q)
		if len(pg.Lots) > 4000 {
			t.Fatalf("page %d has %d lots, more than its limit", pages, len(pg.Lots))
		}
		for _, l := range pg.Lots {
			codes = append(codes, l.Lot)
		}
		for _, sg := range pg.Signals {
			if sg.First < 0 || sg.Last >= len(pg.Lots) || sg.First > sg.Last {
				t.Fatalf("page %d: signal %s at %d…%d outside the page's %d lots", pages, sg.Rule, sg.First, sg.Last, len(pg.Lots))
			}
			if len(sg.Lots) != sg.Last-sg.First+1 || sg.Lots[0] != pg.Lots[sg.First].Lot {
				t.Fatalf("page %d: signal %s at %d…%d lists %d lots from %s, want those of the page", pages, sg.Rule, sg.First, sg.Last, len(sg.Lots), sg.Lots[0])
			}
			longest = max(longest, len(sg.Lots))
		}
		if cursor = pg.Next; cursor == "" {
			break
		}
		if pages > n/4000+1 {
			t.Fatal("the cursors do not end")
		}
	}
	if len(codes) != n {
		t.Fatalf("the pages hold %d lots, the record %d", len(codes), n)
	}
	if longest < 1000 {
		t.Errorf("the longest signal on a page has %d lots: the record does not test long signals", longest)
	}
	for i, c := range codes {
		if c != lotCode(i) {
			t.Fatalf("lot %d of the pages is %s, want %s", i, c, lotCode(i))
		}
	}
	// Beyond the maximum, and a made-up cursor, are refused naming the parameter.
	for _, q := range []string{fmt.Sprintf("?limit=%d", maxChartPage+1), "?limit=0", "?cursor=not-a-cursor"} {
		rec := e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/chart%s", e.proc.ID, q), token: e.tokens[store.RoleViewer]})
		name := strings.TrimPrefix(strings.SplitN(q, "=", 2)[0], "?")
		if rec.Code != http.StatusBadRequest || !strings.Contains(rec.Body.String(), name) {
			t.Errorf("GET chart%s: %d %s, want 400 naming %q", q, rec.Code, rec.Body.String(), name)
		}
	}
}

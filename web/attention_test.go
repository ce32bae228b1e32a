package web

import (
	"context"
	"fmt"
	"html"
	"maps"
	"net/http"
	"net/url"
	"regexp"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/storejson"
)

// TestAPIAttention walks the contract of issue 11: a lot out of limits is
// listed by /api/v1/attention whatever its age; a cause or "no
// assignable cause found" posted for it by its code takes it off the
// list, and lands in the audit trail and on the lot page; bad input is
// refused naming the field and changes nothing; an unknown lot is 404.
func TestAPIAttention(t *testing.T) {
	e := newTestEnv(t)
	// 40 lots alternating 1/200 and 5/200, with two of 30/200: p̄ ≈
	// 0.022, σ ≈ 0.0103, UCL ≈ 0.053 (p̄ ± 3√(p̄(1−p̄)/n), Montgomery,
	// Introduction to Statistical Quality Control, §7.2): lots 10 and 30
	// far beyond it, and no run rule met by the alternating lots.
	lots := e.addLots(t, 40, func(i int) int64 {
		switch {
		case i == 10 || i == 30:
			return 30
		case i%2 == 0:
			return 1
		}
		return 5
	})
	// The second is renamed to a code a path must escape.
	odd := "N/23 #1 50%"
	if _, err := e.db.CorrectLot(context.Background(), "setup", "code as on the label", lots[30].ID, store.LotInput{Lot: odd, Time: lots[30].Time, Inspected: 200, Count: 30}); err != nil {
		t.Fatal(err)
	}
	e.clock.Advance(90 * 24 * 3600e9) // a quarter later, still unexplained
	viewer := e.tokens[store.RoleViewer]
	list := func() []attentionJSON {
		t.Helper()
		rec := e.do(req{method: "GET", path: "/api/v1/attention", token: viewer})
		if rec.Code != http.StatusOK {
			t.Fatalf("GET /api/v1/attention: %d %s", rec.Code, rec.Body.String())
		}
		return decodeJSON[[]attentionJSON](t, rec)
	}
	got := list()
	if len(got) != 2 || got[0].Lot != lotCode(10) || got[1].Lot != odd || got[0].Kind != "out_of_limits" ||
		got[0].ProcessID != e.proc.ID || got[0].Process != e.proc.Name || got[0].LotID != lots[10].ID || got[0].Rules == nil {
		t.Fatalf("attention %+v", got)
	}
	if !strings.Contains(got[0].Time, "T") || got[0].Time > got[1].Time {
		t.Errorf("times %q, %q: not RFC 3339 oldest first", got[0].Time, got[1].Time)
	}

	insp := e.tokens[store.RoleInspector]
	path := func(code string) string {
		return "/api/v1/processes/" + formatID(e.proc.ID) + "/lots/" + url.PathEscape(code) + "/causes"
	}
	bad := []struct {
		name, code, body, field string
		status                  int
	}{
		{"no cause", lotCode(10), `{"action": "x"}`, "cause", 400},
		{"blank cause", lotCode(10), `{"cause": "  "}`, "cause", 400},
		{"cause not a string", lotCode(10), `{"cause": 3}`, "cause", 400},
		{"unknown field", lotCode(10), `{"cause": "die", "severity": "high"}`, "severity", 400},
		{"no cause found without reason", lotCode(10), `{"no_cause_found": true}`, "reason", 400},
		{"no cause found not a boolean", lotCode(10), `{"no_cause_found": "yes", "reason": "noise"}`, "no_cause_found", 400},
		{"both", lotCode(10), `{"no_cause_found": true, "reason": "noise", "cause": "die"}`, "cause", 400},
		{"not an object", lotCode(10), `["die"]`, "body", 400},
		{"unknown lot", "NO-SUCH-LOT", `{"cause": "die"}`, "", 404},
	}
	for _, c := range bad {
		rec := e.do(req{method: "POST", path: path(c.code), body: c.body, token: insp})
		if rec.Code != c.status {
			t.Errorf("%s: status %d, want %d: %s", c.name, rec.Code, c.status, rec.Body.String())
			continue
		}
		if c.field != "" {
			ae := decodeJSON[apiError](t, rec)
			if len(ae.Problems) == 0 || ae.Problems[0].Field != c.field || !strings.Contains(ae.Error, c.field) {
				t.Errorf("%s: %+v, want a problem naming %q", c.name, ae, c.field)
			}
		}
	}
	if anns, _ := e.db.Annotations(context.Background(), e.proc.ID); len(anns) != 0 {
		t.Fatalf("refused posts stored %+v", anns)
	}
	if rec := e.do(req{method: "POST", path: path(lotCode(10)), body: `{"cause": "die"}`, token: viewer}); rec.Code != http.StatusForbidden {
		t.Errorf("viewer posting a cause: %d", rec.Code)
	}

	rec := e.do(req{method: "POST", path: path(lotCode(10)), body: `{"cause": "film torn at the splice", "action": "splice redone"}`, token: insp})
	if rec.Code != http.StatusCreated {
		t.Fatalf("posting a cause: %d %s", rec.Code, rec.Body.String())
	}
	c := decodeJSON[storejson.Annotation](t, rec)
	if c.LotID != lots[10].ID || c.Cause != "film torn at the splice" || c.Closed || c.By != "inspector1" || c.ID == 0 {
		t.Errorf("stored cause %+v", c)
	}
	if got := list(); len(got) != 1 || got[0].Lot != odd {
		t.Errorf("after the cause: %+v", got)
	}
	if page := e.do(req{method: "GET", path: "/lots/" + formatID(lots[30].ID), cookie: e.signIn(t, "viewer1", testPassword)}).Body.String(); !strings.Contains(page, "This lot needs attention:</strong> out of limits") {
		t.Errorf("the lot page of an unexplained lot does not say it needs attention")
	}
	rec = e.do(req{method: "POST", path: path(odd), body: `{"no_cause_found": true, "reason": "re-inspected: gauge, film batch and operator all as usual"}`, token: insp})
	if rec.Code != http.StatusCreated {
		t.Fatalf("posting no cause found for %q: %d %s", odd, rec.Code, rec.Body.String())
	}
	if c := decodeJSON[storejson.Annotation](t, rec); !c.NoCauseFound || !c.Closed || c.LotID != lots[30].ID {
		t.Errorf("stored finding %+v", c)
	}
	if got := list(); len(got) != 0 {
		t.Errorf("after both: %+v", got)
	}

	// The audit trail and the lot page carry both.
	for _, l := range []store.Lot{lots[10], lots[30]} {
		page := e.do(req{method: "GET", path: "/lots/" + formatID(l.ID), cookie: e.signIn(t, "viewer1", testPassword)}).Body.String()
		switch l.ID {
		case lots[10].ID:
			if !strings.Contains(page, "film torn at the splice") {
				t.Errorf("lot page of %s lacks its cause", l.Lot)
			}
		default:
			if !strings.Contains(page, "No assignable cause found") || !strings.Contains(page, "gauge, film batch and operator") {
				t.Errorf("lot page of the odd lot lacks the finding")
			}
		}
	}
	entries, err := e.db.AuditFor(context.Background(), "annotation", c.ID)
	if err != nil || len(entries) != 1 || entries[0].Actor != "inspector1" {
		t.Errorf("audit of the cause: %+v %v", entries, err)
	}
	if chk, err := e.db.VerifyAudit(context.Background()); err != nil || !chk.OK {
		t.Errorf("audit check: %+v %v", chk, err)
	}
}

// nightShiftEnv is a plant at 05:30 in Europe/Berlin whose only process
// logged 47 lots in control over two days, and last night at 23:01 a lot
// far out of limits (N-OUT) that nobody has explained.
func nightShiftEnv(t *testing.T) (*testEnv, store.Lot) {
	t.Helper()
	e := newTestEnv(t)
	loc := e.proc.Location()
	now := time.Date(2026, 12, 2, 5, 30, 0, 0, loc)
	e.clock.t = now
	var in []store.LotInput
	start := now.Add(-50 * time.Hour)
	for i := range 47 {
		in = append(in, store.LotInput{Lot: lotCode(i), Time: start.Add(time.Duration(i) * time.Hour / 2), Shift: "early", Inspected: 200, Count: []int64{1, 5}[i%2]})
	}
	in = append(in, store.LotInput{Lot: "N-OUT", Time: time.Date(2026, 12, 1, 23, 1, 0, 0, loc), Shift: "night", Inspected: 200, Count: 40})
	lots, err := e.db.AddLots(context.Background(), "setup", e.proc.ID, in)
	if err != nil {
		t.Fatal(err)
	}
	return e, lots[len(lots)-1]
}

// TestBoardNightShift: at 05:30 the board and the worklist show last
// night's unexplained lot, never "nothing needs attention"; the bulk form
// of the worklist records its cause and both clear.
func TestBoardNightShift(t *testing.T) {
	e, bad := nightShiftEnv(t)
	c := e.signIn(t, "inspector1", testPassword)
	board := e.do(req{method: "GET", path: "/", cookie: c}).Body.String()
	for _, want := range []string{"1 lot needs attention in 1 process", "N-OUT", "no lots today", "1 lot needs attention (1 out of limits)"} {
		if !strings.Contains(board, want) {
			t.Errorf("board lacks %q", want)
		}
	}
	if strings.Contains(board, "Nothing needs attention") || strings.Contains(board, "nothing needs attention") {
		t.Errorf("board says nothing needs attention")
	}
	list := e.do(req{method: "GET", path: "/attention?shift=night&kind=out_of_limits", cookie: c}).Body.String()
	if !strings.Contains(list, "N-OUT") || !strings.Contains(list, "1 of 1 shown") {
		t.Errorf("worklist lacks the lot:\n%s", list)
	}
	if l := e.do(req{method: "GET", path: "/attention?shift=early", cookie: c}).Body.String(); strings.Contains(l, "N-OUT") {
		t.Errorf("the shift filter keeps the night lot")
	}
	// Refused: no lot ticked, an unknown lot, no cause; nothing stored.
	for _, body := range []string{"cause=x&back=%2Fattention", "lot=999999&cause=x", "lot=" + formatID(bad.ID) + "&cause=", "lot=" + formatID(bad.ID) + "&no_cause=1&reason="} {
		rec := e.do(req{method: "POST", path: "/attention/causes", body: body, form: true, cookie: c, headers: sameOrigin()})
		if rec.Code != http.StatusBadRequest && rec.Code != http.StatusNotFound {
			t.Errorf("%q: status %d", body, rec.Code)
		}
	}
	if anns, _ := e.db.Annotations(context.Background(), e.proc.ID); len(anns) != 0 {
		t.Fatalf("refused forms stored %+v", anns)
	}
	rec := e.do(req{method: "POST", path: "/attention/causes", form: true, cookie: c, headers: sameOrigin(),
		body: "lot=" + formatID(bad.ID) + "&no_cause=1&reason=film+batch+and+gauge+checked&cause=ignored&back=%2Fattention%3Fshift%3Dnight"})
	if rec.Code != http.StatusSeeOther || rec.Header().Get("Location") != "/attention?shift=night&done=1" {
		t.Fatalf("bulk post: %d %q %s", rec.Code, rec.Header().Get("Location"), rec.Body.String())
	}
	board = e.do(req{method: "GET", path: "/", cookie: c}).Body.String()
	if !strings.Contains(board, "Nothing needs attention") || !strings.Contains(board, "1 (closed, or no cause found)") {
		t.Errorf("board after the finding:\n%s", board)
	}
}

// TestWorklistSignalLink: each signal over several lots has a link on the
// worklist that shows exactly its lots, ticked for the bulk form, and no
// other lot; one cause recorded through it takes all of them off
// /api/v1/attention and leaves the other signal and the lot out of limits.
func TestWorklistSignalLink(t *testing.T) {
	e := newTestEnv(t)
	// 40 lots of 200 alternating 3 (even) and 5 (odd), except lot 4 of 30
	// nonconforming, lots 21–29 all of 5 and lots 30–39 all of 3: 185
	// nonconforming in 8000, p̄ = 0.023125, centre 4.63 counts, σ 2.13
	// counts, UCL 11.0 (p̄ ± 3√(p̄(1−p̄)/n), Montgomery, Introduction to
	// Statistical Quality Control, §7.2). Lot 4 is beyond the UCL; every
	// other lot is within 1σ, so the only run rule met is Western
	// Electric rule 4 (8 or more lots in a row on one side of the centre
	// line; Western Electric, Statistical Quality Control Handbook, 1956):
	// lots 21–29 above the centre line, and lots 30–39 below it.
	lots := e.addLots(t, 40, func(i int) int64 {
		switch {
		case i == 4:
			return 30
		case i >= 21 && i <= 29:
			return 5
		case i >= 30 || i%2 == 0:
			return 3
		}
		return 5
	})
	ids := func(from, to int) map[string]bool {
		m := map[string]bool{}
		for i := from; i <= to; i++ {
			m[formatID(lots[i].ID)] = true
		}
		return m
	}
	above, below := ids(21, 29), ids(30, 39)
	c := e.signIn(t, "inspector1", testPassword)
	page := e.do(req{method: "GET", path: "/attention", cookie: c}).Body.String()
	links := regexp.MustCompile(`href="(/attention\?signal=[^"#]+)#bulk">Explain these (\d+) lots together`).FindAllStringSubmatch(page, -1)
	if len(links) != 2 || links[0][2] != "9" || links[1][2] != "10" {
		t.Fatalf("signal links %q, want one of 9 lots and one of 10", links)
	}
	boxes := regexp.MustCompile(`name="lot" value="(\d+)"[^>]*?( checked)?>`)
	for k, want := range []map[string]bool{above, below} {
		link := html.UnescapeString(links[k][1])
		page = e.do(req{method: "GET", path: link, cookie: c}).Body.String()
		shown, ticked := map[string]bool{}, map[string]bool{}
		for _, m := range boxes.FindAllStringSubmatch(page, -1) {
			shown[m[1]] = true
			if m[2] != "" {
				ticked[m[1]] = true
			}
		}
		if !maps.Equal(shown, want) || !maps.Equal(ticked, want) {
			t.Errorf("%s shows %v, ticks %v; want exactly %v", link, shown, ticked, want)
		}
	}

	// Record one cause for the lots above through the first link's form.
	page = e.do(req{method: "GET", path: html.UnescapeString(links[0][1]), cookie: c}).Body.String()
	back := regexp.MustCompile(`name="back" value="([^"]*)"`).FindStringSubmatch(page)
	if back == nil {
		t.Fatalf("no back field on the signal's page")
	}
	form := url.Values{"back": {html.UnescapeString(back[1])}, "cause": {"film roll from the new supplier"}, "action": {"roll changed"}}
	for _, m := range boxes.FindAllStringSubmatch(page, -1) {
		if m[2] != "" {
			form.Add("lot", m[1])
		}
	}
	rec := e.do(req{method: "POST", path: "/attention/causes", body: form.Encode(), form: true, cookie: c, headers: sameOrigin()})
	if rec.Code != http.StatusSeeOther || rec.Header().Get("Location") != "/attention?done=9" {
		t.Fatalf("bulk post: %d %q %s", rec.Code, rec.Header().Get("Location"), rec.Body.String())
	}
	list := decodeJSON[[]attentionJSON](t, e.do(req{method: "GET", path: "/api/v1/attention", token: e.tokens[store.RoleViewer]}))
	left := map[string]bool{}
	for _, a := range list {
		left[formatID(a.LotID)] = true
	}
	want := ids(30, 39)
	want[formatID(lots[4].ID)] = true
	if !maps.Equal(left, want) {
		t.Errorf("after the cause, attention lists %v; want lot 4 and lots 30–39: %v", left, want)
	}
	if page := e.do(req{method: "GET", path: html.UnescapeString(links[0][1]), cookie: c}).Body.String(); !strings.Contains(page, "That signal has no lots needing attention any more") {
		t.Errorf("the explained signal's link does not say it is explained")
	}
}

// TestSummaryCacheLimit: the process summaries the board keeps stay
// within their size limit; a process whose summary does not fit is judged
// for each request and shown the same, and retiring a process frees its
// room.
func TestSummaryCacheLimit(t *testing.T) {
	e := newTestEnv(t)
	ctx := context.Background()
	e.addLots(t, 30, func(i int) int64 {
		if i == 12 {
			return 40 // far beyond the limits: one flagged lot
		}
		return int64(2 + i%3)
	})
	var others []store.Process
	for i := range 3 {
		p, err := e.db.AddProcess(ctx, "setup", store.Process{Name: fmt.Sprintf("Press %d", i), Chart: spc.ChartP, Method: spc.MethodSigma, K: 3,
			Rules: "we", TimeZone: "UTC", Active: true})
		if err != nil {
			t.Fatal(err)
		}
		in := make([]store.LotInput, 20)
		for j := range in {
			in[j] = store.LotInput{Lot: fmt.Sprintf("P%d-%02d", i, j), Time: e.clock.Now().Add(-time.Duration(30-j) * time.Hour), Inspected: 100, Count: int64(1 + j%2)}
		}
		if _, err := e.db.AddLots(ctx, "setup", p.ID, in); err != nil {
			t.Fatal(err)
		}
		others = append(others, p)
	}
	// The first process's summary: itself, its flagged lot (and the we1
	// signal's lot) and its lots of the last 48 hours.
	pc, err := e.srv.freshChart(ctx, e.proc)
	if err != nil {
		t.Fatal(err)
	}
	one, err := summarize(pc, store.LotsVersion{})
	if err != nil {
		t.Fatal(err)
	}
	e.srv.summaries.maxEntries = one.size() + 25 // room for it and one other at most
	c := e.signIn(t, "viewer1", testPassword)
	var first string
	for k := range 3 {
		rec := e.do(req{method: "GET", path: "/?view=table", cookie: c})
		if rec.Code != 200 {
			t.Fatalf("board: %d", rec.Code)
		}
		kept, entries := e.srv.summaries.size()
		if entries > e.srv.summaries.maxEntries || kept >= 4 || kept == 0 {
			t.Errorf("board %d: %d summaries of %d entries kept, limit %d", k, kept, entries, e.srv.summaries.maxEntries)
		}
		body := rec.Body.String()
		if k == 0 {
			first = body
		} else if body != first {
			t.Errorf("board %d differs from the first", k)
		}
		if !strings.Contains(body, "need attention in 1 process") {
			t.Errorf("board %d lacks the lots needing attention", k)
		}
	}
	// Retire every process but one: the others' summaries leave.
	for _, p := range append(others[1:], e.proc) {
		p.Active = false
		if _, err := e.db.UpdateProcess(ctx, "setup", "line closed", p); err != nil {
			t.Fatal(err)
		}
	}
	e.do(req{method: "GET", path: "/?view=table", cookie: c})
	if kept, _ := e.srv.summaries.size(); kept != 1 {
		t.Errorf("%d summaries kept with one active process", kept)
	}
}

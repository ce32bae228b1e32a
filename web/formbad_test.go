package web

import (
	"context"
	"fmt"
	"html"
	"net/http"
	"net/http/httptest"
	"net/url"
	"regexp"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
)

// lotFormBody is a valid lot form for the test process (a p chart with
// the categories scratch = cat0 and dent = cat1), with fields replaced;
// a field set to "\x00drop" is left out of the post.
func lotFormBody(over map[string]string) string {
	v := url.Values{"lot": {"F1"}, "inspected": {"100"}, "count": {"2"}, "cat0": {"1"}, "cat1": {"1"}, "shift": {"early"}, "inspector": {"inspector1"}}
	for k, x := range over {
		if x == "\x00drop" {
			v.Del(k)
			continue
		}
		v.Set(k, x)
	}
	return v.Encode()
}

// fieldProblem returns the message the lot form shows beside a field:
// the problem text inside the field's box, which is marked has-problem,
// unescaped.
func fieldProblem(body, field string) (string, bool) {
	m := regexp.MustCompile(`<div class="field has-problem"><label for="f-` + regexp.QuoteMeta(field) +
		`">(?s:[^<]|<[^/]|</[^d]|</d[^i])*?<span[^>]*class="field-problem">([^<]*)</span>`).FindStringSubmatch(body)
	if m == nil {
		return "", false
	}
	return html.UnescapeString(m[1]), true
}

// lotFormCase is a refused lot form: the fields replaced in lotFormBody,
// the field whose message is checked and part of the message beside it.
type lotFormCase struct {
	name   string
	over   map[string]string
	field  string
	reason string
}

// lotFormCases are the refused forms that the form logging a lot and the
// one correcting it share: the same fields, read by the same rules. The
// number rules are those of the import and the API (a whole number in
// plain decimal digits; spc.CheckLot: 0 < n ≤ spc.MaxInspected = 10^7,
// 0 ≤ d ≤ n for a p chart); times are the form's datetime-local (WHATWG
// HTML, "local date and time string") in the process's time zone, at most
// a day ahead, not before 1970.
func lotFormCases(loc *time.Location) []lotFormCase {
	future := time.Now().Add(72 * time.Hour).In(loc).Format(formTime)
	big := strings.Repeat("x", 1<<20)
	return []lotFormCase{
		{"empty lot code", map[string]string{"lot": ""}, "lot", "is empty"},
		{"lot code of spaces", map[string]string{"lot": "   "}, "lot", "is empty"},
		{"lot code with a line break", map[string]string{"lot": "F\n1"}, "lot", "control characters"},
		{"lot code 1 MB", map[string]string{"lot": big}, "lot", "longer than 100 bytes"},
		{"lot code not UTF-8", map[string]string{"lot": "F\xff1"}, "lot", "is not valid UTF-8"},
		{"inspected missing", map[string]string{"inspected": "\x00drop"}, "inspected", "is empty"},
		{"inspected empty", map[string]string{"inspected": ""}, "inspected", "is empty"},
		{"count missing", map[string]string{"count": "\x00drop"}, "count", "is empty"},
		{"inspected 0", map[string]string{"inspected": "0", "count": "0", "cat0": "", "cat1": ""}, "inspected", `"0" must be a whole number greater than 0`},
		{"inspected negative", map[string]string{"inspected": "-100"}, "inspected", `"-100" must be a whole number greater than 0`},
		{"count negative", map[string]string{"count": "-1"}, "count", `"-1" must not be negative`},
		{"fraction", map[string]string{"inspected": "1.5"}, "inspected", `"1.5" is not a whole number`},
		{"fraction zero", map[string]string{"count": "2.0"}, "count", `"2.0" is not a whole number`},
		{"exponent", map[string]string{"inspected": "1e3"}, "inspected", `"1e3" is not a whole number`},
		{"thousands separator", map[string]string{"inspected": "1,000"}, "inspected", `"1,000" is not a whole number`},
		{"hexadecimal", map[string]string{"count": "0x2"}, "count", `"0x2" is not a whole number`},
		{"full-width digits", map[string]string{"inspected": "１００"}, "inspected", `"１００" is not a whole number`},
		{"inspected 10^12", map[string]string{"inspected": "1000000000000"}, "inspected", `"1000000000000" is more than 10000000`},
		{"one beyond int64", map[string]string{"inspected": "9223372036854775808"}, "inspected", `"9223372036854775808" is too large`},
		{"count beyond int64", map[string]string{"count": "99999999999999999999999"}, "count", `"99999999999999999999999" is too large`},
		{"d more than n", map[string]string{"inspected": "10", "count": "11", "cat0": "", "cat1": ""}, "count", `"11" is more than the 10 units inspected`},
		{"category negative", map[string]string{"cat0": "-1"}, "cat0", `"-1" must not be negative`},
		{"category above inspected", map[string]string{"cat1": "101"}, "cat1", `"101" is more than the 100 units inspected`},
		{"category fraction", map[string]string{"cat0": "0.5"}, "cat0", `"0.5" is not a whole number`},
		{"time not a time", map[string]string{"time": "yesterday"}, "time", `"yesterday" is not a date and time`},
		{"time 30 February", map[string]string{"time": "2026-02-30T10:00"}, "time", `"2026-02-30T10:00" is not a date and time`},
		{"time hour 25", map[string]string{"time": "2026-03-02T25:00"}, "time", `"2026-03-02T25:00" is not a date and time`},
		{"time far future", map[string]string{"time": future}, "time", "more than a day in the future"},
		{"time before 1970", map[string]string{"time": "1969-07-20T20:17"}, "time", "is before 1970"},
		{"note 1 MB", map[string]string{"note": big}, "note", "longer than 4000 bytes"},
		{"NUL in note", map[string]string{"note": "a\x00b"}, "note", "must not contain NUL"},
		{"shift with a tab", map[string]string{"shift": "early\tlate"}, "shift", "control characters"},
		{"inspector 1 MB", map[string]string{"inspector": big}, "inspector", "longer than 100 bytes"},
	}
}

// checkRefusedForm checks the answer to a refused lot form: status 400,
// the alert that nothing was saved, and tc's message beside its field,
// tied to the field for assistive technology (aria-describedby).
func checkRefusedForm(t *testing.T, rec *httptest.ResponseRecorder, alert string, tc lotFormCase) {
	t.Helper()
	body := rec.Body.String()
	if rec.Code != http.StatusBadRequest {
		t.Fatalf("status %d, want 400\n%s", rec.Code, trim(body))
	}
	if !strings.Contains(body, alert) {
		t.Errorf("the page does not say %q", alert)
	}
	msg, ok := fieldProblem(body, tc.field)
	if !ok {
		t.Fatalf("no message beside the field %s\n%s", tc.field, trim(body))
	}
	if !strings.Contains(msg, tc.reason) {
		t.Errorf("beside %s: %q, want it to contain %q", tc.field, msg, tc.reason)
	}
	if !strings.Contains(body, `aria-invalid="true" aria-describedby="e-`+tc.field+`"`) {
		t.Errorf("the field %s is not tied to its message (aria-describedby)", tc.field)
	}
}

// TestLotFormBadInput is the bad-input battery of the form that logs a
// lot (GET /processes/{id}/log, POST /processes/{id}/lots). Every refused
// form comes back with status 400, the "not saved" alert, and the reason
// beside the field at fault (the field marked aria-invalid, the message
// naming the value where there is one); the stored content is unchanged:
// the export of the process and the audit trail (entries and head hash)
// are the same before and after. The rules are those of lotFormCases.
func TestLotFormBadInput(t *testing.T) {
	e := newTestEnv(t)
	ctx := context.Background()
	loc := e.proc.Location()
	stored := time.Date(2026, 3, 2, 7, 30, 0, 0, loc) // a whole minute: the form's time has minutes only
	if _, err := e.db.AddLots(ctx, "setup", e.proc.ID, []store.LotInput{{Lot: "S1", Time: stored, Shift: "early", Inspected: 200,
		Count: 3, Categories: map[string]int64{"scratch": 2, "dent": 1}, Inspector: "inspector1", Note: "first of the week"}}); err != nil {
		t.Fatal(err)
	}
	c := e.signIn(t, "inspector1", testPassword)
	path := fmt.Sprintf("/processes/%d/lots", e.proc.ID)
	cases := append(lotFormCases(loc),
		lotFormCase{"stored code, other values", map[string]string{"lot": "S1", "time": stored.Format(formTime), "inspected": "200", "count": "4"}, "lot", `lot "S1" is already logged with other values; nothing was saved`})
	if len(cases) < 20 {
		t.Fatalf("the battery has %d cases; it promises at least 20", len(cases))
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			before := e.stored(t)
			rec := e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(), body: lotFormBody(tc.over)})
			checkRefusedForm(t, rec, "The lot was not saved", tc)
			before.unchanged(t, e, "a refused form")
		})
	}

	// The same form accepted: the largest lot spc allows is stored
	// exactly; the stored lot posted again, value for value, is a repeat
	// that changes nothing and leads to the stored lot.
	t.Run("inspected 10^7 accepted", func(t *testing.T) {
		rec := e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(),
			body: lotFormBody(map[string]string{"lot": "BIG1", "inspected": "10000000", "count": "9999999", "cat0": "", "cat1": ""})})
		if rec.Code != http.StatusSeeOther {
			t.Fatalf("status %d, want 303\n%s", rec.Code, trim(rec.Body.String()))
		}
		lots, err := e.db.Lots(ctx, e.proc.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		found := false
		for _, l := range lots {
			if l.Lot == "BIG1" {
				found = true
				if l.Inspected != 10_000_000 || l.Count != 9_999_999 {
					t.Errorf("stored n %d, d %d; want 10^7 and 10^7 − 1", l.Inspected, l.Count)
				}
			}
		}
		if !found {
			t.Error("lot BIG1 is not stored")
		}
	})
	t.Run("stored lot posted again", func(t *testing.T) {
		before := e.stored(t)
		rec := e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(),
			body: lotFormBody(map[string]string{"lot": "S1", "time": stored.Format(formTime), "inspected": "200", "count": "3", "cat0": "2", "cat1": "1", "note": "first of the week"})})
		if rec.Code != http.StatusSeeOther {
			t.Fatalf("status %d, want 303\n%s", rec.Code, trim(rec.Body.String()))
		}
		lots, err := e.db.Lots(ctx, e.proc.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		for _, l := range lots {
			if l.Lot == "S1" && !strings.HasPrefix(rec.Header().Get("Location"), fmt.Sprintf("/lots/%d?", l.ID)) {
				t.Errorf("sent to %q, want the stored lot %d", rec.Header().Get("Location"), l.ID)
			}
		}
		before.unchanged(t, e, "a repeated lot")
	})
}

// TestCorrectionFormBadInput is the bad-input battery of the form that
// corrects a lot (POST /lots/{lot}/correct): the cases of lotFormCases,
// the reason the correction needs (not empty, clean text of at most 4000
// bytes, like a note) and a lot code another lot has. Every refused
// correction comes back with status 400, the "not saved" alert and the
// reason beside the field at fault; the stored content is unchanged: the
// export, the audit trail (entries and head hash) and the lot's history
// are the same before and after. A valid correction then goes through.
func TestCorrectionFormBadInput(t *testing.T) {
	e := newTestEnv(t)
	ctx := context.Background()
	loc := e.proc.Location()
	at := time.Date(2026, 3, 2, 7, 30, 0, 0, loc)
	added, err := e.db.AddLots(ctx, "setup", e.proc.ID, []store.LotInput{
		{Lot: "S1", Time: at, Shift: "early", Inspected: 200, Count: 3, Categories: map[string]int64{"scratch": 2, "dent": 1}, Inspector: "inspector1"},
		{Lot: "F1", Time: at.Add(time.Hour), Shift: "early", Inspected: 100, Count: 2, Categories: map[string]int64{"scratch": 1, "dent": 1}, Inspector: "inspector1"},
	})
	if err != nil {
		t.Fatal(err)
	}
	id := added[1].ID
	c := e.signIn(t, "inspector1", testPassword)
	path := fmt.Sprintf("/lots/%d/correct", id)
	history := func(t *testing.T) string {
		t.Helper()
		h, err := e.db.LotHistory(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		return fmt.Sprintf("%+v", h)
	}
	cases := append(lotFormCases(loc),
		lotFormCase{"reason empty", map[string]string{"reason": ""}, "reason", "is empty: say why the lot changes"},
		lotFormCase{"reason missing", map[string]string{"reason": "\x00drop"}, "reason", "is empty"},
		lotFormCase{"reason of spaces", map[string]string{"reason": "   "}, "reason", "is empty"},
		lotFormCase{"reason 1 MB", map[string]string{"reason": strings.Repeat("y", 1<<20)}, "reason", "longer than 4000 bytes"},
		lotFormCase{"NUL in reason", map[string]string{"reason": "miscount\x00ed"}, "reason", "must not contain NUL"},
		lotFormCase{"reason not UTF-8", map[string]string{"reason": "mis\xffcount"}, "reason", "is not valid UTF-8"},
		lotFormCase{"code of another lot", map[string]string{"lot": "S1"}, "lot", `another lot of this process already has the code "S1"`},
	)
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			over := map[string]string{"reason": "count was misread"}
			for k, v := range tc.over {
				over[k] = v
			}
			before, histBefore := e.stored(t), history(t)
			rec := e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(), body: lotFormBody(over)})
			checkRefusedForm(t, rec, "The correction was not saved", tc)
			before.unchanged(t, e, "a refused correction")
			if h := history(t); h != histBefore {
				t.Errorf("a refused correction changed the lot's history:\n%s\nwas\n%s", h, histBefore)
			}
		})
	}

	t.Run("valid correction", func(t *testing.T) {
		rec := e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(),
			body: lotFormBody(map[string]string{"count": "3", "cat0": "2", "reason": "count was misread"})})
		if rec.Code != http.StatusSeeOther {
			t.Fatalf("status %d, want 303\n%s", rec.Code, trim(rec.Body.String()))
		}
		h, err := e.db.LotHistory(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		if len(h) != 2 || h[0].Count != 2 || h[1].Count != 3 || h[1].Reason != "count was misread" {
			t.Errorf("history %+v, want revision 1 with 2 and revision 2 with 3 and the reason", h)
		}
	})
}

// TestLotFormHostileText: markup and SQL typed into the lot code, the
// inspector and the note are stored verbatim, shown escaped on the lot's
// page and on the chart page (html/template escapes < > & ' " in text as
// &lt; &gt; &amp; &#39; &#34;; the Go documentation of html/template), and
// never executed: no script from user text reaches a page, and every
// table is still there.
func TestLotFormHostileText(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 5, func(int) int64 { return 1 })
	c := e.signIn(t, "inspector1", testPassword)
	path := fmt.Sprintf("/processes/%d/lots", e.proc.ID)
	hostile := []struct{ lot, inspector, note string }{
		{`<script>alert("lot")</script>`, `<img src=x onerror=alert(1)>`, `</textarea><script>alert(2)</script>`},
		{`F1'); DROP TABLE lots;--`, `O'Brien`, `' OR '1'='1'; DELETE FROM users;--`},
		{`"><svg onload=alert(3)>`, `inspector1`, "&amp; &lt;b&gt; \u202e reversed"},
	}
	esc := strings.NewReplacer("&", "&amp;", "<", "&lt;", ">", "&gt;", `"`, "&#34;", "'", "&#39;").Replace
	for _, h := range hostile {
		rec := e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(),
			body: lotFormBody(map[string]string{"lot": h.lot, "inspector": h.inspector, "note": h.note})})
		if rec.Code != http.StatusSeeOther {
			t.Fatalf("%s: status %d\n%s", h.lot, rec.Code, trim(rec.Body.String()))
		}
		page := e.do(req{method: "GET", path: rec.Header().Get("Location"), cookie: c}).Body.String()
		for _, text := range []string{h.lot, h.inspector, h.note} {
			if !strings.Contains(page, esc(text)) {
				t.Errorf("the lot page does not show %q escaped (%s)", text, esc(text))
			}
		}
		if strings.Contains(page, "<script>alert") || strings.Contains(page, "<img src=x") || strings.Contains(page, "<svg onload") {
			t.Errorf("the lot page of %q carries markup from user text", h.lot)
		}
	}
	lots, err := e.db.Lots(context.Background(), e.proc.ID, time.Time{}, time.Time{})
	if err != nil || len(lots) != 5+len(hostile) {
		t.Fatalf("%d lots stored (%v), want %d", len(lots), err, 5+len(hostile))
	}
	byCode := map[string]store.Lot{}
	for _, l := range lots {
		byCode[l.Lot] = l
	}
	for _, h := range hostile {
		if l, ok := byCode[h.lot]; !ok || l.Inspector != h.inspector || l.Note != h.note {
			t.Errorf("stored %+v, want %q / %q / %q verbatim", l.LotInput, h.lot, h.inspector, h.note)
		}
	}
	chart := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d?period=all", e.proc.ID), cookie: c}).Body.String()
	for _, h := range hostile {
		if !strings.Contains(chart, esc(h.lot)) {
			t.Errorf("the chart page does not list %q escaped", h.lot)
		}
	}
	if strings.Contains(chart, "<script>alert") || strings.Contains(chart, "<svg onload") {
		t.Error("the chart page carries markup from user text")
	}
	if us, err := e.db.Users(context.Background()); err != nil || len(us) != len(roles) {
		t.Errorf("users %d, %v: want the %d users untouched", len(us), err, len(roles))
	}
}

// TestLotFormCategoriesChanged checks that a form drawn with another list
// of categories than the process has now is refused, and that a
// category field the process does not have is refused, instead of a count
// landing under the wrong category or being dropped.
func TestLotFormCategoriesChanged(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "inspector1", testPassword)
	post := func(v url.Values) *httptest.ResponseRecorder {
		return e.do(req{method: "POST", path: fmt.Sprintf("/processes/%d/lots", e.proc.ID), form: true, body: v.Encode(), cookie: c,
			headers: map[string]string{"Sec-Fetch-Site": "same-origin"}})
	}
	base := func() url.Values {
		return url.Values{"lot": {"K1"}, "inspected": {"100"}, "count": {"2"}, "cat0": {"1"}, "cat1": {"1"}}
	}
	v := base()
	v.Set("categories", "dent\x1fscratch") // drawn in another order
	if rec := post(v); rec.Code != http.StatusBadRequest || !strings.Contains(rec.Body.String(), "categories of this process changed") {
		t.Errorf("stale category list: %d\n%s", rec.Code, rec.Body.String())
	}
	v = base()
	v.Set("cat2", "3")
	if rec := post(v); rec.Code != http.StatusBadRequest || !strings.Contains(rec.Body.String(), "is not a defect category") {
		t.Errorf("unknown category field: %d", rec.Code)
	}
	if lots, _ := e.db.Lots(t.Context(), e.proc.ID, time.Time{}, time.Time{}); len(lots) != 0 {
		t.Fatalf("%d lots stored from refused forms", len(lots))
	}
	v = base()
	v.Set("categories", "scratch\x1fdent")
	if rec := post(v); rec.Code != http.StatusSeeOther {
		t.Errorf("a form with the current categories: %d\n%s", rec.Code, rec.Body.String())
	}
}

package web

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"math"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"net/url"
	"strconv"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
)

func sameOriginForm() map[string]string { return map[string]string{"Sec-Fetch-Site": "same-origin"} }

// TestLotFormProblemsBesideFields: a lot with more defective units than
// inspected is refused with the reason beside the count field, and
// nothing is stored.
func TestLotFormProblemsBesideFields(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "inspector1", testPassword)
	rec := e.do(req{method: "POST", path: fmt.Sprintf("/processes/%d/lots", e.proc.ID), cookie: c, form: true, headers: sameOriginForm(),
		body: "lot=A1&inspected=10&count=12&cat0=abc"})
	if rec.Code != http.StatusBadRequest {
		t.Fatalf("status %d, want 400", rec.Code)
	}
	body := rec.Body.String()
	for _, want := range []string{`id="e-count"`, `id="e-cat0"`, `&#34;abc&#34; is not a whole number`, `aria-invalid="true"`, `value="A1"`} {
		if !strings.Contains(body, want) {
			t.Errorf("the form lacks %q", want)
		}
	}
	// only the number problem is reported first; fix it and the count
	// problem of the shared validation shows
	rec = e.do(req{method: "POST", path: fmt.Sprintf("/processes/%d/lots", e.proc.ID), cookie: c, form: true, headers: sameOriginForm(),
		body: "lot=A1&inspected=10&count=12"})
	if rec.Code != http.StatusBadRequest || !strings.Contains(rec.Body.String(), `id="e-count"`) {
		t.Fatalf("count above inspected: status %d, no problem beside the count", rec.Code)
	}
	if n := e.lotCount(t); n != 0 {
		t.Fatalf("%d lots stored, want none", n)
	}
}

// TestLotVerdictAfterSaving: after saving, the lot's page says at once
// whether it is within its limits and which rule fired.
func TestLotVerdictAfterSaving(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return int64(3 + i%3) })
	c := e.signIn(t, "inspector1", testPassword)
	post := func(code string, count int) string {
		rec := e.do(req{method: "POST", path: fmt.Sprintf("/processes/%d/lots", e.proc.ID), cookie: c, form: true, headers: sameOriginForm(),
			body: fmt.Sprintf("lot=%s&inspected=200&count=%d&shift=early", code, count)})
		if rec.Code != http.StatusSeeOther {
			t.Fatalf("posting %s: status %d: %s", code, rec.Code, trim(rec.Body.String()))
		}
		loc := rec.Header().Get("Location")
		if !strings.Contains(loc, "logged=1") {
			t.Fatalf("posting %s sent to %q", code, loc)
		}
		return e.do(req{method: "GET", path: loc, cookie: c}).Body.String()
	}
	if body := post("OK-1", 4); !strings.Contains(body, "Within the control limits") {
		t.Errorf("an ordinary lot is not reported within limits")
	}
	body := post("BAD-1", 40)
	if !strings.Contains(body, "Outside the control limits — above the UCL") || !strings.Contains(body, "Rule we1") {
		t.Errorf("a lot far above the UCL is not reported out of limits with rule we1:\n%s", trim(body))
	}
	if !strings.Contains(body, `href="#cause"`) {
		t.Error("the page does not offer to record the cause")
	}
}

// TestPooledSubgroups: pooled by day, a subgroup's value is Σd/Σn of the
// day's lots (Montgomery, Introduction to Statistical Quality Control,
// 7th ed., §7.2.2: p̂ = D/n for a sample of n units with D nonconforming).
func TestPooledSubgroups(t *testing.T) {
	e := newTestEnv(t)
	loc := e.proc.Location()
	day := time.Date(2026, 3, 2, 0, 0, 0, 0, loc)
	var in []store.LotInput
	var wantD, wantN []int64
	for d := 0; d < 5; d++ {
		var sd, sn int64
		for k := 0; k < 3; k++ {
			n, c := int64(100+50*k), int64(2+d+k)
			in = append(in, store.LotInput{Lot: fmt.Sprintf("D%d-%d", d, k), Time: day.AddDate(0, 0, d).Add(time.Duration(6+4*k) * time.Hour), Inspected: n, Count: c})
			sd, sn = sd+c, sn+n
		}
		wantD, wantN = append(wantD, sd), append(wantN, sn)
	}
	if _, err := e.db.AddLots(t.Context(), "setup", e.proc.ID, in); err != nil {
		t.Fatal(err)
	}
	c := e.signIn(t, "viewer1", testPassword)
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d/chart.csv?period=all&by=day", e.proc.ID), cookie: c})
	if rec.Code != 200 {
		t.Fatalf("status %d", rec.Code)
	}
	rows, err := csv.NewReader(rec.Body).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 6 {
		t.Fatalf("%d rows, want a header and 5 days", len(rows))
	}
	for i, r := range rows[1:] {
		n, _ := strconv.ParseInt(r[4], 10, 64)
		d, _ := strconv.ParseInt(r[5], 10, 64)
		v, _ := strconv.ParseFloat(r[6], 64)
		if r[3] != "3" || n != wantN[i] || d != wantD[i] || math.Abs(v-float64(wantD[i])/float64(wantN[i])) > 1e-5 {
			t.Errorf("day %d: lots %s n %d d %d value %v, want 3 lots, n %d, d %d, value %v", i, r[3], n, d, v, wantN[i], wantD[i], float64(wantD[i])/float64(wantN[i]))
		}
	}
}

// TestThinKeepsEverySignal: thinning a long series keeps every point
// outside its limits or in a signal, and the extremes of every stretch.
func TestThinKeepsEverySignal(t *testing.T) {
	ps := make([]viewPoint, 10000)
	for i := range ps {
		ps[i].Value = float64(i % 17)
		ps[i].Above = i%997 == 0
		if i%1301 == 0 {
			ps[i].Rules = []string{"we2"}
		}
	}
	idx, thinned := thin(ps)
	if !thinned || len(idx) > maxDrawn+len(ps)/997+len(ps)/1301+2 {
		t.Fatalf("thinned %v to %d points", thinned, len(idx))
	}
	kept := map[int]bool{}
	for k, i := range idx {
		kept[i] = true
		if k > 0 && idx[k-1] >= i {
			t.Fatal("indices are not in order")
		}
	}
	for i, p := range ps {
		if (p.Out() || len(p.Rules) > 0) && !kept[i] {
			t.Errorf("point %d (out %v, rules %v) dropped", i, p.Out(), p.Rules)
		}
	}
	if idx, thinned := thin(ps[:maxDrawn]); thinned || len(idx) != maxDrawn {
		t.Errorf("%d points thinned", maxDrawn)
	}
}

// TestFreezeStoresRate: the limits page freezes the baseline's p̄ = Σd/Σn
// (Montgomery, §7.2.1, eq. 7.7) as the centre, leaves out the chosen lot
// with its reason, and refuses a freeze without a reason.
func TestFreezeStoresRate(t *testing.T) {
	e := newTestEnv(t)
	lots := e.addLots(t, 25, func(i int) int64 { return int64(2 + i%4 + 30*btoi(i == 7)) })
	c := e.signIn(t, "engineer1", testPassword)
	path := fmt.Sprintf("/processes/%d/limits", e.proc.ID)
	form := url.Values{"ex": {lots[7].Lot}, "why:" + lots[7].Lot: {"die change"}, "reason": {""}}
	rec := e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(), body: form.Encode()})
	if rec.Code != http.StatusBadRequest || !strings.Contains(rec.Body.String(), "say why these limits are frozen") {
		t.Fatalf("freeze without a reason: status %d", rec.Code)
	}
	form.Set("reason", "baseline of the first 25 lots")
	rec = e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(), body: form.Encode()})
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("freeze: status %d: %s", rec.Code, trim(rec.Body.String()))
	}
	var d, n int64
	for i, l := range lots {
		if i != 7 {
			d, n = d+l.Count, n+l.Inspected
		}
	}
	sets, err := e.db.LimitSets(t.Context(), e.proc.ID)
	if err != nil || len(sets) != 1 {
		t.Fatalf("limit sets %v, %v", sets, err)
	}
	if ls := sets[0]; math.Abs(ls.Center-float64(d)/float64(n)) > 1e-12 || ls.BaselineLots != 24 || ls.Excluded[lots[7].Lot] != "die change" {
		t.Errorf("frozen set %+v, want centre %v from 24 lots with %s left out", ls, float64(d)/float64(n), lots[7].Lot)
	}
	if body := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d?period=all", e.proc.ID), cookie: c}).Body.String(); !strings.Contains(body, "limit set 1") {
		t.Error("the chart page does not name the frozen limit set")
	}
}

// TestUploadPreviewAndConfirm: a file with bad rows lists each problem
// with its line and saves nothing; a good file is kept on the server and
// imported only on confirmation, by the session that uploaded it.
func TestUploadPreviewAndConfirm(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "inspector1", testPassword)
	upload := func(cookie *http.Cookie, content string) *httptest.ResponseRecorder {
		var b bytes.Buffer
		mw := multipart.NewWriter(&b)
		mw.WriteField("process", fmt.Sprint(e.proc.ID))
		fw, _ := mw.CreateFormFile("file", "lots.csv")
		fw.Write([]byte(content))
		mw.Close()
		r := httptest.NewRequest("POST", "http://lotwatch.test/upload", &b)
		r.Header.Set("Content-Type", mw.FormDataContentType())
		r.Header.Set("Sec-Fetch-Site", "same-origin")
		r.AddCookie(cookie)
		rec := httptest.NewRecorder()
		e.h.ServeHTTP(rec, r)
		return rec
	}
	rec := upload(c, "lot,inspected,defective,scratch\nA,100,2,1\nB,100,x,0\nC,100,3,200\nA,100,2,1\n")
	body := rec.Body.String()
	if rec.Code != http.StatusBadRequest {
		t.Fatalf("bad file: status %d", rec.Code)
	}
	for _, want := range []string{"line 3: defective", "line 4: scratch", "line 5: lot &#34;A&#34; appears more than once"} {
		if !strings.Contains(body, want) {
			t.Errorf("problems lack %q", want)
		}
	}
	if e.lotCount(t) != 0 {
		t.Fatal("a rejected file stored lots")
	}
	rec = upload(c, "lot,inspected,defective\nA,100,2\nB,100,3\n")
	body = rec.Body.String()
	i := strings.Index(body, `action="/upload/`)
	if rec.Code != 200 || i < 0 {
		t.Fatalf("good file: status %d, no confirmation form", rec.Code)
	}
	action := body[i+len(`action="`):]
	action = action[:strings.IndexByte(action, '"')]
	if e.lotCount(t) != 0 {
		t.Fatal("the preview stored lots")
	}
	other := e.signIn(t, "inspector1", testPassword) // another session of the same user
	if rec := e.do(req{method: "POST", path: action, cookie: other, form: true, headers: sameOriginForm()}); rec.Code != http.StatusNotFound {
		t.Errorf("another session confirmed the upload: status %d", rec.Code)
	}
	rec = e.do(req{method: "POST", path: action, cookie: c, form: true, headers: sameOriginForm()})
	if rec.Code != 200 || !strings.Contains(rec.Body.String(), "2 lots added") || e.lotCount(t) != 2 {
		t.Fatalf("confirm: status %d, %d lots stored\n%s", rec.Code, e.lotCount(t), trim(rec.Body.String()))
	}
	if rec := e.do(req{method: "POST", path: action, cookie: c, form: true, headers: sameOriginForm()}); rec.Code != http.StatusNotFound {
		t.Errorf("an upload was confirmed twice: status %d", rec.Code)
	}
	// A lot stored with other values is a problem of the file like any
	// other: the file is refused whole (README: all or nothing).
	rec = upload(c, "lot,inspected,defective\nA,100,5\nC,100,1\n")
	if body := rec.Body.String(); rec.Code != http.StatusBadRequest || !strings.Contains(body, "line 2: lot &#34;A&#34; is already stored with other values") ||
		strings.Contains(body, `action="/upload/`) {
		t.Errorf("file with a conflicting lot: status %d\n%s", rec.Code, trim(body))
	}
	if e.lotCount(t) != 2 {
		t.Errorf("%d lots stored after a refused file, want 2", e.lotCount(t))
	}
}

// TestTailWords checks the plain-words tail probability.
func TestTailWords(t *testing.T) {
	for _, c := range []struct {
		p     float64
		above bool
		want  string
	}{
		{1.0 / 4100, true, "a count this high or higher happens in 1 of 4,100 lots at the centre rate"},
		{0.000243, true, "1 of 4,100 lots"}, // 1/0.000243 = 4115, two significant digits
		{0.02, false, "a count this low or lower happens in 1 of 50 lots"},
		{0.4, true, "is common at the centre rate (40 % of lots)"},
	} {
		if got := tailWords(c.p, c.above, "lots"); !strings.Contains(got, c.want) {
			t.Errorf("tailWords(%v, %v) = %q, want it to contain %q", c.p, c.above, got, c.want)
		}
	}
}

package web

import (
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"lotwatch/spc/chartjson"
	"lotwatch/store"
)

func lotsPath(e *testEnv) string { return fmt.Sprintf("/api/v1/processes/%d/lots", e.proc.ID) }

func TestPostLotSingle(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 25, func(i int) int64 { return int64(3 + i%4) })
	tok := e.tokens[store.RoleInspector]
	body := `{"lot":"A-100","inspected":200,"defective":60,"time":"2026-01-05T10:30:00+01:00","shift":"B","inspector":"Ode","note":"<b>dusty</b>","categories":{"scratch":50,"dent":10}}`
	rec := e.do(req{method: "POST", path: lotsPath(e), body: body, token: tok})
	if rec.Code != http.StatusCreated {
		t.Fatalf("status %d: %s", rec.Code, rec.Body.String())
	}
	got := decodeJSON[struct {
		Lots []map[string]any `json:"lots"`
	}](t, rec)
	if len(got.Lots) != 1 {
		t.Fatalf("%d lots in the answer, want 1", len(got.Lots))
	}
	l := got.Lots[0]
	for _, k := range []string{"id", "lot", "inspected", "count", "time", "out_of_limits", "signals", "ucl", "lcl", "value", "center", "limits"} {
		if _, ok := l[k]; !ok {
			t.Errorf("answer has no %q: %v", k, l)
		}
	}
	if l["lot"] != "A-100" || l["count"] != 60.0 || l["inspected"] != 200.0 || l["shift"] != "B" || l["note"] != "<b>dusty</b>" {
		t.Errorf("stored values differ from the posted ones: %v", l)
	}
	if l["time"] != "2026-01-05T10:30:00+01:00" {
		t.Errorf("time = %v, want it in the process's zone (Europe/Berlin)", l["time"])
	}
	// 60 of 200 against p̄ ≈ 0.025 is far beyond the UCL.
	if l["out_of_limits"] != true || l["limits"] != "trial" {
		t.Errorf("verdict: out_of_limits=%v limits=%v, want true, trial", l["out_of_limits"], l["limits"])
	}
	if sig, _ := l["signals"].([]any); !slices.Contains(sig, any("we1")) {
		t.Errorf("signals = %v, want we1 (a lot beyond a limit)", l["signals"])
	}
	// An identical re-post is idempotent: same id, nothing added.
	before := e.lotCount(t)
	rec2 := e.do(req{method: "POST", path: lotsPath(e), body: body, token: tok})
	if rec2.Code != http.StatusCreated {
		t.Fatalf("re-post: status %d: %s", rec2.Code, rec2.Body.String())
	}
	again := decodeJSON[struct {
		Lots []map[string]any `json:"lots"`
	}](t, rec2)
	if again.Lots[0]["id"] != l["id"] || e.lotCount(t) != before {
		t.Errorf("re-post stored a new lot: id %v (was %v), %d lots (were %d)", again.Lots[0]["id"], l["id"], e.lotCount(t), before)
	}
	// The same code with another count is a conflict and changes nothing.
	rec3 := e.do(req{method: "POST", path: lotsPath(e), body: strings.Replace(body, `"defective":60`, `"defective":61`, 1), token: tok})
	if rec3.Code != http.StatusConflict {
		t.Fatalf("conflicting re-post: status %d, want 409: %s", rec3.Code, rec3.Body.String())
	}
	if m := decodeJSON[map[string]any](t, rec3); !strings.Contains(fmt.Sprint(m["error"]), "A-100") {
		t.Errorf("409 error does not name the lot: %v", m)
	}
	if e.lotCount(t) != before {
		t.Error("a conflicting re-post changed the lots")
	}
}

func TestPostLotsArrayAllOrNothing(t *testing.T) {
	e := newTestEnv(t)
	tok := e.tokens[store.RoleEngineer]
	rec := e.do(req{method: "POST", path: lotsPath(e), token: tok, body: `[
		{"lot":"B1","inspected":100,"defective":1},
		{"lot":"B2","inspected":100,"defective":2,"time":"2026-01-05 08:00"},
		{"lot":"B3","inspected":100,"defective":0}]`})
	if rec.Code != http.StatusCreated {
		t.Fatalf("status %d: %s", rec.Code, rec.Body.String())
	}
	got := decodeJSON[struct {
		Lots []map[string]any `json:"lots"`
	}](t, rec)
	if len(got.Lots) != 3 || e.lotCount(t) != 3 {
		t.Fatalf("%d lots answered, %d stored; want 3", len(got.Lots), e.lotCount(t))
	}
	if got.Lots[1]["time"] != "2026-01-05T08:00:00+01:00" {
		t.Errorf("a local time is read in the process's zone: got %v", got.Lots[1]["time"])
	}
	// One bad lot in an array stores none of them.
	rec = e.do(req{method: "POST", path: lotsPath(e), token: tok, body: `[
		{"lot":"C1","inspected":100,"defective":1},
		{"lot":"C2","inspected":100,"defective":101}]`})
	if rec.Code != http.StatusBadRequest {
		t.Fatalf("status %d, want 400: %s", rec.Code, rec.Body.String())
	}
	m := decodeJSON[apiError](t, rec)
	if len(m.Problems) != 1 || m.Problems[0].Index == nil || *m.Problems[0].Index != 1 || m.Problems[0].Field != "defective" {
		t.Errorf("problems = %+v, want one at index 1 naming defective", m.Problems)
	}
	if !strings.Contains(m.Error, "[1].defective") {
		t.Errorf("error %q does not name [1].defective", m.Error)
	}
	if e.lotCount(t) != 3 {
		t.Errorf("%d lots stored after a refused array, want 3", e.lotCount(t))
	}
}

// TestPostLotsBadInput: each bad body is refused with 400 naming the
// field, and nothing is stored.
func TestPostLotsBadInput(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 5, func(int) int64 { return 1 })
	tok := e.tokens[store.RoleInspector]
	future := time.Now().Add(72 * time.Hour).UTC().Format(time.RFC3339)
	cases := []struct {
		body  string
		field string // named in the error
	}{
		{`{"lot":"X","inspected":100,"defective":1,"colour":"red"}`, "colour"},
		{`{"lot":"X","inspected":100.5,"defective":1}`, "inspected"},
		{`{"lot":"X","inspected":1e2,"defective":1}`, "inspected"},
		{`{"lot":"X","inspected":"100","defective":1}`, "inspected"},
		{`{"lot":"X","inspected":100,"defective":-1}`, "defective"},
		{`{"lot":"X","inspected":0,"defective":0}`, "inspected"},
		{`{"lot":"X","inspected":100,"defective":101}`, "defective"},
		{`{"lot":"X","inspected":100}`, "defective"},
		{`{"inspected":100,"defective":1}`, "lot"},
		{`{"lot":"","inspected":100,"defective":1}`, "lot"},
		{`{"lot":7,"inspected":100,"defective":1}`, "lot"},
		{`{"lot":"X","inspected":100,"defective":1,"defects":1}`, "defects"},
		{`{"lot":"X","inspected":100,"defective":1,"time":"yesterday"}`, "time"},
		{`{"lot":"X","inspected":100,"defective":1,"time":"` + future + `"}`, "time"},
		{`{"lot":"X","inspected":100,"defective":1,"categories":{"scratch":1.5}}`, "categories"},
		{`{"lot":"X","inspected":100,"defective":1,"categories":{"smudge":1}}`, "categories.smudge"},
		{`{"lot":"X","inspected":100,"defective":1,"categories":[1]}`, "categories"},
		{`{"lot":"X","inspected":100,"defective":1,"inspected":100}`, "inspected"},
		{`{"lot":"L00001","inspected":100,"defective":1}`, ""}, // conflict with a stored lot: 409 below
		{`[]`, ""},
		{`{"lot":`, ""},
		{`"lot"`, ""},
		{``, ""},
	}
	for _, c := range cases {
		before := e.lotCount(t)
		rec := e.do(req{method: "POST", path: lotsPath(e), body: c.body, token: tok})
		want := http.StatusBadRequest
		if strings.Contains(c.body, "L00001") {
			want = http.StatusConflict
		}
		if rec.Code != want {
			t.Errorf("%s: status %d, want %d: %s", c.body, rec.Code, want, rec.Body.String())
			continue
		}
		m := decodeJSON[apiError](t, rec)
		if m.Error == "" {
			t.Errorf("%s: no error message", c.body)
		}
		if c.field != "" {
			found := false
			for _, p := range m.Problems {
				found = found || p.Field == c.field
			}
			if !found || !strings.Contains(m.Error, c.field) {
				t.Errorf("%s: error does not name field %q: %s", c.body, c.field, rec.Body.String())
			}
		}
		if after := e.lotCount(t); after != before {
			t.Errorf("%s: refused request changed the lots (%d → %d)", c.body, before, after)
		}
	}
}

func TestChartJSON(t *testing.T) {
	e := newTestEnv(t)
	counts := []int64{4, 6, 5, 3, 7, 5, 4, 6, 5, 4, 30, 5, 6, 4, 5, 3, 6, 5, 4, 5}
	e.addLots(t, len(counts), func(i int) int64 { return counts[i] })
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/chart", e.proc.ID), token: e.tokens[store.RoleViewer]})
	if rec.Code != 200 {
		t.Fatalf("status %d: %s", rec.Code, rec.Body.String())
	}
	var raw map[string]json.RawMessage
	if err := json.Unmarshal(rec.Body.Bytes(), &raw); err != nil {
		t.Fatal(err)
	}
	// The shared shape of the analyze JSON.
	for _, k := range []string{"chart", "center", "sigma", "lots", "signals", "warnings", "dispersion"} {
		if _, ok := raw[k]; !ok {
			t.Errorf("chart JSON has no %q", k)
		}
	}
	var c struct {
		Chart  string  `json:"chart"`
		Center float64 `json:"center"`
		Sigma  float64 `json:"sigma"`
		Lots   []struct {
			Lot         string   `json:"lot"`
			Inspected   int64    `json:"inspected"`
			Count       int64    `json:"count"`
			Value       float64  `json:"value"`
			Center      float64  `json:"center"`
			UCL         float64  `json:"ucl"`
			LCL         float64  `json:"lcl"`
			Z           float64  `json:"z"`
			OutOfLimits bool     `json:"out_of_limits"`
			Signals     []string `json:"signals"`
			Limits      string   `json:"limits"`
		} `json:"lots"`
		Signals []struct {
			Rule        string   `json:"rule"`
			Lots        []string `json:"lots"`
			Description string   `json:"description"`
		} `json:"signals"`
		Dispersion map[string]any `json:"dispersion"`
	}
	if err := json.Unmarshal(rec.Body.Bytes(), &c); err != nil {
		t.Fatal(err)
	}
	if c.Chart != "p" || c.Sigma != 3 || len(c.Lots) != len(counts) {
		t.Fatalf("chart %q sigma %v lots %d", c.Chart, c.Sigma, len(c.Lots))
	}
	// p chart trial limits, p̄ = Σd/Σn and p̄ ± 3√(p̄(1−p̄)/n) (Montgomery,
	// Introduction to Statistical Quality Control, the fraction
	// nonconforming chart, from memory). All lots here have n = 200.
	var sum int64
	for _, x := range counts {
		sum += x
	}
	pbar := float64(sum) / float64(200*len(counts))
	ucl := pbar + 3*math.Sqrt(pbar*(1-pbar)/200)
	lcl := max(0, pbar-3*math.Sqrt(pbar*(1-pbar)/200))
	if math.Abs(c.Center-pbar) > 1e-12 {
		t.Errorf("center %v, want p̄ = %v", c.Center, pbar)
	}
	for i, l := range c.Lots {
		if math.Abs(l.UCL-ucl) > 1e-9 || math.Abs(l.LCL-lcl) > 1e-9 {
			t.Errorf("lot %d: limits [%v, %v], want [%v, %v]", i, l.LCL, l.UCL, lcl, ucl)
		}
		if want := float64(counts[i]) / 200; math.Abs(l.Value-want) > 1e-12 {
			t.Errorf("lot %d: value %v, want %v", i, l.Value, want)
		}
		if l.Limits != "trial" {
			t.Errorf("lot %d: limits %q, want trial", i, l.Limits)
		}
		if want := float64(counts[i])/200 > ucl; l.OutOfLimits != want {
			t.Errorf("lot %d (%d of 200): out_of_limits %v, want %v", i, counts[i], l.OutOfLimits, want)
		}
	}
	if !c.Lots[10].OutOfLimits || !slices.Contains(c.Lots[10].Signals, "we1") {
		t.Errorf("lot 10 (30 of 200) not marked out of limits with we1: %+v", c.Lots[10])
	}
	found := false
	for _, s := range c.Signals {
		found = found || (s.Rule == "we1" && slices.Equal(s.Lots, []string{lotCode(10)}))
	}
	if !found {
		t.Errorf("no we1 signal for %s: %+v", lotCode(10), c.Signals)
	}
	for _, k := range []string{"chi_square", "df", "ratio", "p_value", "sigma_z"} {
		if _, ok := c.Dispersion[k]; !ok {
			t.Errorf("dispersion has no %q", k)
		}
	}
}

func TestChartWindow(t *testing.T) {
	e := newTestEnv(t)
	lots := e.addLots(t, 48, func(i int) int64 { return int64(2 + i%5) })
	base := fmt.Sprintf("/api/v1/processes/%d/", e.proc.ID)
	tok := e.tokens[store.RoleViewer]
	loc := e.proc.Location()
	from := lots[10].Time.In(loc).Format(time.RFC3339)
	to := lots[20].Time.In(loc).Format(time.RFC3339)
	for _, what := range []string{"chart", "lots"} {
		rec := e.do(req{method: "GET", path: base + what + "?from=" + urlq(from) + "&to=" + urlq(to), token: tok})
		if rec.Code != 200 {
			t.Fatalf("%s: status %d: %s", what, rec.Code, rec.Body.String())
		}
		var ids []string
		if what == "chart" {
			c := decodeJSON[chartjson.Chart](t, rec)
			for _, l := range c.Lots {
				ids = append(ids, l.Lot)
			}
		} else {
			for _, l := range decodeJSON[[]lotJSON](t, rec) {
				ids = append(ids, l.Lot)
			}
		}
		var want []string
		for i := 10; i <= 20; i++ {
			want = append(want, lotCode(i))
		}
		if !slices.Equal(ids, want) {
			t.Errorf("%s from %s to %s: lots %v, want %v", what, from, to, ids, want)
		}
	}
	// A date-only window is whole days in the process's time zone.
	day := lots[30].Time.In(loc).Format(time.DateOnly)
	rec := e.do(req{method: "GET", path: base + "lots?from=" + day + "&to=" + day, token: tok})
	var want []string
	for _, l := range lots {
		if l.Time.In(loc).Format(time.DateOnly) == day {
			want = append(want, l.Lot)
		}
	}
	var got []string
	for _, l := range decodeJSON[[]lotJSON](t, rec) {
		got = append(got, l.Lot)
	}
	if !slices.Equal(got, want) {
		t.Errorf("lots on %s: %v, want %v", day, got, want)
	}
	for _, q := range []struct{ query, param string }{
		{"from=2026-13-01", "from"},
		{"to=soon", "to"},
		{"from=2026-02-01&to=2026-01-01", "to"},
	} {
		for _, what := range []string{"chart", "lots", "signals"} {
			rec := e.do(req{method: "GET", path: base + what + "?" + q.query, token: tok})
			m := decodeJSON[map[string]any](t, rec)
			if rec.Code != 400 || !strings.Contains(fmt.Sprint(m["error"]), `"`+q.param+`"`) {
				t.Errorf("%s?%s: %d %v, want 400 naming %q", what, q.query, rec.Code, m, q.param)
			}
		}
	}
}

func urlq(s string) string { return strings.ReplaceAll(s, "+", "%2B") }

func TestSignals(t *testing.T) {
	e := newTestEnv(t)
	// Ten low lots, then nine high ones: Western Electric rule 4 (8 in a
	// row on one side of the centre line; Western Electric Statistical
	// Quality Control Handbook, 1956, from memory) fires on the high run
	// (and on the low one).
	counts := []int64{2, 3, 2, 3, 2, 3, 2, 3, 2, 3, 8, 9, 8, 9, 8, 9, 8, 9, 8}
	lots := e.addLots(t, len(counts), func(i int) int64 { return counts[i] })
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/signals", e.proc.ID), token: e.tokens[store.RoleViewer]})
	if rec.Code != 200 {
		t.Fatalf("status %d: %s", rec.Code, rec.Body.String())
	}
	sigs := decodeJSON[[]map[string]any](t, rec)
	var we4 map[string]any
	for _, s := range sigs {
		for _, k := range []string{"rule", "lots", "description", "first_time", "last_time", "annotations"} {
			if _, ok := s[k]; !ok {
				t.Errorf("signal has no %q: %v", k, s)
			}
		}
		if s["rule"] == "we4" && slices.Contains(s["lots"].([]any), any(lotCode(len(counts)-1))) {
			we4 = s
		}
	}
	if we4 == nil {
		t.Fatalf("no we4 signal on the high run: %v", sigs)
	}
	ls := we4["lots"].([]any)
	first, last := ls[0].(string), ls[len(ls)-1].(string)
	idx := func(code string) int { return sort.Search(len(lots), func(i int) bool { return lots[i].Lot >= code }) }
	loc := e.proc.Location()
	if we4["first_time"] != lots[idx(first)].Time.In(loc).Format(time.RFC3339) || we4["last_time"] != lots[idx(last)].Time.In(loc).Format(time.RFC3339) {
		t.Errorf("we4 %v..%v: times %v..%v do not match the lots", first, last, we4["first_time"], we4["last_time"])
	}
	if idx(first) < 10 {
		t.Errorf("we4 starts at %s, among the low lots", first)
	}
}

func TestRevokedToken(t *testing.T) {
	e := newTestEnv(t)
	ctx := t.Context()
	raw, tk, err := e.db.CreateToken(ctx, "admin1", "inspector1", "station 4")
	if err != nil {
		t.Fatal(err)
	}
	if rec := e.do(req{method: "GET", path: "/api/v1/me", token: raw}); rec.Code != 200 {
		t.Fatalf("fresh token: status %d", rec.Code)
	}
	if err := e.db.RevokeToken(ctx, "admin1", tk.ID); err != nil {
		t.Fatal(err)
	}
	for _, r := range []req{
		{method: "GET", path: "/api/v1/me", token: raw},
		{method: "POST", path: lotsPath(e), token: raw, body: `{"lot":"Z1","inspected":10,"defective":0}`},
	} {
		rec := e.do(r)
		if rec.Code != http.StatusUnauthorized {
			t.Errorf("%s %s with a revoked token: status %d, want 401", r.method, r.path, rec.Code)
		}
		if rec.Header().Get("WWW-Authenticate") == "" {
			t.Errorf("%s %s: 401 without WWW-Authenticate", r.method, r.path)
		}
	}
	if e.lotCount(t) != 0 {
		t.Error("a revoked token stored a lot")
	}
	for _, bad := range []string{"Bearer", "Basic abc", "Bearer  "} {
		hr := req{method: "GET", path: "/api/v1/me", headers: map[string]string{"Authorization": bad}}
		if rec := e.do(hr); rec.Code != http.StatusUnauthorized {
			t.Errorf("Authorization %q: status %d, want 401", bad, rec.Code)
		}
	}
}

// TestChartLimitSets: lots before the first frozen set get trial limits
// from themselves; lots from its EffectiveFrom on are judged against the
// frozen centre, p₀ ± 3√(p₀(1−p₀)/n) ("standard given" p chart,
// Montgomery, Introduction to Statistical Quality Control, from memory).
func TestChartLimitSets(t *testing.T) {
	e := newTestEnv(t)
	lots := e.addLots(t, 40, func(i int) int64 { return int64(3 + i%3) })
	const p0 = 0.01
	ls, err := e.db.FreezeLimitSet(t.Context(), "engineer1", store.LimitSet{
		ProcessID: e.proc.ID, Method: "sigma", K: 3, Center: p0, SigmaZ: 1,
		BaselineFrom: lots[0].Time, BaselineTo: lots[19].Time, BaselineLots: 20,
		EffectiveFrom: lots[25].Time, Reason: "baseline of the first 20 lots",
	})
	if err != nil {
		t.Fatal(err)
	}
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/chart", e.proc.ID), token: e.tokens[store.RoleViewer]})
	if rec.Code != 200 {
		t.Fatalf("status %d: %s", rec.Code, rec.Body.String())
	}
	c := decodeJSON[chartjson.Chart](t, rec)
	var sum int64
	for _, l := range lots[:25] {
		sum += l.Count
	}
	pTrial := float64(sum) / float64(200*25)
	for i, l := range c.Lots {
		p, limits, set := pTrial, "trial", 0
		if i >= 25 {
			p, limits, set = p0, "frozen", ls.Number
		}
		ucl := p + 3*math.Sqrt(p*(1-p)/200)
		if l.Limits != limits || l.LimitSet != set {
			t.Errorf("lot %d: limits %q set %d, want %q %d", i, l.Limits, l.LimitSet, limits, set)
		}
		if math.Abs(float64(l.Center)-p) > 1e-12 || math.Abs(float64(l.UCL)-ucl) > 1e-9 {
			t.Errorf("lot %d: centre %v UCL %v, want %v %v", i, l.Center, l.UCL, p, ucl)
		}
	}
	// 5 of 200 is beyond the frozen UCL 0.0311 but not beyond the trial one.
	for i, l := range c.Lots {
		want := float64(lots[i].Count)/200 > p0+3*math.Sqrt(p0*(1-p0)/200)
		if i < 25 {
			want = float64(lots[i].Count)/200 > pTrial+3*math.Sqrt(pTrial*(1-pTrial)/200)
		}
		if l.OutOfLimits != want {
			t.Errorf("lot %d: out_of_limits %v, want %v", i, l.OutOfLimits, want)
		}
	}
	// A lot posted now is judged against the frozen set.
	rec = e.do(req{method: "POST", path: lotsPath(e), token: e.tokens[store.RoleInspector], body: `{"lot":"N1","inspected":200,"defective":9}`})
	if rec.Code != http.StatusCreated {
		t.Fatalf("post: %d %s", rec.Code, rec.Body.String())
	}
	v := decodeJSON[struct {
		Lots []verdictJSON `json:"lots"`
	}](t, rec).Lots[0]
	if v.Limits != "frozen" || v.LimitSet != ls.Number || !v.OutOfLimits || math.Abs(float64(v.Center)-p0) > 1e-12 {
		t.Errorf("posted lot verdict %+v, want frozen set %d, centre %v, out of limits", v, ls.Number, p0)
	}
}

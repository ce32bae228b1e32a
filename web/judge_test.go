package web

import (
	"context"
	"encoding/json"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
	"lotwatch/store"
)

// chartNow is the chart the server answers with (possibly from its cache)
// and the chart judged afresh from the store, both as JSON.
func chartNow(t *testing.T, e *testEnv, p store.Process) (served, fresh string) {
	t.Helper()
	ctx := context.Background()
	p, err := e.db.Process(ctx, p.ID)
	if err != nil {
		t.Fatal(err)
	}
	pc, err := e.srv.freshChart(ctx, p)
	if err != nil {
		t.Fatal(err)
	}
	want, err := e.srv.analyzeProcess(ctx, p)
	if err != nil {
		t.Fatal(err)
	}
	a, _ := json.Marshal(pc.chartJSON(window{}, chartPage{limit: maxChartPage}))
	b, _ := json.Marshal(want.chartJSON(window{}, chartPage{limit: maxChartPage}))
	return string(a), string(b)
}

// The cached chart follows every kind of change to what it is drawn from
// — lots posted (also back-dated), corrected and voided, a limit set
// frozen, new settings, lots imported through another connection to the
// file — and always equals the chart judged afresh.
func TestChartCacheFollowsChanges(t *testing.T) {
	e := newTestEnv(t)
	ctx := context.Background()
	lots := e.addLots(t, 30, func(i int) int64 { return int64(2 + i%4) })
	other, err := store.Open(e.dbPath) // as a command-line import would
	if err != nil {
		t.Fatal(err)
	}
	defer other.Close()
	steps := []struct {
		name   string
		change func(t *testing.T)
	}{
		{"first read", func(t *testing.T) {}},
		{"post a lot", func(t *testing.T) {
			rec := e.do(req{method: "POST", path: lotsPath(e), token: e.tokens[store.RoleInspector],
				body: `{"lot":"N1","inspected":200,"defective":19}`})
			if rec.Code != 201 || !strings.Contains(rec.Body.String(), `"out_of_limits":true`) {
				t.Fatalf("post: %d %s", rec.Code, rec.Body)
			}
		}},
		{"post a back-dated lot", func(t *testing.T) {
			at := lots[3].Time.Add(30 * time.Minute).Format(time.RFC3339)
			rec := e.do(req{method: "POST", path: lotsPath(e), token: e.tokens[store.RoleInspector],
				body: fmt.Sprintf(`{"lot":"N2","inspected":200,"defective":0,"time":%q}`, at)})
			if rec.Code != 201 {
				t.Fatalf("post: %d %s", rec.Code, rec.Body)
			}
		}},
		{"correct a lot", func(t *testing.T) {
			in := lots[5].LotInput
			in.Count = 40
			if _, err := e.db.CorrectLot(ctx, "eng", "miscounted", lots[5].ID, in); err != nil {
				t.Fatal(err)
			}
		}},
		{"void a lot", func(t *testing.T) {
			if err := e.db.VoidLot(ctx, "eng", "wrong line", lots[6].ID); err != nil {
				t.Fatal(err)
			}
		}},
		{"freeze limits", func(t *testing.T) {
			if _, err := e.db.FreezeLimitSet(ctx, "eng", store.LimitSet{ProcessID: e.proc.ID, Method: spc.MethodSigma, K: 3, Center: 0.015,
				EffectiveFrom: lots[20].Time, Reason: "baseline"}); err != nil {
				t.Fatal(err)
			}
		}},
		{"new settings", func(t *testing.T) {
			p := e.proc
			p.Rules, p.K = "nelson", 2.5
			if _, err := e.db.UpdateProcess(ctx, "admin", "tighter", p); err != nil {
				t.Fatal(err)
			}
		}},
		{"import through another connection", func(t *testing.T) {
			csv := "lot,time,inspected,defective\nM1," + lots[29].Time.Add(10*time.Minute).Format(time.RFC3339) + ",200,3\n"
			if _, err := other.Import(ctx, "kim", strings.NewReader(csv), store.ImportOptions{Process: e.proc.Name}); err != nil {
				t.Fatal(err)
			}
		}},
	}
	n := 0
	for _, s := range steps {
		s.change(t)
		served, fresh := chartNow(t, e, e.proc)
		if served != fresh {
			t.Fatalf("after %s the served chart differs from a fresh one:\n%s\n%s", s.name, served, fresh)
		}
		var c chartjson.Chart
		json.Unmarshal([]byte(served), &c)
		if s.name != "first read" && len(c.Lots) == n && s.name != "correct a lot" && s.name != "freeze limits" && s.name != "new settings" {
			t.Errorf("after %s the chart still has %d lots", s.name, n)
		}
		n = len(c.Lots)
	}
}

// The cached charts hold at most the cache's budget of lots, the most
// recently used first; the chart just built stays even when it alone
// exceeds the budget.
func TestChartCacheBounded(t *testing.T) {
	e := newTestEnv(t)
	e.srv.judges.maxLots = 10
	ctx := context.Background()
	var last store.Process
	for i := range 6 {
		p, err := e.db.AddProcess(ctx, "setup", store.Process{Name: fmt.Sprintf("press %d", i), Chart: spc.ChartNP})
		if err != nil {
			t.Fatal(err)
		}
		n := 3
		if i == 5 {
			n = 12
		}
		in := make([]store.LotInput, n)
		for j := range in {
			in[j] = store.LotInput{Lot: fmt.Sprintf("A%d", j), Inspected: 50, Count: 1}
		}
		if _, err := e.db.AddLots(ctx, "setup", p.ID, in); err != nil {
			t.Fatal(err)
		}
		if _, err := e.srv.freshChart(ctx, p); err != nil {
			t.Fatal(err)
		}
		if charts, lots := e.srv.judges.cachedLots(); i < 5 && (lots > 10 || charts != min(i+1, 3)) {
			t.Errorf("after process %d: %d charts of %d lots cached, want at most 10 lots (3 charts)", i, charts, lots)
		}
		last = p
	}
	if charts, lots := e.srv.judges.cachedLots(); charts != 1 || lots != 12 {
		t.Errorf("%d charts of %d lots cached, want the last one alone (12 lots)", charts, lots)
	}
	e.srv.judges.mu.Lock()
	_, ok := e.srv.judges.cache[last.ID]
	e.srv.judges.mu.Unlock()
	if !ok {
		t.Errorf("the chart just built left the cache")
	}
}

func TestMergeLots(t *testing.T) {
	t0 := time.Date(2025, 3, 1, 0, 0, 0, 0, time.UTC)
	lot := func(id int64, h int) store.Lot {
		return store.Lot{ID: id, LotInput: store.LotInput{Time: t0.Add(time.Duration(h) * time.Hour)}}
	}
	have := []store.Lot{lot(1, 0), lot(2, 2), lot(3, 4)}
	cases := []struct {
		added []store.Lot
		want  []int64
	}{
		{nil, []int64{1, 2, 3}},
		{[]store.Lot{lot(4, 5), lot(5, 6)}, []int64{1, 2, 3, 4, 5}},
		{[]store.Lot{lot(4, 1), lot(5, 4)}, []int64{1, 4, 2, 3, 5}}, // same time: by id
		{[]store.Lot{lot(4, -1)}, []int64{4, 1, 2, 3}},
	}
	for _, c := range cases {
		for _, grow := range []bool{false, true} {
			h := append(make([]store.Lot, 0, 8), have...)
			got, hi := mergeLots(h, c.added, grow)
			var ids []int64
			for _, l := range got {
				ids = append(ids, l.ID)
			}
			if fmt.Sprint(ids) != fmt.Sprint(c.want) || len(h) != 3 || h[0].ID != 1 || h[2].ID != 3 {
				t.Errorf("merge %v (grow %v): %v, have now %v", c.added, grow, ids, h)
			}
			if len(c.added) > 0 && hi != c.added[len(c.added)-1].ID {
				t.Errorf("highest id %d", hi)
			}
		}
	}
	_ = filepath.Join
}

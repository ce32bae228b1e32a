package web

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"sort"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// checkThinned checks a thinned drawing of ps: at most maxDrawn points,
// in order, and every point outside its limits either drawn or counted
// by a drawn point outside its limits that stands for its stretch.
func checkThinned(t *testing.T, ps []viewPoint, idx []int) {
	t.Helper()
	if len(idx) > maxDrawn {
		t.Fatalf("%d of %d points drawn, more than the cap of %d", len(idx), len(ps), maxDrawn)
	}
	for k := 1; k < len(idx); k++ {
		if idx[k] <= idx[k-1] {
			t.Fatalf("drawn points out of order at %d: %d after %d", k, idx[k], idx[k-1])
		}
	}
	out, counted := 0, 0
	seen := map[*stretch]bool{}
	for _, p := range ps {
		if p.Out() {
			out++
		}
	}
	for _, i := range idx {
		st := ps[i].Stretch
		if st == nil {
			if ps[i].Out() {
				counted++
			}
			continue
		}
		if seen[st] {
			continue
		}
		seen[st] = true
		counted += st.Out
		if st.Out > 0 && !ps[i].Out() {
			// the stretch's drawn points must include one outside its limits
			has := false
			for _, j := range idx {
				if ps[j].Stretch == st && ps[j].Out() {
					has = true
				}
			}
			if !has {
				t.Errorf("stretch %s … %s holds %d points outside their limits but none is drawn", st.First, st.Last, st.Out)
			}
		}
	}
	if counted != out {
		t.Errorf("the drawing shows or counts %d points outside their limits, the chart has %d", counted, out)
	}
}

// TestThinCapsLongSignals: half a million points, the later half all in
// a run-rule signal and some outside their limits, are drawn as at most
// maxDrawn points. Before the cap every point in a signal was kept (a
// probe drew 458,961 lots as 458,752 points, a 187 MB page).
func TestThinCapsLongSignals(t *testing.T) {
	const n = 500_000
	ps := make([]viewPoint, n)
	rng := rand.New(rand.NewPCG(12, 1))
	for i := range ps {
		ps[i] = viewPoint{Label: lotCode(i), Value: 0.02 + 0.005*rng.NormFloat64()}
		if i >= n/2 {
			ps[i].Value += 0.01
			ps[i].Rules = []string{"nelson2"}
		}
		if i%997 == 0 {
			ps[i].Above, ps[i].Value = true, 0.08
		}
		if i%1499 == 0 {
			ps[i].Below, ps[i].Value = true, -0.01
		}
	}
	idx, thinned := thin(ps)
	if !thinned {
		t.Fatal("half a million points were not thinned")
	}
	checkThinned(t, ps, idx)
}

// TestChartOfALongRecordIsCapped: a 500,000-lot record whose rate shifts
// half-way (so that the run rules signal over long stretches) is judged
// and drawn with at most maxDrawn points, and the chart's options stay
// small. The record is built in memory and judged as the server does.
func TestChartOfALongRecordIsCapped(t *testing.T) {
	if testing.Short() {
		t.Skip("judges half a million lots")
	}
	const n = 500_000
	p := store.Process{ID: 1, Name: "long", Chart: spc.ChartP, Method: spc.MethodSigma, K: 3, Rules: "nelson", TimeZone: "UTC"}
	rng := rand.New(rand.NewPCG(7, 7))
	start := time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)
	// Counts drawn by the inverse of the binomial distribution function
	// (gonum's distuv.Binomial gives the same law; one draw per lot).
	cdf := func(rate float64) []float64 {
		c, sum := make([]float64, 201), 0.0
		pmf := math.Pow(1-rate, 200)
		for k := range c {
			sum += pmf
			c[k] = sum
			pmf *= float64(200-k) / float64(k+1) * rate / (1 - rate)
		}
		return c
	}
	before, after := cdf(0.02), cdf(0.035)
	lots := make([]store.Lot, n)
	for i := range lots {
		c := before
		if i >= n/2 {
			c = after
		}
		d := int64(sort.SearchFloat64s(c, rng.Float64()))
		lots[i] = store.Lot{ID: int64(i + 1), LotInput: store.LotInput{Lot: lotCode(i), Time: start.Add(time.Duration(i) * time.Minute), Inspected: 200, Count: d}}
	}
	pc, err := judge(p, lots, nil)
	if err != nil {
		t.Fatal(err)
	}
	v, err := buildView(pc, window{}, byLot, nil)
	if err != nil {
		t.Fatal(err)
	}
	inSignal := 0
	for _, pt := range v.Points {
		if len(pt.Rules) > 0 {
			inSignal++
		}
	}
	if inSignal < n/10 {
		t.Fatalf("only %d lots in a signal: the record does not test long signals", inSignal)
	}
	idx, _ := thin(v.Points)
	checkThinned(t, v.Points, idx)
	opts, details := chartOptions("long", v, idx)
	b, err := json.Marshal(map[string]any{"options": opts, "details": details})
	if err != nil {
		t.Fatal(err)
	}
	// 2,000 points with their tooltips take well under 4 MB (common
	// practice, no source); the probe's page was 187 MB.
	if len(b) > 4<<20 {
		t.Errorf("the chart's options and tooltips are %d bytes", len(b))
	}
	t.Logf("%d lots, %d in a signal: %d points drawn, %d bytes of options and tooltips", n, inSignal, len(idx), len(b))
}

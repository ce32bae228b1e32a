package spc

import (
	"fmt"
	"testing"
)

// TestWatchShifts: a sustained rise from 1 % to 3 % in lots of 200 that
// no single lot shows beyond the 3σ limits is signalled by the CUSUM and
// the EWMA as signals of kind "shift", with the lots marked.
//
// Sources: the upper limit is n·(p0 + 3√(p0(1−p0)/n)) = 200·(0.01 +
// 3·0.00704) = 6.22 nonconforming units (the p chart with a standard given,
// Montgomery, Introduction to Statistical Quality Control, §7.2, from
// memory); that a CUSUM (Page 1954) and an EWMA (Roberts 1959) find a
// sustained shift no single lot shows is what they are for (Montgomery
// ch. 9, from memory). The scores and statistics themselves are checked
// against their formulas and a simulation in cusum_test.go.
func TestWatchShifts(t *testing.T) {
	var lots []Lot
	for i := 0; i < 60; i++ {
		d := int64([]int{2, 1, 3, 2, 2}[i%5])
		if i >= 40 {
			d = int64([]int{5, 6, 4, 6, 5}[i%5]) // 2.7 %, each below the UCL count 6.2
		}
		lots = append(lots, Lot{Code: fmt.Sprintf("L%02d", i), Inspected: 200, Count: d})
	}
	a, err := Analyze(lots, Config{Chart: ChartP, Standard: &Standard{Center: 0.01}, Rules: RuleWE1.Set()})
	if err != nil {
		t.Fatal(err)
	}
	if len(a.Signals) != 0 {
		t.Fatalf("the chart itself signals: %+v", a.Signals)
	}
	sizes := make([]int64, len(lots))
	for i := range sizes {
		sizes[i] = 200
	}
	w, err := WatchShifts(a, lots, Monitors{CUSUMShift: 0.02, EWMALambda: 0.2}, sizes)
	if err != nil {
		t.Fatal(err)
	}
	if a.Shift != w || w.CUSUM == nil || w.EWMA == nil || len(w.CUSUMPoints) != 60 || len(w.EWMAPoints) != 60 {
		t.Fatalf("watch %+v", w)
	}
	kinds := map[Rule]int{}
	for _, s := range a.Signals {
		if s.Rule.Kind() != "shift" || s.First < 38 || s.Side != 1 || len(s.Lots) != s.Last-s.First+1 {
			t.Errorf("signal %+v", s)
		}
		kinds[s.Rule]++
		if !a.Points[s.Last].Rules.Has(s.Rule) {
			t.Errorf("lot %d not marked %v", s.Last, s.Rule)
		}
	}
	if kinds[RuleCUSUM] == 0 || kinds[RuleEWMA] == 0 {
		t.Errorf("signals %v", kinds)
	}
	if _, err := ParseRules("cusum"); err == nil {
		t.Error("cusum parsed as a run rule")
	}
}

// TestWatchShiftsDesignsEWMAWidth: an EWMA given a number of lots between
// false alarms instead of a width gets the width DesignEWMA designs for
// it over the lot sizes (the design itself is checked against Lucas &
// Saccucci in ewma_arl_test.go); a width given is kept, and no width and
// no target give DefaultEWMAWidth. Giving both is refused by the store.
func TestWatchShiftsDesignsEWMAWidth(t *testing.T) {
	lots := make([]Lot, 30)
	sizes := make([]int64, len(lots))
	for i := range lots {
		lots[i] = Lot{Code: fmt.Sprintf("L%02d", i), Inspected: 200, Count: int64(1 + i%3)}
		sizes[i] = 200
	}
	want, err := DesignEWMA(ChartP, 0.01, 0.1, sizes, 500)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		m     Monitors
		width float64
	}{
		{Monitors{EWMALambda: 0.1, EWMAARL0: 500}, want.L},
		{Monitors{EWMALambda: 0.1, EWMAWidth: 2.5}, 2.5},
		{Monitors{EWMALambda: 0.1}, DefaultEWMAWidth},
	} {
		a, err := Analyze(lots, Config{Chart: ChartP, Standard: &Standard{Center: 0.01}, Rules: RuleWE1.Set()})
		if err != nil {
			t.Fatal(err)
		}
		w, err := WatchShifts(a, lots, c.m, sizes)
		if err != nil {
			t.Fatal(err)
		}
		got, err := c.m.EWMA(ChartP, 0.01, sizes)
		if err != nil || w.EWMA.L != c.width || got.L != c.width || w.EWMA.ARL0 != w.EWMA.ARL(0.01, sizes) {
			t.Errorf("%+v: width %g (designed %v, %v), ARL0 %g; want width %g", c.m, w.EWMA.L, got, err, w.EWMA.ARL0, c.width)
		}
	}
	if want.ARL0 < 500 || want.L == DefaultEWMAWidth {
		t.Errorf("the design for 500 lots: width %g, ARL0 %g", want.L, want.ARL0)
	}
}

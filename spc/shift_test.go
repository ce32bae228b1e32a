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

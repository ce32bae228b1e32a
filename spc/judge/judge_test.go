package judge

import (
	"reflect"
	"testing"
	"time"

	"lotwatch/spc"
)

// TestJudgeSetsChooseThePhases checks which lots each limit set judges:
// the cases are constructed so that the answer follows from the sets'
// dates alone (no outside source applies); the figures of each phase are
// spc's, checked there against published examples.
func TestJudgeSetsChooseThePhases(t *testing.T) {
	t0 := time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)
	var lots []spc.Lot
	var times []time.Time
	for i := range 6 {
		lots = append(lots, spc.Lot{Code: string(rune('A' + i)), Inspected: 200, Count: int64(2 + i%3)})
		times = append(times, t0.Add(time.Duration(i)*time.Hour))
	}
	set := func(n, from int) Set {
		return Set{Number: n, EffectiveFrom: t0.Add(time.Duration(from) * time.Hour), Method: spc.MethodSigma, K: 3, Center: 0.015, SigmaZ: 1}
	}
	trial := spc.Config{Chart: spc.ChartP, Method: spc.MethodSigma, K: 3}
	cases := []struct {
		name  string
		sets  []Set
		setOf []int
	}{
		{"no set: trial limits throughout", nil, []int{0, 0, 0, 0, 0, 0}},
		{"a set from the third lot", []Set{set(1, 2)}, []int{0, 0, 1, 1, 1, 1}},
		{"a set from the first lot", []Set{set(1, 0)}, []int{1, 1, 1, 1, 1, 1}},
		{"two sets", []Set{set(1, 1), set(2, 4)}, []int{0, 1, 1, 1, 2, 2}},
		{"a later set from the same lot replaces the earlier", []Set{set(1, 3), set(2, 3)}, []int{0, 0, 0, 2, 2, 2}},
		{"a set after the last lot judges nothing", []Set{set(1, 9)}, []int{0, 0, 0, 0, 0, 0}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			a, setOf, err := Judge(lots, times, trial, c.sets, spc.RuleSet(0))
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(setOf, c.setOf) {
				t.Errorf("setOf %v, want %v", setOf, c.setOf)
			}
			if len(a.Points) != len(lots) {
				t.Fatalf("%d points for %d lots", len(a.Points), len(lots))
			}
			for i, p := range a.Points {
				if c.setOf[i] > 0 && p.Center != 0.015 {
					t.Errorf("lot %d judged by set %d has centre %v, want the set's 0.015", i, c.setOf[i], p.Center)
				}
			}
		})
	}
	if _, _, err := Judge(nil, nil, trial, nil, 0); err == nil {
		t.Error("no lots judged without an error")
	}
}

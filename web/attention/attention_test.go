package attention

import (
	"fmt"
	"slices"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// chart builds a p chart of 100-unit lots with the given counts, judged
// with the Western Electric rules, and its store lots (ids 1, 2, …, one
// lot an hour).
func chart(t *testing.T, counts []int64) ([]store.Lot, *spc.Analysis) {
	t.Helper()
	t0 := time.Date(2026, 11, 1, 6, 0, 0, 0, time.UTC)
	lots := make([]store.Lot, len(counts))
	sl := make([]spc.Lot, len(counts))
	for i, c := range counts {
		lots[i] = store.Lot{ID: int64(i + 1), LotInput: store.LotInput{Lot: fmt.Sprintf("L%02d", i+1), Time: t0.Add(time.Duration(i) * time.Hour), Inspected: 100, Count: c}}
		sl[i] = spc.Lot{Code: lots[i].Lot, Inspected: 100, Count: c}
	}
	a, err := spc.Analyze(sl, spc.Config{Chart: spc.ChartP, Rules: spc.RulesWE})
	if err != nil {
		t.Fatal(err)
	}
	return lots, a
}

// The series: 30 lots alternating 2 and 3 nonconforming per 100 around
// p̄ ≈ 0.03, then lot 31 with 20 (beyond the UCL of about 0.08), then
// 24 more alternating lots. With 20 of 100 the lot is far beyond any
// three-sigma limit computed from such a p̄ (σ = √(p̄(1−p̄)/100) ≈ 0.017;
// from memory of the formula, checked by the chart itself below).
func outSeries() []int64 {
	var cs []int64
	for i := range 55 {
		switch {
		case i == 30:
			cs = append(cs, 20)
		case i%2 == 0:
			cs = append(cs, 2)
		default:
			cs = append(cs, 3)
		}
	}
	return cs
}

// runSeries has a run of 8 lots above the centre line (WE rule 4): 3 of
// 100 against p̄ = 0.025, less than 1σ (≈ 0.016) above it, so that no
// other rule fires.
func runSeries() []int64 {
	var cs []int64
	for i := range 40 {
		switch {
		case i >= 20 && i < 28:
			cs = append(cs, 3)
		case i%2 == 0:
			cs = append(cs, 1)
		default:
			cs = append(cs, 3)
		}
	}
	return cs
}

func TestFind(t *testing.T) {
	p := store.Process{ID: 7, Name: "Line 4", Area: "Assembly"}
	outLots, outA := chart(t, outSeries())
	runLots, runA := chart(t, runSeries())
	if !outA.Points[30].Above {
		t.Fatalf("lot 31 is not above the UCL: the fixture is wrong")
	}
	var run []int
	for _, sg := range runA.Signals {
		if sg.Rule == spc.RuleWE4 {
			for i := sg.First; i <= sg.Last; i++ {
				run = append(run, i)
			}
		}
	}
	if len(run) < 8 {
		t.Fatalf("no rule-4 run in the fixture: %+v", runA.Signals)
	}
	runStart := runLots[run[0]].ID
	cases := []struct {
		name     string
		lots     []store.Lot
		a        *spc.Analysis
		anns     []store.Annotation
		wantLots []int64
		wantKind Kind
	}{
		{"out of limits, unexplained", outLots, outA, nil, []int64{31}, OutOfLimits},
		{"open cause explains", outLots, outA, []store.Annotation{{LotID: 31, Cause: "torn film"}}, nil, ""},
		{"closed cause explains", outLots, outA, []store.Annotation{{LotID: 31, Cause: "torn film", Closed: true}}, nil, ""},
		{"no cause found explains", outLots, outA, []store.Annotation{{LotID: 31, NoCauseFound: true, Reason: "noise", Closed: true}}, nil, ""},
		{"a cause on another lot does not", outLots, outA, []store.Annotation{{LotID: 30, Cause: "torn film"}}, []int64{31}, OutOfLimits},
		{"run, unexplained", runLots, runA, nil, lotIDs(runLots, run), RunRule},
		{"run explained by a cause naming its rule", runLots, runA, []store.Annotation{{LotID: runStart, Rule: "we4", Cause: "new supplier"}}, nil, ""},
		{"run explained by a cause on one of its lots", runLots, runA, []store.Annotation{{LotID: runStart, Cause: "new supplier"}}, nil, ""},
		{"a cause naming another rule explains only its lot", runLots, runA, []store.Annotation{{LotID: runStart, Rule: "we2", Cause: "gauge"}}, lotIDs(runLots, run[1:]), RunRule},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := Find(p, c.lots, c.a, c.anns)
			var ids []int64
			for _, g := range got {
				ids = append(ids, g.LotID)
				if g.Kind != c.wantKind || g.ProcessID != 7 || g.Process != "Line 4" || g.Area != "Assembly" {
					t.Errorf("lot %d: %+v, want kind %q", g.LotID, g, c.wantKind)
				}
			}
			if !slices.Equal(ids, c.wantLots) {
				t.Errorf("lots %v, want %v", ids, c.wantLots)
			}
		})
	}
	got := Find(p, outLots, outA, nil)
	if len(got) != 1 || !slices.Equal(got[0].Rules, []string{"we1"}) || got[0].Lot != "L31" || !got[0].Time.Equal(outLots[30].Time) {
		t.Errorf("entry %+v", got)
	}
	if got := Find(p, nil, nil, nil); got != nil {
		t.Errorf("no lots: %+v", got)
	}
}

func lotIDs(lots []store.Lot, idx []int) []int64 {
	var out []int64
	for _, i := range idx {
		out = append(out, lots[i].ID)
	}
	return out
}

func TestSignalKind(t *testing.T) {
	cases := []struct {
		r    spc.Rule
		want Kind
	}{
		{spc.RuleWE1, OutOfLimits},
		{spc.RuleNelson1, OutOfLimits},
		{spc.RuleWE2, RunRule},
		{spc.RuleNelson7, RunRule},
	}
	for _, c := range cases {
		if got := SignalKind(c.r); got != c.want {
			t.Errorf("%s: %q, want %q", c.r, got, c.want)
		}
	}
}

func TestCountCauses(t *testing.T) {
	anns := []store.Annotation{{Cause: "a"}, {Cause: "b", Closed: true}, {NoCauseFound: true, Reason: "noise", Closed: true}, {Cause: "c"}}
	if got := CountCauses(anns); got != (Causes{Open: 2, Explained: 2}) {
		t.Errorf("%+v", got)
	}
}

func TestOldest(t *testing.T) {
	t0 := time.Date(2026, 12, 1, 23, 0, 0, 0, time.UTC)
	ls := []Lot{{ProcessID: 2, LotID: 9, Time: t0}, {ProcessID: 1, LotID: 5, Time: t0.Add(time.Hour)}, {ProcessID: 1, LotID: 3, Time: t0}}
	Oldest(ls)
	var got []int64
	for _, l := range ls {
		got = append(got, l.LotID)
	}
	if !slices.Equal(got, []int64{3, 9, 5}) {
		t.Errorf("order %v", got)
	}
}

// TestOpenSignals: the rule-4 run of runSeries is one open signal whose
// lots are the run's, until a cause explains the run; a lot explained on
// its own leaves the signal; a lot out of limits is never such a signal.
func TestOpenSignals(t *testing.T) {
	p := store.Process{ID: 7, Name: "Line 4"}
	runLots, runA := chart(t, runSeries())
	outLots, outA := chart(t, outSeries())
	var run []int
	for _, sg := range runA.Signals {
		if sg.Rule == spc.RuleWE4 {
			for i := sg.First; i <= sg.Last; i++ {
				run = append(run, i)
			}
		}
	}
	if len(run) < 8 {
		t.Fatalf("no rule-4 run in the fixture: %+v", runA.Signals)
	}
	first := runLots[run[0]].ID
	cases := []struct {
		name string
		lots []store.Lot
		a    *spc.Analysis
		anns []store.Annotation
		want [][]int64
	}{
		{"run, unexplained", runLots, runA, nil, [][]int64{lotIDs(runLots, run)}},
		{"run explained by a cause on one lot", runLots, runA, []store.Annotation{{LotID: first, Cause: "new supplier"}}, nil},
		{"one lot explained for another rule", runLots, runA, []store.Annotation{{LotID: first, Rule: "we2", Cause: "gauge"}}, [][]int64{lotIDs(runLots, run[1:])}},
		{"out of limits only", outLots, outA, nil, nil},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var got [][]int64
			for _, sg := range Flag(c.lots, c.a, nil).OpenSignals(p, c.anns) {
				var ids []int64
				for _, l := range sg.Lots {
					ids = append(ids, l.LotID)
				}
				got = append(got, ids)
				if sg.Key() != fmt.Sprintf("we4-%d-%d", runLots[run[0]].ID, runLots[run[len(run)-1]].ID) {
					t.Errorf("key %q", sg.Key())
				}
			}
			if !slices.EqualFunc(got, c.want, slices.Equal) {
				t.Errorf("signals %v, want %v", got, c.want)
			}
		})
	}
}

package spc

import (
	"strings"
	"testing"
)

func TestAnalyzePhases(t *testing.T) {
	// Source of the check: Nelson (1984) J. Quality Technology 16(4), test 2,
	// and the p-chart limit definition (Montgomery, from memory). Lots 0–9 judged against a frozen p = 0.10, lots 10–19 against a
	// revised p = 0.05, all n = 200. Lots 5–13 sit above their own centre
	// line (24/200 > 0.10, 12/200 > 0.05): nine in a row across the change,
	// Nelson test 2 (Nelson 1984) from lot 5 to lot 13.
	counts := []int64{18, 20, 16, 19, 17, 24, 24, 24, 24, 24, 12, 12, 12, 12, 8, 9, 11, 10, 7, 13}
	lots := constLots(200, counts)
	phases := []Phase{
		{Start: 0, Config: Config{Chart: ChartP, Standard: &Standard{Center: 0.10}}},
		{Start: 10, Config: Config{Chart: ChartP, Standard: &Standard{Center: 0.05}, K: 2.5}},
	}
	a, err := AnalyzePhases(lots, phases, RulesNelson)
	if err != nil {
		t.Fatal(err)
	}
	for i, p := range a.Points {
		want := 0.10
		if i >= 10 {
			want = 0.05
		}
		if p.Center != want {
			t.Errorf("lot %d centre %v, want %v", i, p.Center, want)
		}
	}
	// Phase 2 limits use its own K = 2.5: 0.05 + 2.5√(0.05·0.95/200) (definition).
	if got := a.Points[10].UCL; !near(got, 0.05+2.5*0.015411035007422441, 1e-12) {
		t.Errorf("phase 2 UCL %v", got)
	}
	var found bool
	for _, s := range a.Signals {
		if s.Rule == RuleNelson2 {
			found = s.First == 5 && s.Last == 13 && s.Side == 1
		}
	}
	if !found {
		t.Errorf("no Nelson 2 signal over lots 5–13 across the change: %+v", a.Signals)
	}
	if len(a.Phases) != 2 || a.Phases[1].Start != 10 || a.Phases[1].End != 20 || a.Rate != 0.05 || a.K != 2.5 {
		t.Errorf("phase summary %+v, rate %v", a.Phases, a.Rate)
	}
	// Judged separately the run is cut in two and neither half signals.
	for _, part := range [][]Lot{lots[:10], lots[10:]} {
		b, _ := Analyze(part, Config{Chart: ChartP, Standard: &Standard{Center: 0.1}, Rules: RuleNelson2.Set()})
		if part[0].Code == "L11" {
			b, _ = Analyze(part, Config{Chart: ChartP, Standard: &Standard{Center: 0.05}, Rules: RuleNelson2.Set()})
		}
		if len(b.Signals) != 0 {
			t.Errorf("half %s signals %+v", part[0].Code, b.Signals)
		}
	}
}

func TestAnalyzePhasesErrors(t *testing.T) {
	lots := constLots(50, orangeJuice)
	p := Config{Chart: ChartP}
	for _, tc := range []struct {
		name   string
		phases []Phase
		want   string
	}{
		{"none", nil, "no phases"},
		{"late start", []Phase{{Start: 2, Config: p}}, "must start at the first lot"},
		{"not increasing", []Phase{{0, p}, {5, p}, {5, p}}, "not after phase 2"},
		{"past the end", []Phase{{0, p}, {30, p}}, "past the last"},
		{"mixed charts", []Phase{{0, p}, {10, Config{Chart: ChartNP}}}, "same chart"},
		{"bad phase config", []Phase{{0, p}, {10, Config{Chart: ChartP, K: -2}}}, "phase 2: limit width"},
	} {
		if _, err := AnalyzePhases(lots, tc.phases, RulesWE); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want %q", tc.name, err, tc.want)
		}
	}
	bad := append([]Lot(nil), lots...)
	bad[12].Count = 99
	if _, err := AnalyzePhases(bad, []Phase{{0, p}, {10, p}}, RulesWE); err == nil || !strings.Contains(err.Error(), `lot 13 ("L13")`) {
		t.Errorf("bad lot in phase 2: %v, want it numbered in the whole series", err)
	}
}

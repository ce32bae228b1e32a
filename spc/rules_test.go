package spc

import (
	"fmt"
	"strings"
	"testing"
)

// judge runs the rules over crafted z values with K = k; a lot is beyond
// the limits when |z| > k, as with sigma limits.
func judge(set RuleSet, k float64, zs []float64) []Signal {
	pts := make([]Point, len(zs))
	for i, z := range zs {
		pts[i] = Point{Lot: Lot{Code: fmt.Sprint(i)}, Z: z, Above: z > k, Below: z < -k}
	}
	return applyRules(pts, set, func(int) float64 { return k })
}

func rep(z float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = z
	}
	return out
}

func cat(parts ...[]float64) []float64 {
	var out []float64
	for _, p := range parts {
		out = append(out, p...)
	}
	return out
}

func ramp(from, step float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = from + step*float64(i)
	}
	return out
}

func alternate(a, b float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = a
		if i%2 == 1 {
			out[i] = b
		}
	}
	return out
}

// span is a signal's First, Last and Side.
type span struct {
	first, last int
	side        int8
}

func TestRuleDefinitions(t *testing.T) {
	// Each case is the rule's definition: Western Electric Statistical
	// Quality Control Handbook (1956), rules 1–4; Nelson (1984) J. Quality
	// Technology 16(4) 237–239, tests 1–8. Zones at K/3 and 2K/3. The
	// exact spans show where a signal starts and that it fires at the lot
	// completing the pattern; the cases one lot short ("seven", "eight",
	// "five increasing", …) show it does not fire one lot earlier.
	tests := []struct {
		name string
		rule Rule
		k    float64
		zs   []float64
		want []span
	}{
		{"we1 one beyond", RuleWE1, 3, []float64{0, 0, 3.5, 0}, []span{{2, 2, 1}}},
		{"we1 on the limit is not beyond", RuleWE1, 3, []float64{3, -3}, nil},
		{"we1 consecutive beyond extends", RuleWE1, 3, []float64{3.1, 3.2, 0, -3.1}, []span{{0, 1, 1}, {3, 3, -1}}},
		{"nelson1 below", RuleNelson1, 3, []float64{-4}, []span{{0, 0, -1}}},
		{"we2 two adjacent", RuleWE2, 3, []float64{0, 2.1, 2.5}, []span{{1, 2, 1}}},
		{"we2 two of three", RuleWE2, 3, []float64{2.1, 0, 2.1}, []span{{0, 2, 1}}},
		{"we2 gap of two is not 2 of 3", RuleWE2, 3, []float64{2.1, 0, 0, 2.1}, nil},
		{"we2 opposite sides", RuleWE2, 3, []float64{2.1, -2.1, 2.1, -2.1}, []span{{0, 2, 1}, {1, 3, -1}}},
		{"we2 on the zone line is not beyond", RuleWE2, 3, []float64{2, 2.1}, nil},
		{"we2 needs the last lot beyond", RuleWE2, 3, []float64{2.1, 2.2, 0}, []span{{0, 1, 1}}},
		{"nelson5 below", RuleNelson5, 3, []float64{-2.5, -2.5}, []span{{0, 1, -1}}},
		{"we2 scales with K", RuleWE2, 2, []float64{1.4, 1.4}, []span{{0, 1, 1}}},
		{"we2 scales with K, not at 3", RuleWE2, 3, []float64{1.4, 1.4}, nil},
		{"we3 four of five", RuleWE3, 3, []float64{1.1, 1.1, 1.1, 0, 1.1}, []span{{0, 4, 1}}},
		{"we3 four in a row", RuleWE3, 3, []float64{0, 1.1, 1.1, 1.1, 1.1}, []span{{1, 4, 1}}},
		{"we3 three of five", RuleWE3, 3, []float64{1.1, 1.1, 0, 0, 1.1}, nil},
		{"we3 one on the other side", RuleWE3, 3, []float64{1.1, 1.1, 1.1, -1.1, 1.1}, []span{{0, 4, 1}}},
		{"nelson6 below", RuleNelson6, 3, rep(-1.5, 4), []span{{0, 3, -1}}},
		{"we4 eight above", RuleWE4, 3, cat([]float64{-1}, rep(0.5, 8)), []span{{1, 8, 1}}},
		{"we4 seven", RuleWE4, 3, rep(0.5, 7), nil},
		{"we4 run goes on: one signal", RuleWE4, 3, rep(0.5, 12), []span{{0, 11, 1}}},
		{"we4 zero breaks the run", RuleWE4, 3, cat(rep(0.5, 4), []float64{0}, rep(0.5, 4)), nil},
		{"we4 above then below", RuleWE4, 3, cat(rep(0.5, 8), rep(-0.5, 8)), []span{{0, 7, 1}, {8, 15, -1}}},
		{"nelson2 nine", RuleNelson2, 3, rep(-0.2, 9), []span{{0, 8, -1}}},
		{"nelson2 eight", RuleNelson2, 3, rep(-0.2, 8), nil},
		{"nelson3 six increasing", RuleNelson3, 3, cat([]float64{1}, ramp(-1, 0.3, 6)), []span{{1, 6, 1}}},
		{"nelson3 five increasing", RuleNelson3, 3, ramp(-1, 0.3, 5), nil},
		{"nelson3 a tie breaks the trend", RuleNelson3, 3, []float64{0, 0.1, 0.2, 0.2, 0.3, 0.4, 0.5}, nil},
		{"nelson3 decreasing, going on", RuleNelson3, 3, ramp(2, -0.4, 8), []span{{0, 7, -1}}},
		{"nelson4 fourteen alternating", RuleNelson4, 3, alternate(0.5, -0.5, 14), []span{{0, 13, 0}}},
		{"nelson4 thirteen alternating", RuleNelson4, 3, alternate(0.5, -0.5, 13), nil},
		{"nelson4 alternating about a level", RuleNelson4, 3, cat([]float64{0.9}, alternate(1.2, 1.0, 14)), []span{{0, 14, 0}}},
		{"nelson7 fifteen within 1σ", RuleNelson7, 3, alternate(0.5, -0.9, 15), []span{{0, 14, 0}}},
		{"nelson7 fourteen", RuleNelson7, 3, rep(0.1, 14), nil},
		{"nelson7 on the zone line is not within", RuleNelson7, 3, cat(rep(0.1, 7), []float64{1}, rep(0.1, 7)), nil},
		{"nelson8 eight beyond 1σ", RuleNelson8, 3, cat([]float64{0}, alternate(1.5, -1.5, 8)), []span{{1, 8, 0}}},
		{"nelson8 seven", RuleNelson8, 3, alternate(1.5, -1.5, 7), nil},
		// Nelson (1984): "on both sides of the centre line"; one side is not test 8.
		{"nelson8 all on one side", RuleNelson8, 3, rep(1.5, 10), nil},
		{"nelson8 one lot on the other side", RuleNelson8, 3, cat(rep(1.5, 7), []float64{-1.5}), []span{{0, 7, 0}}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := judge(tc.rule.Set(), tc.k, tc.zs)
			var spans []span
			for _, s := range got {
				if s.Rule != tc.rule {
					t.Errorf("signal of %v from a set of %v", s.Rule, tc.rule)
				}
				spans = append(spans, span{s.First, s.Last, s.Side})
				if len(s.Lots) != s.Last-s.First+1 || s.Lots[0] != fmt.Sprint(s.First) {
					t.Errorf("lots %v for span %d..%d", s.Lots, s.First, s.Last)
				}
				if s.Description == "" {
					t.Error("signal without description")
				}
			}
			if fmt.Sprint(spans) != fmt.Sprint(tc.want) {
				t.Errorf("signals %v, want %v", spans, tc.want)
			}
		})
	}
}

func TestSignalDescriptions(t *testing.T) {
	for _, tc := range []struct {
		set  RuleSet
		zs   []float64
		want string
	}{
		{RuleNelson2.Set(), rep(0.4, 9), "9 lots in a row above the centre line"},
		{RuleWE1.Set(), []float64{-3.5}, "1 lot below the lower control limit"},
		{RuleWE2.Set(), []float64{2.1, 0, 2.1}, "2 of 3 lots in a row more than 2σ above the centre line"},
		// Two in a row beyond 2σ meet the 2-of-3 rule without a third lot:
		// the words say what the lots did, not "2 of 2".
		{RuleWE2.Set(), []float64{0, 2.1, 2.1}, "2 lots in a row more than 2σ above the centre line"},
		{RuleNelson3.Set(), ramp(0, -0.1, 6), "6 lots in a row each lower than the one before"},
	} {
		got := judge(tc.set, 3, tc.zs)
		if len(got) != 1 || got[0].Description != tc.want {
			t.Errorf("%v: %v, want %q", tc.set, got, tc.want)
		}
	}
}

func TestRulesThroughAnalyze(t *testing.T) {
	// Orange-juice lots with Western Electric rules: lots 15 and 23 beyond
	// the UCL (Montgomery, from memory) give rule 1 signals on them only.
	a, err := Analyze(constLots(50, orangeJuice), Config{Chart: ChartP, Rules: RuleWE1.Set() | RuleNelson1.Set()})
	if err != nil {
		t.Fatal(err)
	}
	var lots []string
	for _, s := range a.Signals {
		if s.Rule == RuleWE1 {
			lots = append(lots, s.Lots...)
		}
	}
	if strings.Join(lots, ",") != "L15,L23" || len(a.Signals) != 4 {
		t.Errorf("signals %+v", a.Signals)
	}
	if a.Points[14].Rules != RuleWE1.Set()|RuleNelson1.Set() || a.Points[13].Rules != 0 {
		t.Errorf("point rules %v %v", a.Points[14].Rules, a.Points[13].Rules)
	}
}

func TestParseRules(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want RuleSet
		err  bool
	}{
		{"we", RulesWE, false},
		{"nelson", RulesNelson, false},
		{"none", 0, false},
		{"we1,nelson3", RuleWE1.Set() | RuleNelson3.Set(), false},
		{" WE2 , we", RulesWE, false},
		{"we5", 0, true},
		{"", 0, true},
		{"none,we1", 0, true},
	} {
		got, err := ParseRules(tc.in)
		if (err != nil) != tc.err || got != tc.want {
			t.Errorf("ParseRules(%q) = %v, %v; want %v, error %v", tc.in, got, err, tc.want, tc.err)
		}
	}
	all := RulesWE | RulesNelson
	if back, err := ParseRules(all.String()); err != nil || back != all {
		t.Errorf("round trip of %q: %v %v", all.String(), back, err)
	}
	if len(all.Rules()) != 12 || RuleNelson8.String() != "nelson8" || RuleSet(0).String() != "none" {
		t.Errorf("names: %v %v", all.Rules(), RuleNelson8)
	}
	for _, r := range all.Rules() {
		if !strings.Contains(r.Describe(), "lot") {
			t.Errorf("%v: %q", r, r.Describe())
		}
	}
}

// TestSignalStart checks which lot a signal starts at: the lot that first
// completes the pattern, while the lots after it extend it. The patterns
// are the rules' definitions (Nelson 1984, "The Shewhart control chart —
// tests for special causes", J. Quality Technology 16(4); Western Electric
// Statistical Quality Control Handbook, 1956), here as 9 lots on one side
// (Nelson 2) and 2 of 3 beyond 2σ (Western Electric 2).
func TestSignalStart(t *testing.T) {
	for _, tc := range []struct {
		name               string
		set                RuleSet
		zs                 []float64
		first, start, last int
	}{
		{"9 in a row, completed at the 9th lot", RuleNelson2.Set(), rep(0.4, 9), 0, 8, 8},
		{"9 in a row extended by 3 lots", RuleNelson2.Set(), cat(rep(-0.2, 2), rep(0.4, 12)), 2, 10, 13},
		{"2 of 3 beyond 2σ, then a third", RuleWE2.Set(), []float64{0, 2.1, 0.5, 2.2, 2.3}, 1, 3, 4},
	} {
		got := judge(tc.set, 3, tc.zs)
		if len(got) != 1 || got[0].First != tc.first || got[0].Start != tc.start || got[0].Last != tc.last {
			t.Errorf("%s: %+v, want one signal %d…%d started at %d", tc.name, got, tc.first, tc.last, tc.start)
		}
	}
}

package spc

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// longSeries is m lots of 120 sizes (40 to 1230) from a fixed seed, at
// p = 0.03 with a stretch at 0.06 and one at 0.015, so that the rules
// find signals of every Western Electric kind. It is long enough that
// Analyze takes its table-driven path (many lots per size), which the
// textbook examples, a few dozen lots each, never reach.
func longSeries(m int) []Lot {
	rng := rand.New(rand.NewPCG(77, 3))
	lots := make([]Lot, m)
	for i := range lots {
		p := 0.03
		switch {
		case i >= m/3 && i < m/3+200:
			p = 0.06
		case i >= 2*m/3 && i < 2*m/3+300:
			p = 0.015
		}
		n := int64(40 + 10*rng.IntN(120))
		d := distuv.Binomial{N: float64(n), P: p, Src: rng}.Rand()
		lots[i] = Lot{Code: fmt.Sprintf("S%05d", i), Inspected: n, Count: int64(d)}
	}
	return lots
}

// TestLongSeriesAgainstDirect checks every point of a long series against
// the p-chart formulas written out here (Montgomery, Introduction to
// Statistical Quality Control, ch. 7: p̄ = Σd/Σn, limits p̄ ± 3√(p̄(1−p̄)/nᵢ)
// clamped to [0, 1]), its tail probability against gonum's binomial
// distribution (a general-purpose reference library; SciPy agreement is
// TestTailReference's), the dispersion statistics against their
// definitions, and the signals against the rule engine stepped lot by lot
// (whose rules TestRuleDefinitions checks against the handbook).
func TestLongSeriesAgainstDirect(t *testing.T) {
	lots := longSeries(30000)
	exclude := map[string]bool{"S00000": true, "S00001": true, "S10005": true, "S10006": true, "S29999": true}
	for _, tc := range []struct {
		name    string
		cfg     Config
		exclude map[string]bool
	}{
		{"we", Config{Chart: ChartP, Rules: RulesWE}, nil},
		{"we excluded", Config{Chart: ChartP, Rules: RulesWE}, exclude},
		{"we1 and we4", Config{Chart: ChartP, Rules: RuleWE1.Set() | RuleWE4.Set()}, nil},
		{"nelson", Config{Chart: ChartP, Rules: RulesNelson}, exclude},
		{"none", Config{Chart: ChartP}, nil},
		{"we standardized", Config{Chart: ChartP, Rules: RulesWE, Standardized: true}, exclude},
	} {
		t.Run(tc.name, func(t *testing.T) {
			cfg := tc.cfg
			cfg.Exclude = tc.exclude
			a, err := Analyze(lots, cfg)
			if err != nil {
				t.Fatal(err)
			}
			var sn, sd float64
			for _, l := range lots {
				if !tc.exclude[l.Code] {
					sn += float64(l.Inspected)
					sd += float64(l.Count)
				}
			}
			pb := sd / sn
			if !near(a.Rate, pb, 1e-15) {
				t.Fatalf("p̄ %v, want %v", a.Rate, pb)
			}
			rel := func(got, want float64) bool { return math.Abs(got-want) <= 1e-12*math.Max(1, math.Abs(want)) }
			var chi, mr float64
			var nmr int
			prev, havePrev := 0.0, false
			worst := 0
			for i, p := range a.Points {
				l := lots[i]
				n := float64(l.Inspected)
				v := float64(l.Count) / n
				s := math.Sqrt(pb * (1 - pb) / n)
				ucl, lcl := math.Min(1, pb+3*s), math.Max(0, pb-3*s)
				z := (v - pb) / s
				if p.Lot != l || p.Excluded != tc.exclude[l.Code] {
					t.Fatalf("point %d: lot %+v excluded %v", i, p.Lot, p.Excluded)
				}
				if !rel(p.Z, z) || p.Above != (v > ucl) || p.Below != (v < lcl) {
					t.Fatalf("point %d (n %d, d %d): z %v above %v below %v, want %v %v %v", i, l.Inspected, l.Count, p.Z, p.Above, p.Below, z, v > ucl, v < lcl)
				}
				want := [4]float64{v, pb, ucl, lcl}
				wantSigma := s
				if cfg.Standardized {
					want, wantSigma = [4]float64{z, 0, 3, -3}, 1
				}
				if !rel(p.Value, want[0]) || !rel(p.Center, want[1]) || !rel(p.UCL, want[2]) || !rel(p.LCL, want[3]) || !rel(p.Sigma, wantSigma) {
					t.Fatalf("point %d: value %v centre %v limits %v %v σ %v, want %v σ %v", i, p.Value, p.Center, p.UCL, p.LCL, p.Sigma, want, wantSigma)
				}
				// P(X ≤ d) below the expected count, P(X ≥ d) = P(n − X ≤ n − d)
				// at or above it.
				tail := distuv.Binomial{N: n, P: pb}.CDF(float64(l.Count))
				if float64(l.Count) >= n*pb {
					tail = distuv.Binomial{N: n, P: 1 - pb}.CDF(float64(l.Inspected - l.Count))
				}
				if math.Abs(p.TailP-tail) > 1e-9*tail {
					t.Fatalf("point %d (n %d, d %d): tail %v, want %v", i, l.Inspected, l.Count, p.TailP, tail)
				}
				if !tc.exclude[l.Code] {
					chi += z * z
					if havePrev {
						mr += math.Abs(z - prev)
						nmr++
					}
					prev, havePrev = z, true
				}
				if p.OutOfLimits() {
					worst++
				}
			}
			if !near(a.Dispersion.ChiSquare, chi, 1e-9*chi) || !near(a.SigmaZ, mr/float64(nmr)/1.128, 1e-12) {
				t.Errorf("χ² %v σ_z %v, want %v %v", a.Dispersion.ChiSquare, a.SigmaZ, chi, mr/float64(nmr)/1.128)
			}
			if worst == 0 {
				t.Error("no lot out of limits: the series does not test rule 1")
			}

			// The same points stepped one by one through the engine.
			pts := make([]Point, len(a.Points))
			var e ruleEngine
			e.reset(cfg.Rules)
			for i, p := range a.Points {
				p.Rules = 0
				pts[i] = p
				e.step(i, &pts[i], 3)
			}
			want := e.finish(pts)
			if len(a.Signals) != len(want) {
				t.Fatalf("%d signals, stepped %d", len(a.Signals), len(want))
			}
			kinds := map[Rule]int{}
			for i, s := range a.Signals {
				w := want[i]
				if s.Rule != w.Rule || s.First != w.First || s.Last != w.Last || s.Side != w.Side || s.Description != w.Description || strings.Join(s.Lots, ",") != strings.Join(w.Lots, ",") {
					t.Fatalf("signal %d: %+v, stepped %+v", i, s, w)
				}
				kinds[s.Rule]++
			}
			for i := range pts {
				if a.Points[i].Rules != pts[i].Rules {
					t.Fatalf("point %d rules %v, stepped %v", i, a.Points[i].Rules, pts[i].Rules)
				}
			}
			for _, r := range []Rule{RuleWE1, RuleWE2, RuleWE3, RuleWE4} {
				if cfg.Rules.Has(r) && kinds[r] == 0 {
					t.Errorf("no %v signal: the series does not test it", r)
				}
			}
		})
	}
}

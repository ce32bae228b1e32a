package spc

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"
)

// orangeJuice is the orange-juice concentrate can example of Montgomery,
// Introduction to Statistical Quality Control (p chart, 30 samples of
// n = 50 cans), from memory. Our recollection is that the NIST/SEMATECH
// e-Handbook §6.3.3.2 p-chart example (defective chips on 30 wafers of
// 50 chips) lists the same 30 counts with the same limits, also from
// memory.
var orangeJuice = []int64{12, 15, 8, 10, 4, 7, 16, 9, 14, 10, 5, 6, 17, 12, 22, 8, 10, 5, 13, 11, 20, 18, 24, 15, 9, 12, 7, 13, 9, 6}

func constLots(n int64, counts []int64) []Lot {
	lots := make([]Lot, len(counts))
	for i, c := range counts {
		lots[i] = Lot{Code: fmt.Sprintf("L%02d", i+1), Inspected: n, Count: c}
	}
	return lots
}

func near(got, want, tol float64) bool { return math.Abs(got-want) <= tol }

func TestTextbookCharts(t *testing.T) {
	// Montgomery u chart: 20 samples of 5 personal computers (from memory).
	pcs := constLots(5, []int64{10, 12, 8, 14, 10, 16, 11, 7, 10, 15, 9, 5, 7, 11, 12, 6, 8, 10, 7, 5})
	// Montgomery c chart: nonconformities on 26 samples of 100 printed
	// circuit boards; samples 6 and 20 are then excluded (from memory).
	boards := constLots(100, []int64{21, 24, 16, 12, 15, 5, 28, 20, 31, 25, 20, 24, 16, 19, 10, 17, 13, 22, 18, 39, 30, 24, 16, 19, 17, 15})
	oj := constLots(50, orangeJuice)
	tests := []struct {
		name                 string
		lots                 []Lot
		cfg                  Config
		center, ucl, lcl     float64
		tol                  float64
		wantAbove, wantBelow []string // lot IDs beyond the limits
		source               string
	}{
		{"orange juice trial", oj, Config{Chart: ChartP}, 0.2313, 0.4102, 0.0524, 5e-5, []string{"L15", "L23"}, nil,
			"Montgomery, orange juice p chart, trial limits (from memory); NIST §6.3.3.2 (from memory)"},
		{"orange juice revised", oj, Config{Chart: ChartP, Exclude: map[string]bool{"L15": true, "L23": true}}, 0.2150, 0.3893, 0.0407, 5e-5, []string{"L15", "L21", "L23"}, nil,
			"Montgomery, revised limits without samples 15 and 23 (from memory); L21 = 20/50 = 0.40 lies above 0.3893 by arithmetic"},
		{"orange juice np", oj, Config{Chart: ChartNP}, 50 * 0.23133, 50 * 0.41024, 50 * 0.05243, 5e-3, []string{"L15", "L23"}, nil,
			"n times Montgomery's p chart values (from memory)"},
		{"computers u", pcs, Config{Chart: ChartU}, 1.93, 3.79, 0.07, 5e-3, nil, nil,
			"Montgomery, u chart for personal computers: ū = 1.93, UCL 3.79, LCL 0.07 (from memory)"},
		// The book rounds c̄ to two decimals before computing the limits.
		{"boards c trial", boards, Config{Chart: ChartC}, 19.85, 33.22, 6.48, 1.5e-2, []string{"L20"}, []string{"L06"},
			"Montgomery, c chart for circuit boards, trial limits (from memory)"},
		{"boards c revised", boards, Config{Chart: ChartC, Exclude: map[string]bool{"L06": true, "L20": true}}, 19.67, 32.97, 6.36, 1.5e-2, []string{"L20"}, []string{"L06"},
			"Montgomery, revised c chart without samples 6 and 20 (from memory)"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			a, err := Analyze(tc.lots, tc.cfg)
			if err != nil {
				t.Fatal(err)
			}
			p := a.Points[0]
			if !near(p.Center, tc.center, tc.tol) || !near(p.UCL, tc.ucl, tc.tol) || !near(p.LCL, tc.lcl, tc.tol) {
				t.Errorf("centre %.5f UCL %.5f LCL %.5f, want %.4f %.4f %.4f (%s)", p.Center, p.UCL, p.LCL, tc.center, tc.ucl, tc.lcl, tc.source)
			}
			var above, below []string
			for _, p := range a.Points {
				if p.Above {
					above = append(above, p.Lot.Code)
				}
				if p.Below {
					below = append(below, p.Lot.Code)
				}
			}
			if fmt.Sprint(above) != fmt.Sprint(tc.wantAbove) || fmt.Sprint(below) != fmt.Sprint(tc.wantBelow) {
				t.Errorf("above %v below %v, want %v %v (%s)", above, below, tc.wantAbove, tc.wantBelow, tc.source)
			}
		})
	}
}

func TestRateIsPooled(t *testing.T) {
	// p̄ = Σd/Σn, not the mean of the fractions (Montgomery, §7.2.2, the
	// definition for variable sample size): 20/1100, not (0.1+0.01)/2.
	a, err := Analyze([]Lot{{"a", 100, 10}, {"b", 1000, 10}}, Config{Chart: ChartP})
	if err != nil {
		t.Fatal(err)
	}
	if want := 20.0 / 1100; !near(a.Rate, want, 1e-15) || !near(a.Center, want, 1e-15) {
		t.Errorf("p̄ = %v, want %v (definition Σd/Σn)", a.Rate, want)
	}
	// u chart: ū = Σc/Σn (Montgomery §7.3.2, definition).
	a, err = Analyze([]Lot{{"a", 4, 10}, {"b", 16, 10}}, Config{Chart: ChartU})
	if err != nil {
		t.Fatal(err)
	}
	if !near(a.Rate, 1, 1e-15) {
		t.Errorf("ū = %v, want 1 (definition Σc/Σn)", a.Rate)
	}
	// Stepped limits: σᵢ = √(p̄(1−p̄)/nᵢ) per lot (definition).
	a, _ = Analyze([]Lot{{"a", 100, 10}, {"b", 1000, 10}}, Config{Chart: ChartP})
	pb := 20.0 / 1100
	for i, n := range []float64{100, 1000} {
		want := pb + 3*math.Sqrt(pb*(1-pb)/n)
		if !near(a.Points[i].UCL, want, 1e-15) {
			t.Errorf("lot %d UCL %v, want %v", i, a.Points[i].UCL, want)
		}
	}
}

func TestNPVaryingSize(t *testing.T) {
	lots := []Lot{{"a", 100, 5}, {"b", 120, 7}, {"c", 80, 3}}
	a, err := Analyze(lots, Config{Chart: ChartNP})
	if err != nil {
		t.Fatal(err)
	}
	pb := 15.0 / 300
	for i, l := range lots {
		n := float64(l.Inspected)
		// per-lot limits nᵢp̄ ± 3√(nᵢp̄(1−p̄)) (Montgomery, np chart, definition)
		if want := n*pb + 3*math.Sqrt(n*pb*(1-pb)); !near(a.Points[i].UCL, want, 1e-12) {
			t.Errorf("lot %d UCL %v, want %v", i, a.Points[i].UCL, want)
		}
	}
	if !hasWarning(a, "np-varying-n") {
		t.Errorf("no np-varying-n warning: %v", a.Warnings)
	}
	if want := pb * 100; !near(a.Center, want, 1e-12) {
		t.Errorf("centre %v, want n̄·p̄ = %v", a.Center, want)
	}
	c, _ := Analyze(lots, Config{Chart: ChartC})
	if !hasWarning(c, "c-varying-n") {
		t.Errorf("no c-varying-n warning: %v", c.Warnings)
	}
}

func hasWarning(a *Analysis, code string) bool {
	for _, w := range a.Warnings {
		if w.Code == code {
			return true
		}
	}
	return false
}

func TestZeroSpreadIsFinite(t *testing.T) {
	for _, tc := range []struct {
		name string
		lots []Lot
		cfg  Config
	}{
		{"p̄ = 0", constLots(50, []int64{0, 0, 0}), Config{Chart: ChartP}},
		{"p̄ = 1", constLots(5, []int64{5, 5, 5}), Config{Chart: ChartNP, Method: MethodExact}},
		{"standard 0, lot off centre", constLots(50, []int64{0, 2, 0}), Config{Chart: ChartP, Standard: &Standard{Center: 0}, Rules: RulesNelson}},
		{"ū = 0 laney", constLots(10, []int64{0, 0, 0}), Config{Chart: ChartU, Method: MethodLaney}},
		{"c̄ = 0 standardized", constLots(10, []int64{0, 0, 0}), Config{Chart: ChartC, Standardized: true}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			a, err := Analyze(tc.lots, tc.cfg)
			if err != nil {
				t.Fatal(err)
			}
			if _, err := json.Marshal(a); err != nil {
				t.Fatalf("result not representable in JSON: %v", err)
			}
			if !hasWarning(a, "zero-spread") {
				t.Errorf("no zero-spread warning: %v", a.Warnings)
			}
			for i, p := range a.Points {
				want := 0.0 // documented convention: 0 on the centre, ±ZLimit off it
				if tc.lots[i].Count != 0 && tc.cfg.Standard != nil {
					want = ZLimit
				}
				if p.Z != want {
					t.Errorf("lot %d z = %v, want %v", i, p.Z, want)
				}
			}
		})
	}
}

func TestStandardized(t *testing.T) {
	oj := constLots(50, orangeJuice)
	plain, _ := Analyze(oj, Config{Chart: ChartP})
	z, _ := Analyze(oj, Config{Chart: ChartP, Standardized: true})
	ex, _ := Analyze(oj, Config{Chart: ChartP, Standardized: true, Method: MethodExact})
	exPlain, _ := Analyze(oj, Config{Chart: ChartP, Method: MethodExact})
	for i := range oj {
		p, q := plain.Points[i], z.Points[i]
		// zᵢ = (pᵢ − p̄)/σᵢ (definition), limits ±k
		if want := (p.Value - p.Center) / p.Sigma; !near(q.Value, want, 1e-12) || q.UCL != 3 || q.LCL != -3 || q.Center != 0 {
			t.Errorf("lot %d: z %v UCL %v LCL %v, want %v ±3", i, q.Value, q.UCL, q.LCL, want)
		}
		// exact limits transformed into z units
		e, f := exPlain.Points[i], ex.Points[i]
		if want := (e.UCL - e.Center) / e.Sigma; !near(f.UCL, want, 1e-12) {
			t.Errorf("lot %d exact UCL in z %v, want %v", i, f.UCL, want)
		}
		if f.Above != e.Above || f.Below != e.Below {
			t.Errorf("lot %d judged differently when standardized", i)
		}
	}
}

func TestStandardGiven(t *testing.T) {
	oj := constLots(50, orangeJuice)
	a, err := Analyze(oj, Config{Chart: ChartP, Standard: &Standard{Center: 0.2}})
	if err != nil {
		t.Fatal(err)
	}
	// Standard given: centre p = 0.2 and limits 0.2 ± 3√(0.2·0.8/50) (definition).
	if a.Rate != 0.2 || a.Baseline != 0 || !near(a.Points[0].UCL, 0.2+3*math.Sqrt(0.2*0.8/50), 1e-15) {
		t.Errorf("rate %v baseline %d UCL %v", a.Rate, a.Baseline, a.Points[0].UCL)
	}
	if a.Dispersion.DF != len(oj) {
		t.Errorf("df %d, want m = %d when the centre is given", a.Dispersion.DF, len(oj))
	}
	if hasWarning(a, "few-lots") {
		t.Error("few-lots warning although nothing was estimated")
	}
}

func TestExclusionKeepsLotJudged(t *testing.T) {
	oj := constLots(50, orangeJuice)
	all, _ := Analyze(oj, Config{Chart: ChartP})
	ex, _ := Analyze(oj, Config{Chart: ChartP, Exclude: map[string]bool{"L23": true, "nope": true}})
	if ex.Rate >= all.Rate || ex.Baseline != len(oj)-1 {
		t.Errorf("excluding the highest lot: rate %v (was %v), baseline %d", ex.Rate, all.Rate, ex.Baseline)
	}
	p := ex.Points[22]
	if !p.Excluded || !p.Above || p.UCL == 0 || p.Z <= 3 {
		t.Errorf("excluded lot not judged: %+v", p)
	}
	if !hasWarning(ex, "exclude-unknown") {
		t.Error("no warning for an excluded ID that is not in the series")
	}
}

func TestAnalyzeErrors(t *testing.T) {
	good := constLots(50, []int64{1, 2, 3})
	for _, tc := range []struct {
		name string
		lots []Lot
		cfg  Config
		want string
	}{
		{"count above n", []Lot{{"a", 5, 1}, {"b", 5, 6}}, Config{Chart: ChartP}, `lot 2 ("b"): defective "6"`},
		{"zero inspected", []Lot{{"a", 0, 0}}, Config{Chart: ChartU}, `lot 1 ("a"): inspected "0"`},
		{"negative defects", []Lot{{"a", 3, -1}}, Config{Chart: ChartC}, `defects "-1"`},
		{"no lots", nil, Config{Chart: ChartP}, "no lots"},
		{"bad chart", good, Config{Chart: "x"}, "unknown chart"},
		{"bad method", good, Config{Chart: ChartP, Method: "y"}, "unknown limits method"},
		{"bad k", good, Config{Chart: ChartP, K: -1}, "limit width"},
		{"all excluded", good, Config{Chart: ChartP, Exclude: map[string]bool{"L01": true, "L02": true, "L03": true}}, "every lot is excluded"},
		{"standard above 1", good, Config{Chart: ChartP, Standard: &Standard{Center: 1.5}}, "must not exceed 1"},
		{"standard NaN", good, Config{Chart: ChartU, Standard: &Standard{Center: math.NaN()}}, "standard centre"},
		{"laney one lot", good[:1], Config{Chart: ChartP, Method: MethodLaney}, "at least 2 lots"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Analyze(tc.lots, tc.cfg)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v, want it to contain %q", err, tc.want)
			}
			var fe *FieldError
			if strings.HasPrefix(tc.want, "lot") && !errors.As(err, &fe) {
				t.Errorf("lot error %v does not wrap a FieldError", err)
			}
		})
	}
}

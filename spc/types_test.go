package spc

import (
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// TestCheckLot holds the shared validation rule to its definition: a
// count of units cannot be negative or exceed the units inspected
// (definition of a fraction nonconforming, any SPC text), defects may, and
// no lot is larger than MaxInspected (the project's own bound, where the
// tail arithmetic stays exact).
func TestCheckLot(t *testing.T) {
	tests := []struct {
		chart    Chart
		n, count int64
		field    string // "" when valid
	}{
		{ChartP, 50, 0, ""},
		{ChartP, 50, 50, ""},
		{ChartP, 50, 51, "defective"},
		{ChartNP, 50, -1, "defective"},
		{ChartP, 0, 0, "inspected"},
		{ChartU, -3, 1, "inspected"},
		{ChartU, 10, 25, ""},
		{ChartC, 10, -1, "defects"},
		{ChartP, MaxInspected, MaxInspected, ""},
		{ChartP, MaxInspected + 1, 1, "inspected"},
		{ChartP, math.MaxInt64, math.MaxInt64, "inspected"},
		{ChartU, 10, MaxInspected + 1, "defects"},
	}
	for _, tt := range tests {
		err := CheckLot(tt.chart, tt.n, tt.count)
		var fe *FieldError
		switch {
		case tt.field == "" && err != nil:
			t.Errorf("%s %d/%d: unexpected %v", tt.chart, tt.count, tt.n, err)
		case tt.field != "" && (!errors.As(err, &fe) || fe.Field != tt.field):
			t.Errorf("%s %d/%d: got %v, want a problem with %s", tt.chart, tt.count, tt.n, err, tt.field)
		}
	}
}

// TestAnalyzeLargestLots checks that the largest lots allowed give finite
// results with tail probabilities in [0, 1] (a probability's definition),
// and that Analyze itself refuses larger ones.
func TestAnalyzeLargestLots(t *testing.T) {
	if _, err := Analyze([]Lot{{"a", math.MaxInt64, math.MaxInt64}, {"b", 1, 0}}, Config{Chart: ChartP}); err == nil {
		t.Error("Analyze accepted a subgroup beyond MaxPooled")
	}
	if _, err := Analyze([]Lot{{"a", 10, MaxPooled + 1}, {"b", 1, 0}}, Config{Chart: ChartU}); err == nil {
		t.Error("Analyze accepted a defect count beyond MaxPooled")
	}
	for _, c := range []Chart{ChartP, ChartNP, ChartU, ChartC} {
		lots := []Lot{{"a", MaxInspected, 1}, {"b", MaxInspected, 3}, {"c", MaxInspected, MaxInspected / 2}, {"d", 7, 0}}
		if c == ChartNP || c == ChartC {
			lots[3].Inspected = MaxInspected
		}
		for _, m := range []Method{MethodSigma, MethodExact, MethodLaney} {
			a, err := Analyze(lots, Config{Chart: c, Method: m, Rules: RulesWE})
			if err != nil {
				t.Fatalf("%s %s: %v", c, m, err)
			}
			for _, p := range a.Points {
				for _, v := range []float64{p.Value, p.Center, p.UCL, p.LCL, p.Z, p.TailP} {
					if math.IsNaN(v) || math.IsInf(v, 0) {
						t.Errorf("%s %s lot %s: non-finite value in %+v", c, m, p.Lot.Code, p)
					}
				}
				if p.TailP < 0 || p.TailP > 1 {
					t.Errorf("%s %s lot %s: tail probability %v", c, m, p.Lot.Code, p.TailP)
				}
			}
		}
	}
}

// TestPooledSubgroupsBeyondOneLot: three lots of 4 to 5 million units
// pooled into one day's subgroup of 14 million (issue 12, fault 6) are
// judged, on every chart and limit method; CheckLot still refuses such a
// lot on its own.
func TestPooledSubgroupsBeyondOneLot(t *testing.T) {
	days := []Lot{{"d1", 14_000_000, 42_100}, {"d2", 13_500_000, 40_300}, {"d3", 4_000_000_000, 12_010_000}, {"d4", 9_000_000, 27_500}}
	for _, c := range []Chart{ChartP, ChartNP, ChartU, ChartC} {
		for _, m := range []Method{MethodSigma, MethodExact, MethodLaney} {
			a, err := Analyze(days, Config{Chart: c, Method: m, Rules: RulesWE})
			if err != nil {
				t.Fatalf("%s %s: %v", c, m, err)
			}
			for _, p := range a.Points {
				if p.TailP < 0 || p.TailP > 1 || math.IsNaN(p.Z) || p.UCL < p.LCL {
					t.Errorf("%s %s %s: %+v", c, m, p.Lot.Code, p)
				}
			}
		}
	}
	if err := CheckLot(ChartP, 14_000_000, 1); err == nil {
		t.Error("CheckLot accepted a single lot of 14 million units")
	}
}

// TestTailLargeLots checks, through Analyze, each lot's tail probability
// for lots up to MaxInspected and pooled subgroups up to 10⁹ units
// against sums at 40 digits by mpmath (values recorded by
// spc/testdata/tail_large_reference.py), to 10⁻¹⁰ relative, centre
// included.
func TestTailLargeLots(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("testdata", "tail_large_reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Source string
		Rows   []struct {
			Chart       Chart
			N, K        int64
			Rate, Exact float64
		}
	}
	if err := json.Unmarshal(raw, &ref); err != nil {
		t.Fatal(err)
	}
	for _, r := range ref.Rows {
		a, err := Analyze([]Lot{{"a", r.N, r.K}}, Config{Chart: r.Chart, Standard: &Standard{Center: r.Rate}})
		if err != nil {
			t.Fatalf("%+v: %v", r, err)
		}
		got := a.Points[0].TailP
		if math.Abs(got-r.Exact) > 1e-10*r.Exact {
			t.Errorf("%s chart, n %d, rate %g, count %d: tail %v, want %v (%s)", r.Chart, r.N, r.Rate, r.K, got, r.Exact, ref.Source)
		}
	}
}

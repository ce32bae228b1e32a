package spc

import (
	"fmt"
	"math"
	"testing"
)

// ewmaReference is testdata/ewma_arl_reference.json, written by
// ewma_arl_reference.py beside it (SciPy: the integral equation for
// normal observations, and a Markov chain 20 times finer than
// ewma_arl.go's for counts).
type ewmaReference struct {
	Normal []struct {
		Lambda, Width, Shift, ARL float64
	} `json:"normal"`
	Counts []struct {
		Chart                     Chart
		P0, Lambda, Width, P, ARL float64
		Sizes                     []int64
	} `json:"counts"`
}

func readEWMAReference(t *testing.T) ewmaReference {
	t.Helper()
	var ref ewmaReference
	readTestdata(t, "ewma_arl_reference.json", &ref)
	if len(ref.Normal) == 0 || len(ref.Counts) == 0 {
		t.Fatal("the reference file has no rows")
	}
	return ref
}

// TestEWMAARLNormalLimit checks the Markov chain of ewma_arl.go on the
// EWMA of a c chart whose counts are so large (c0 = 10⁶, skewness 0.001)
// that they are normal for the purpose; a shift is in standard
// deviations √c0.
//
// Sources: the ARLs of the integral equation (Crowder 1987; SciPy,
// Nyström on 400 Gauss–Legendre nodes: testdata/ewma_arl_reference.py),
// and Lucas & Saccucci (1990), Technometrics 32, 1–12, as tabulated in
// Montgomery, Introduction to Statistical Quality Control, Table 9.11
// (from memory; 3 significant figures, so within 0.5 % of the
// reference). Tolerance 1 %: the chain puts Z at the middle of its cell
// (ewmaCells).
func TestEWMAARLNormalLimit(t *testing.T) {
	ref := readEWMAReference(t)
	// Montgomery Table 9.11 (from memory), by λ, L and shift.
	table := map[[3]float64]float64{
		{0.05, 2.615, 0}: 500, {0.05, 2.615, 0.5}: 28.8, {0.05, 2.615, 1}: 11.4, {0.05, 2.615, 2}: 5.2,
		{0.10, 2.814, 0}: 500, {0.10, 2.814, 0.5}: 31.3, {0.10, 2.814, 1}: 10.3, {0.10, 2.814, 2}: 4.4,
		{0.20, 2.962, 0}: 500, {0.20, 2.962, 0.5}: 41.8, {0.20, 2.962, 1}: 10.5, {0.20, 2.962, 2}: 3.7,
		{0.25, 2.998, 0}: 500, {0.25, 2.998, 0.5}: 48.2, {0.25, 2.998, 1}: 11.1, {0.25, 2.998, 2}: 3.6,
		{0.40, 3.054, 0}: 500, {0.40, 3.054, 0.5}: 71.2, {0.40, 3.054, 1}: 14.3, {0.40, 3.054, 2}: 3.5,
	}
	const c0 = 1e6
	sigma := math.Sqrt(c0)
	for _, r := range ref.Normal {
		t.Run(fmt.Sprintf("λ=%g L=%g shift=%g", r.Lambda, r.Width, r.Shift), func(t *testing.T) {
			e := EWMA{Chart: ChartC, P0: c0, Lambda: r.Lambda, L: r.Width}
			got := e.ARL(c0+r.Shift*sigma, []int64{1})
			if rel := got/r.ARL - 1; math.Abs(rel) > 0.01 {
				t.Errorf("ARL %.4g, integral equation %.4g: off by %.2f %%", got, r.ARL, 100*rel)
			}
			pub, ok := table[[3]float64{r.Lambda, r.Width, r.Shift}]
			if !ok {
				return // a design the table does not hold (λ 0.2, L 3: the default)
			}
			// 3 significant figures, and 2 for the smallest values.
			if rel := pub/r.ARL - 1; math.Abs(rel) > 0.005 && math.Abs(pub-r.ARL) > 0.05 {
				t.Errorf("the table value %.4g is %.2f %% from the integral equation's %.4g", pub, 100*rel, r.ARL)
			}
		})
	}
}

// TestEWMAARLCounts checks the chain on counts where the normal
// approximation does not hold (4 nonconforming or defects a lot on
// average), one case with lot sizes of its own, against the same chain
// on 20 times as many cells with SciPy's probabilities
// (testdata/ewma_arl_reference.py). Tolerance 2 %, the cell's error.
func TestEWMAARLCounts(t *testing.T) {
	for _, r := range readEWMAReference(t).Counts {
		t.Run(fmt.Sprintf("%s p0=%g p=%g", r.Chart, r.P0, r.P), func(t *testing.T) {
			e := EWMA{Chart: r.Chart, P0: r.P0, Lambda: r.Lambda, L: r.Width}
			got := e.ARL(r.P, r.Sizes)
			if rel := got/r.ARL - 1; math.Abs(rel) > 0.02 {
				t.Errorf("ARL %.4g, the finer chain %.4g: off by %.2f %%", got, r.ARL, 100*rel)
			}
		})
	}
}

// TestDesignEWMA: for normal observations (a c chart at c0 = 10⁴,
// skewness 0.01) and an in-control ARL of 500, the widths designed are
// Lucas & Saccucci's (1990), as tabulated in Montgomery Table 9.11 (from
// memory; their ARLs of 500 are confirmed by the integral equation in
// testdata/ewma_arl_reference.json), rounded up to the grid of 0.01. Of
// those designs, BestEWMA takes the smallest weight for a shift of half a
// standard deviation and the largest for two, as the integral equation's
// ARLs order them (28.8 lots at λ 0.05 against 71.2 at 0.4; 3.5 at 0.4
// against 5.2 at 0.05).
func TestDesignEWMA(t *testing.T) {
	const c0 = 1e4
	for _, d := range []struct{ lambda, width float64 }{{0.05, 2.615}, {0.1, 2.814}, {0.2, 2.962}, {0.4, 3.054}} {
		e, err := DesignEWMA(ChartC, c0, d.lambda, []int64{1}, 500)
		if err != nil {
			t.Fatal(err)
		}
		if e.L < d.width-0.01 || e.L > d.width+0.02 || e.ARL0 < 500 || e.Lambda != d.lambda {
			t.Errorf("λ %g: width %g (ARL0 %.1f), want %g rounded up to 0.01", d.lambda, e.L, e.ARL0, d.width)
		}
	}
	for _, c := range []struct{ shift, lambda float64 }{{0.5, 0.05}, {2, 0.4}} {
		e, arl1, err := BestEWMA(ChartC, c0, c0+c.shift*math.Sqrt(c0), []int64{1}, 500)
		if err != nil {
			t.Fatal(err)
		}
		if e.Lambda != c.lambda || arl1 != e.ARL(c0+c.shift*math.Sqrt(c0), []int64{1}) {
			t.Errorf("shift %g σ: λ %g (ARL1 %.1f), want λ %g", c.shift, e.Lambda, arl1, c.lambda)
		}
	}
	for _, bad := range []struct {
		lambda, arl0 float64
		sizes        []int64
	}{{0, 500, []int64{1}}, {0.2, 0, []int64{1}}, {0.2, 500, nil}, {0.2, 1e12, []int64{1}}} {
		if _, err := DesignEWMA(ChartC, c0, bad.lambda, bad.sizes, bad.arl0); err == nil {
			t.Errorf("λ %g, ARL0 %g, sizes %v: designed", bad.lambda, bad.arl0, bad.sizes)
		}
	}
}

package spc

import (
	"math"
	"testing"
)

type verdictsRef struct {
	SciPy       string `json:"scipy"`
	Statsmodels string `json:"statsmodels"`
	Fisher      []struct {
		D1, N1, D2, N2 int64
		PValue         float64 `json:"p_value"`
	} `json:"fisher"`
	BH []struct {
		P        []float64 `json:"p"`
		Alpha    float64   `json:"alpha"`
		Adjusted []float64 `json:"adjusted"`
		Reject   []bool    `json:"reject"`
	} `json:"bh"`
}

func loadVerdictsRef(t *testing.T) *verdictsRef {
	t.Helper()
	var ref verdictsRef
	readTestdata(t, "verdicts_reference.json", &ref)
	if ref.SciPy == "" || ref.Statsmodels == "" || len(ref.Fisher) == 0 || len(ref.BH) == 0 {
		t.Fatal("reference file lacks library versions or values")
	}
	return &ref
}

// TestFisherExactReference checks FisherExact against
// scipy.stats.fisher_exact (two-sided), values in
// testdata/verdicts_reference.json written by verdicts_reference.py.
func TestFisherExactReference(t *testing.T) {
	for _, r := range loadVerdictsRef(t).Fisher {
		got := FisherExact(r.D1, r.N1, r.D2, r.N2)
		if math.Abs(got-r.PValue) > 1e-9*math.Max(r.PValue, 1e-6) {
			t.Errorf("FisherExact(%d/%d, %d/%d) = %.12g, scipy %.12g", r.D1, r.N1, r.D2, r.N2, got, r.PValue)
		}
	}
}

// TestCompareProportionsSmallCounts checks that the change between two
// proportions is tested exactly where few nonconforming units are
// expected: 1 of 5 against 0 of 25 (the measured case: the pooled z test
// gives 0.023, scipy.stats.fisher_exact 1/6) and that large counts keep
// the z test (statsmodels proportions_ztest, in intervals_reference.json).
func TestCompareProportionsSmallCounts(t *testing.T) {
	tests := []struct {
		d1, n1, d2, n2 int64
		test           string
		p              float64 // source: scipy.stats.fisher_exact for the exact rows
	}{
		{1, 5, 0, 25, TestFisherExact, 1.0 / 6},
		{3, 20, 0, 20, TestFisherExact, 0.23076923076923078},
		{12, 400, 25, 410, TestPooledZ, math.NaN()},
		{200, 1000, 180, 1000, TestPooledZ, math.NaN()},
	}
	for _, tt := range tests {
		got, err := CompareProportions(tt.d1, tt.n1, tt.d2, tt.n2, 0.95)
		if err != nil {
			t.Fatal(err)
		}
		if got.Test != tt.test {
			t.Errorf("%d/%d − %d/%d: test %q, want %q", tt.d1, tt.n1, tt.d2, tt.n2, got.Test, tt.test)
		}
		if !math.IsNaN(tt.p) && math.Abs(got.PValue-tt.p) > 1e-12 {
			t.Errorf("%d/%d − %d/%d: p %.15g, scipy %.15g", tt.d1, tt.n1, tt.d2, tt.n2, got.PValue, tt.p)
		}
	}
	for _, c := range [][4]int64{{1, 5, 0, 25}} {
		if _, zp := PooledZTest(c[0], c[1], c[2], c[3]); zp >= 0.05 {
			t.Errorf("%v: the z test gives p = %.3g; the case no longer shows why the exact test is needed", c, zp)
		}
	}
}

// TestBenjaminiHochbergReference checks the adjustment against
// statsmodels' multipletests(method="fdr_bh"), values in
// testdata/verdicts_reference.json written by verdicts_reference.py.
func TestBenjaminiHochbergReference(t *testing.T) {
	for _, r := range loadVerdictsRef(t).BH {
		got := BenjaminiHochberg(r.P)
		for i := range r.P {
			if math.Abs(got[i]-r.Adjusted[i]) > 1e-12 {
				t.Errorf("%v: adjusted[%d] = %.15g, statsmodels %.15g", r.P, i, got[i], r.Adjusted[i])
			}
			if (got[i] <= r.Alpha) != r.Reject[i] {
				t.Errorf("%v at %g: adjusted[%d] = %g, statsmodels rejects: %v", r.P, r.Alpha, i, got[i], r.Reject[i])
			}
		}
	}
}

// TestBenjaminiHochbergSkipsNaN checks that tests not run stay NaN and do
// not enlarge the family: {0.01, NaN, 0.04} adjusts as {0.01, 0.04}
// (m = 2: 0.02 and 0.04, by the definition in Benjamini & Hochberg 1995).
func TestBenjaminiHochbergSkipsNaN(t *testing.T) {
	got := BenjaminiHochberg([]float64{0.01, math.NaN(), 0.04})
	if math.Abs(got[0]-0.02) > 1e-15 || !math.IsNaN(got[1]) || math.Abs(got[2]-0.04) > 1e-15 {
		t.Errorf("got %v, want [0.02 NaN 0.04]", got)
	}
}

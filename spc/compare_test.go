package spc

import (
	"math"
	"testing"
)

// TestCompareProportionsNewcombe checks Newcombe (1998, "Interval estimation
// for the difference between independent proportions: comparison of eleven
// methods", Statistics in Medicine 17:873–890, Table II, method 10), 95%
// limits printed to 4 decimals. Values from memory; statsmodels'
// confint_proportions_2indep(method="newcomb") agrees to the printed digits.
func TestCompareProportionsNewcombe(t *testing.T) {
	tests := []struct {
		d1, n1, d2, n2 int64
		lo, hi         float64
	}{
		{56, 70, 48, 80, 0.0524, 0.3339},
		{9, 10, 3, 10, 0.1705, 0.8090},
		{6, 7, 2, 7, 0.0582, 0.8062},
		{5, 56, 0, 29, -0.0381, 0.1926},
		{0, 10, 0, 20, -0.1611, 0.2775},
		{10, 10, 0, 20, 0.6791, 1.0000},
	}
	for _, tt := range tests {
		got, err := CompareProportions(tt.d1, tt.n1, tt.d2, tt.n2, 0.95)
		if err != nil {
			t.Fatal(err)
		}
		want := float64(tt.d1)/float64(tt.n1) - float64(tt.d2)/float64(tt.n2)
		if got.Difference != want || got.Level != 0.95 {
			t.Errorf("%d/%d − %d/%d: difference %v level %v", tt.d1, tt.n1, tt.d2, tt.n2, got.Difference, got.Level)
		}
		if math.Abs(got.Lower-tt.lo) > 5e-5 || math.Abs(got.Upper-tt.hi) > 5e-5 {
			t.Errorf("%d/%d − %d/%d: got [%.4f, %.4f], Newcombe Table II [%.4f, %.4f]",
				tt.d1, tt.n1, tt.d2, tt.n2, got.Lower, got.Upper, tt.lo, tt.hi)
		}
	}
}

func TestCompareProportionsReference(t *testing.T) {
	ref := loadIntervalsRef(t)
	for _, r := range ref.TwoProp {
		got, err := CompareProportions(r.D1, r.N1, r.D2, r.N2, r.Level)
		if err != nil {
			t.Fatal(err)
		}
		// Source: statsmodels confint_proportions_2indep(method="newcomb").
		if !intervalClose(got.Lower, r.Lower, 1e-9) || !intervalClose(got.Upper, r.Upper, 1e-9) {
			t.Errorf("%d/%d − %d/%d at %g: got [%.12g, %.12g], statsmodels [%.12g, %.12g]",
				r.D1, r.N1, r.D2, r.N2, r.Level, got.Lower, got.Upper, r.Lower, r.Upper)
		}
		if r.PValue == nil {
			// Pooled rate 0 or 1: statsmodels has no finite statistic; ours
			// reports no evidence of a difference.
			if got.Z != 0 || got.PValue != 1 || got.Test != TestFisherExact {
				t.Errorf("%d/%d − %d/%d: z %v p %v, want 0 and 1", r.D1, r.N1, r.D2, r.N2, got.Z, got.PValue)
			}
			continue
		}
		// Source: statsmodels proportions_ztest (pooled, two-sided).
		z, p := PooledZTest(r.D1, r.N1, r.D2, r.N2)
		if !intervalClose(z, *r.Z, 1e-9) || math.Abs(p-*r.PValue) > 1e-9*math.Max(*r.PValue, 1e-6) {
			t.Errorf("%d/%d − %d/%d: z %.12g p %.12g, statsmodels z %.12g p %.12g",
				r.D1, r.N1, r.D2, r.N2, z, p, *r.Z, *r.PValue)
		}
		if got.Z != z || (got.Test == TestPooledZ && got.PValue != p) {
			t.Errorf("%d/%d − %d/%d: CompareProportions z %v p %v (%s), PooledZTest z %v p %v",
				r.D1, r.N1, r.D2, r.N2, got.Z, got.PValue, got.Test, z, p)
		}
	}
}

func TestComparePoissonRatesReference(t *testing.T) {
	ref := loadIntervalsRef(t)
	for _, r := range ref.TwoRate {
		got, err := ComparePoissonRates(r.C1, r.E1, r.C2, r.E2, r.Level)
		if err != nil {
			t.Fatal(err)
		}
		if got.Difference != float64(r.C1)/r.E1-float64(r.C2)/r.E2 {
			t.Errorf("difference %v", got.Difference)
		}
		// Source: the Zou & Donner (2008) MOVER formula evaluated in Python
		// with scipy.stats.norm (second implementation of the same formula).
		if !intervalClose(got.Lower, r.Lower, 1e-9) || !intervalClose(got.Upper, r.Upper, 1e-9) {
			t.Errorf("%d/%g − %d/%g at %g: got [%.12g, %.12g], reference [%.12g, %.12g]",
				r.C1, r.E1, r.C2, r.E2, r.Level, got.Lower, got.Upper, r.Lower, r.Upper)
		}
		if r.PValue == nil {
			if got.PValue != 1 {
				t.Errorf("no defects: p %v", got.PValue)
			}
			continue
		}
		// Source: scipy.stats.binomtest, exact conditional test.
		if math.Abs(got.PValue-*r.PValue) > 1e-9*math.Max(*r.PValue, 1e-6) {
			t.Errorf("%d/%g − %d/%g: p %.12g, scipy binomtest %.12g", r.C1, r.E1, r.C2, r.E2, got.PValue, *r.PValue)
		}
	}
}

func TestCompareErrors(t *testing.T) {
	for _, c := range [][4]int64{{1, 0, 1, 10}, {1, 10, 1, 0}, {-1, 10, 1, 10}, {11, 10, 1, 10}, {1, 10, 11, 10}} {
		if _, err := CompareProportions(c[0], c[1], c[2], c[3], 0.95); err == nil {
			t.Errorf("CompareProportions%v: no error", c)
		}
	}
	if _, err := CompareProportions(1, 10, 1, 10, 1); err == nil {
		t.Error("level 1: no error")
	}
	if _, err := ComparePoissonRates(-1, 1, 1, 1, 0.95); err == nil {
		t.Error("negative defects: no error")
	}
	if _, err := ComparePoissonRates(1, 1, 1, 0, 0.95); err == nil {
		t.Error("zero exposure: no error")
	}
}

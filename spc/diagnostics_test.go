package spc

import (
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

func warningText(a *Analysis, code string) string {
	for _, w := range a.Warnings {
		if w.Code == code {
			return w.Message
		}
	}
	return ""
}

func TestDiagnosticWarnings(t *testing.T) {
	// p̄ = 0.02 with n = 100: n·p̄ = 2 < 5 (common practice, no source) and
	// LCL = 0; a positive LCL needs n > 3²·0.98/0.02 = 441 (from
	// p̄ − 3√(p̄(1−p̄)/n) > 0).
	low := constLots(100, []int64{2, 1, 3, 2, 2, 1, 3, 2, 2, 2})
	a, err := Analyze(low, Config{Chart: ChartP})
	if err != nil {
		t.Fatal(err)
	}
	if msg := warningText(a, "small-expected"); !strings.Contains(msg, "10 lots of 10") || !strings.Contains(msg, "exact") {
		t.Errorf("small-expected: %q", msg)
	}
	if msg := warningText(a, "lcl-zero"); !strings.Contains(msg, "at least 442 units") {
		t.Errorf("lcl-zero: %q", msg)
	}
	if msg := warningText(a, "few-lots"); !strings.Contains(msg, "Only 10 lots") || !strings.Contains(msg, "20 to 25") {
		t.Errorf("few-lots: %q", msg)
	}
	// u chart: ū = 0.5 per unit, n = 4: positive LCL needs n > 9/0.5 = 18.
	u, _ := Analyze(constLots(4, []int64{2, 2, 2, 2}), Config{Chart: ChartU})
	if msg := warningText(u, "lcl-zero"); !strings.Contains(msg, "at least 19 units") {
		t.Errorf("u lcl-zero: %q", msg)
	}
	// Exact limits: lcl ≥ 1 needs (1 − 0.02)ⁿ ≤ 0.00135, n ≥ ln(0.00135)/ln(0.98) = 327.0…
	e, _ := Analyze(low, Config{Chart: ChartP, Method: MethodExact})
	if msg := warningText(e, "lcl-zero"); !strings.Contains(msg, "at least 328 units") {
		t.Errorf("exact lcl-zero: %q", msg)
	}
	if warningText(e, "small-expected") != "" {
		t.Error("small-expected warning with exact limits")
	}
	// Enough lots and large n: none of these warnings.
	ok, _ := Analyze(constLots(1000, []int64{50, 48, 52, 55, 47, 49, 51, 53, 46, 50, 52, 48, 49, 51, 50, 47, 53, 52, 48, 50}), Config{Chart: ChartP})
	for _, code := range []string{"small-expected", "lcl-zero", "few-lots", "overdispersion"} {
		if msg := warningText(ok, code); msg != "" {
			t.Errorf("unexpected %s: %q", code, msg)
		}
	}
	if ok.Dispersion.Advice == "" || ok.Dispersion.Overdispersed {
		t.Errorf("dispersion %+v", ok.Dispersion)
	}
}

// TestDispersionNotDrivenBySpecialCauses: the cases that made the check
// advise Laney limits on the strength of the very lots a chart is there to
// find. Each whole-baseline check finds extra spread; the robust checks
// (without the lots beyond the limits, and lot to lot) do not, so the
// advice says why and no overdispersion warning is given. Binomial lots
// simulated with a fixed seed (simLots), p = 0.02, n 150–250.
func TestDispersionNotDrivenBySpecialCauses(t *testing.T) {
	sizes := []int64{150, 200, 250}
	base := simLots(11, 60, sizes, 0.02, 0)
	// One bad lot in the baseline (40 of 200: z ≈ 19).
	bad := append([]Lot(nil), base...)
	bad[30] = Lot{Code: "bad", Inspected: 200, Count: 40}
	// A typo: 100 nonconforming keyed for 10 of the 250 inspected.
	typo := append([]Lot(nil), base...)
	typo[45] = Lot{Code: "typo", Inspected: 250, Count: 100}
	// Four lots shifted to three times the rate after the limits were
	// frozen at the in-control centre.
	shifted := append([]Lot(nil), base[:40]...)
	for i := range 4 {
		shifted = append(shifted, Lot{Code: "s", Inspected: 200, Count: int64(11 + i)})
	}
	tests := []struct {
		name string
		lots []Lot
		cfg  Config
		why  string
	}{
		{"one bad lot", bad, Config{Chart: ChartP}, "only because of the 1 lot beyond the 3-sigma"},
		{"one bad lot, Laney in use", bad, Config{Chart: ChartP, Method: MethodLaney}, "only because of the 1 lot beyond the 3-sigma"},
		{"a typo lot", typo, Config{Chart: ChartNP}, "only because of the 1 lot beyond the 3-sigma"},
		{"four shifted lots after freezing", shifted, Config{Chart: ChartP, Standard: &Standard{Center: 0.02, SigmaZ: 1}}, "does not decide the limit method"},
	}
	for _, tt := range tests {
		a, err := Analyze(tt.lots, tt.cfg)
		if err != nil {
			t.Fatal(err)
		}
		d := a.Dispersion
		if !(d.PValue < 0.01 && d.Ratio > 1.5) {
			t.Errorf("%s: the whole-baseline check finds no extra spread (p %.3g ratio %.3g); the case tests nothing", tt.name, d.PValue, d.Ratio)
		}
		if d.Overdispersed || hasWarning(a, "overdispersion") || (tt.cfg.Standard == nil && (d.Beyond == 0 || d.RobustSigmaZ > 1.3)) {
			t.Errorf("%s: %+v", tt.name, d)
		}
		if !strings.Contains(d.Advice, tt.why) || strings.Contains(d.Advice, "suit this process better") {
			t.Errorf("%s: advice %q, want %q", tt.name, d.Advice, tt.why)
		}
	}
	// The same lots without the special causes: nothing to explain.
	a, _ := Analyze(base, Config{Chart: ChartP})
	if a.Dispersion.Overdispersed || a.Dispersion.TrimmedDF != 0 {
		t.Errorf("in-control lots: %+v", a.Dispersion)
	}
}

// TestDispersionShiftNotSpread: a rate that steps up halfway, with no lot
// beyond the limits, looks overdispersed on the whole baseline but not
// from one lot to the next; the advice names the shift. Lots of 1000 at
// p = 0.03 then 0.05, no randomness (hand arithmetic: the z of the two
// halves are about ±1.8 around p̄ = 0.04, within 3 sigma).
func TestDispersionShiftNotSpread(t *testing.T) {
	var lots []Lot
	for i := range 40 {
		d := int64(30 + i%3 - 1)
		if i >= 20 {
			d = int64(50 + i%3 - 1)
		}
		lots = append(lots, Lot{Code: "x", Inspected: 1000, Count: d})
	}
	a, _ := Analyze(lots, Config{Chart: ChartP})
	d := a.Dispersion
	if !(d.PValue < 0.01 && d.Ratio > 1.5) || d.Beyond != 0 {
		t.Fatalf("whole-baseline check %+v; the case tests nothing", d)
	}
	if d.Overdispersed || !strings.Contains(d.Advice, "a shift or a drift") {
		t.Errorf("%+v", d)
	}
}

// TestMedianMovingRangeConstant: the median of |Z₁ − Z₂| for independent
// standard normals is √2·Φ⁻¹(0.75) (Z₁ − Z₂ is normal with variance 2).
func TestMedianMovingRangeConstant(t *testing.T) {
	if want := math.Sqrt2 * distuv.UnitNormal.Quantile(0.75); math.Abs(medianMRConstant-want) > 5e-5 {
		t.Errorf("constant %v, want %v", medianMRConstant, want)
	}
	// 1, 3, 2, 6: moving ranges 2, 1, 4, median 2.
	if got := robustSigmaZ([]float64{1, 3, 2, 6}); math.Abs(got-2/medianMRConstant) > 1e-12 {
		t.Errorf("robustSigmaZ = %v", got)
	}
}

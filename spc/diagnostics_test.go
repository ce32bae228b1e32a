package spc

import (
	"strings"
	"testing"
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

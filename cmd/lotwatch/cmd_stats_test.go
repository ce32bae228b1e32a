package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"strings"
	"testing"
)

// runStats runs lotwatch in-process and returns status, stdout and stderr.
func runStats(args ...string) (int, string, string) {
	var out, errb bytes.Buffer
	code := run(args, strings.NewReader(""), &out, &errb)
	return code, out.String(), errb.String()
}

func decodeStats(t *testing.T, s string) map[string]any {
	t.Helper()
	var m map[string]any
	if err := json.Unmarshal([]byte(s), &m); err != nil {
		t.Fatalf("not JSON: %v\n%s", err, s)
	}
	return m
}

func statsNear(t *testing.T, m map[string]any, field string, want, tol float64) {
	t.Helper()
	got, ok := m[field].(float64)
	if !ok {
		t.Errorf("field %q missing or not a number: %v", field, m[field])
		return
	}
	if math.Abs(got-want) > tol {
		t.Errorf("%s = %.6f, want %.6f ± %g", field, got, want, tol)
	}
}

func TestIntervalCommandJSON(t *testing.T) {
	tests := []struct {
		args   []string
		method string
		lo, hi float64
	}{
		// Newcombe (1998), Statistics in Medicine 17:857–872, Table II,
		// 95% limits to 4 decimals (from memory; they match statsmodels).
		{[]string{"interval", "--format", "json", "81", "263"}, "wilson", 0.2553, 0.3662},
		{[]string{"interval", "--method", "clopper-pearson", "--format=json", "15", "148"}, "clopper-pearson", 0.0578, 0.1617},
		{[]string{"interval", "--format", "json", "--method", "wald", "81", "263"}, "wald", 0.2522, 0.3638},
		{[]string{"interval", "--format", "json", "0", "20"}, "wilson", 0, 0.1611},
		{[]string{"interval", "--format", "json", "--level", "0.95", "29", "29"}, "wilson", 0.8830, 1},
	}
	for _, tt := range tests {
		code, out, errs := runStats(tt.args...)
		if code != exitOK || errs != "" {
			t.Fatalf("%v: status %d, stderr %q", tt.args, code, errs)
		}
		m := decodeStats(t, out)
		if m["method"] != tt.method || m["level"] != 0.95 {
			t.Errorf("%v: method %v level %v", tt.args, m["method"], m["level"])
		}
		statsNear(t, m, "lower", tt.lo, 5e-5)
		statsNear(t, m, "upper", tt.hi, 5e-5)
		d, n := tt.args[len(tt.args)-2], tt.args[len(tt.args)-1]
		var dv, nv float64
		json.Unmarshal([]byte(d), &dv)
		json.Unmarshal([]byte(n), &nv)
		statsNear(t, m, "estimate", dv/nv, 1e-15)
		if _, has := m["caveat"]; has != (tt.method == "wald") {
			t.Errorf("%v: caveat present %v", tt.args, has)
		}
	}
}

func TestIntervalCommandText(t *testing.T) {
	code, out, _ := runStats("interval", "--method", "wald", "1", "29")
	if code != exitOK || !strings.Contains(out, "Brown, Cai & DasGupta") || !strings.HasSuffix(out, caution) {
		t.Errorf("Wald text output lacks its caveat or the caution:\n%s", out)
	}
	code, out, _ = runStats("interval", "1", "29")
	// Wilson 1/29: 0.0061 to 0.1718 (Newcombe 1998, Table II, from memory).
	if code != exitOK || !strings.Contains(out, "0.0061 to 0.1718") || strings.Contains(out, "DasGupta") {
		t.Errorf("Wilson text output:\n%s", out)
	}
	// Exact Poisson, 0 defects: upper limit −ln(0.025) = 3.6889 per unit
	// (closed form of Garwood's limit at c = 0).
	code, out, _ = runStats("interval", "--method", "poisson-exact", "--format", "json", "0", "1")
	if code != exitOK {
		t.Fatalf("poisson-exact: status %d", code)
	}
	statsNear(t, decodeStats(t, out), "upper", -math.Log(0.025), 1e-9)
}

func TestCompareCommandJSON(t *testing.T) {
	// Newcombe (1998), Statistics in Medicine 17:873–890, Table II, method
	// 10 (from memory; matches statsmodels' newcomb method).
	tests := []struct {
		d1, n1, d2, n2 string
		diff, lo, hi   float64
	}{
		{"56", "70", "48", "80", 0.2, 0.0524, 0.3339},
		{"9", "10", "3", "10", 0.6, 0.1705, 0.8090},
		{"5", "56", "0", "29", 5.0 / 56, -0.0381, 0.1926},
		{"0", "10", "0", "20", 0, -0.1611, 0.2775},
	}
	for _, tt := range tests {
		code, out, errs := runStats("compare", "--format", "json", tt.d1, tt.n1, tt.d2, tt.n2)
		if code != exitOK || errs != "" {
			t.Fatalf("status %d, stderr %q", code, errs)
		}
		m := decodeStats(t, out)
		statsNear(t, m, "difference", tt.diff, 1e-12)
		statsNear(t, m, "lower", tt.lo, 5e-5)
		statsNear(t, m, "upper", tt.hi, 5e-5)
		if _, ok := m["p_value"].(float64); !ok {
			t.Errorf("p_value missing: %v", m)
		}
	}
	// statsmodels proportions_ztest([56, 48], [70, 80]): p = 0.00804508136819656
	// (spc/testdata/intervals_reference.json).
	_, out, _ := runStats("compare", "--format", "json", "56", "70", "48", "80")
	statsNear(t, decodeStats(t, out), "p_value", 0.00804508136819656, 1e-12)
	// First minus second: swapping the groups flips the sign.
	_, out, _ = runStats("compare", "--format", "json", "48", "80", "56", "70")
	m := decodeStats(t, out)
	statsNear(t, m, "difference", -0.2, 1e-12)
	statsNear(t, m, "upper", -0.0524, 5e-5)
}

func TestPlanCommand(t *testing.T) {
	var ref struct {
		Plan []struct {
			P0       float64 `json:"p0"`
			N        int64   `json:"n"`
			P1       float64 `json:"p1"`
			SignalP0 float64 `json:"signal_p0"`
			SignalP1 float64 `json:"signal_p1"`
		} `json:"plan"`
	}
	b, err := os.ReadFile("../../spc/testdata/intervals_reference.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	// p0 = 0.1, n = 400, p1 = 0.15 at 3 sigma: 40 ± 18 → signal above 58 or
	// below 22 (hand arithmetic); ARLs from scipy.stats.binom in the
	// reference file; the lower limit needs n > 9·0.9/0.1 = 81 (Montgomery §7.2).
	var sig0, sig1 float64
	for _, r := range ref.Plan {
		if r.P0 == 0.1 && r.N == 400 && r.P1 == 0.15 {
			sig0, sig1 = r.SignalP0, r.SignalP1
		}
	}
	if sig0 == 0 {
		t.Fatal("reference row p0=0.1 n=400 missing")
	}
	code, out, errs := runStats("plan", "--p0", "0.1", "--n", "400", "--p1", "0.15", "--format", "json")
	if code != exitOK || errs != "" {
		t.Fatalf("status %d, stderr %q", code, errs)
	}
	m := decodeStats(t, out)
	for field, want := range map[string]float64{"n": 400, "ucl_count": 58, "lcl_count": 22, "min_n_positive_lcl": 82} {
		statsNear(t, m, field, want, 0)
	}
	statsNear(t, m, "arl0", 1/sig0, 1e-9/sig0)
	statsNear(t, m, "arl1", 1/sig1, 1e-9/sig1)

	// Search: reference scan in intervals_reference.py gives n = 79 for
	// p0 = 0.1, p1 = 0.2, target ARL1 2 at 3 sigma.
	code, out, _ = runStats("plan", "--p0", "0.1", "--p1", "0.2", "--arl1", "2", "--format", "json")
	if code != exitOK {
		t.Fatalf("search: status %d", code)
	}
	m = decodeStats(t, out)
	statsNear(t, m, "n", 79, 0)
	if a, _ := m["arl1"].(float64); !(a <= 2) {
		t.Errorf("arl1 %v above the target", m["arl1"])
	}

	// The search keeps to the default floor of 100 lots between false
	// alarms: p0 = 0.02, p1 = 0.06, target 5 lots gives 39 units with ARL0
	// 132.7 (smallest_n_floor in intervals_reference.json, by scipy); a
	// floor lowered explicitly is obeyed with a warning on stderr.
	code, out, errs = runStats("plan", "--p0", "0.02", "--p1", "0.06", "--arl1", "5", "--format", "json")
	m = decodeStats(t, out)
	if code != exitOK || errs != "" {
		t.Errorf("search with the default floor: status %d stderr %q", code, errs)
	}
	statsNear(t, m, "n", 39, 0)
	statsNear(t, m, "arl0", 132.72537086570495, 1e-9)
	code, _, errs = runStats("plan", "--p0", "0.02", "--p1", "0.06", "--arl1", "5", "--min-arl0", "0", "--format", "json")
	if code != exitOK || !strings.Contains(errs, "warning: --min-arl0 0 is below the default floor of 100") {
		t.Errorf("lowered floor: status %d stderr %q", code, errs)
	}
	_, out, _ = runStats("plan", "--p0", "0.02", "--n", "3")
	if !strings.Contains(out, "no lot can signal low at this size") || strings.Contains(out, "-1") || !strings.Contains(out, "Warning: at this size") {
		t.Errorf("plan text at n = 3:\n%s", out)
	}
	// At n = 3 the lower limit 0.02 − 3·√(0.02·0.98/3) is below zero (hand
	// arithmetic): no count can signal low, so the JSON gives no lower
	// count or limit rather than −1 or a negative fraction.
	_, out, _ = runStats("plan", "--p0", "0.02", "--n", "3", "--format", "json")
	m = decodeStats(t, out)
	for _, field := range []string{"lcl_count", "lcl"} {
		if v, ok := m[field]; !ok || v != nil {
			t.Errorf("plan json at n = 3: %s = %v, want null", field, v)
		}
	}

	// No p1: arl1 is null; a 1-unit lot at p0 = 0.5 can never signal: arl0 null.
	_, out, _ = runStats("plan", "--p0", "0.5", "--n", "1", "--format", "json")
	m = decodeStats(t, out)
	if v, ok := m["arl1"]; !ok || v != nil {
		t.Errorf("arl1 without p1: %v", v)
	}
	if v, ok := m["arl0"]; !ok || v != nil {
		t.Errorf("arl0 with no possible signal: %v", v)
	}

	code, out, _ = runStats("plan", "--p0", "0.02", "--n", "400")
	if code != exitOK || !strings.HasSuffix(out, caution) || !strings.Contains(out, "more than 16 nonconforming") {
		t.Errorf("plan text:\n%s", out)
	}
	// Unreachable target: exit status 1, nothing on stdout.
	code, out, errs = runStats("plan", "--p0", "0.1", "--p1", "0.11", "--arl1", "1.01", "--max-n", "100")
	if code != exitFail || out != "" || !strings.Contains(errs, "no lot size") {
		t.Errorf("unreachable: status %d stdout %q stderr %q", code, out, errs)
	}
}

func TestStatsCommandsBadInput(t *testing.T) {
	tests := []struct {
		args  []string
		lines []string // each stderr line must contain these words, in order
	}{
		{[]string{"interval", "x", "10"}, []string{`D "x"`}},
		{[]string{"interval", "1.5", "10"}, []string{`D "1.5"`}},
		{[]string{"interval", "-1", "10"}, []string{`D "-1"`}},
		{[]string{"interval", "3", "0"}, []string{`N "0"`}},
		{[]string{"interval", "11", "10"}, []string{`D "11"`}},
		{[]string{"interval", "--level", "1.5", "1", "10"}, []string{`--level "1.5"`}},
		{[]string{"interval", "--level", "0", "1", "10"}, []string{`--level "0"`}},
		{[]string{"interval", "--method", "exact", "1", "10"}, []string{`--method "exact"`}},
		{[]string{"interval", "--bogus", "1", "10"}, []string{"--bogus"}},
		{[]string{"interval", "1"}, []string{"want 2 arguments"}},
		{[]string{"interval", "1", "2", "3"}, []string{"want 2 arguments"}},
		{[]string{"interval", "--format", "xml", "x", "0"}, []string{`--format "xml"`, `D "x"`, `N "0"`}},
		{[]string{"compare", "1", "10", "2"}, []string{"want 4 arguments"}},
		{[]string{"compare", "1", "10", "12", "10"}, []string{`D2 "12"`}},
		{[]string{"compare", "a", "0", "1", "10"}, []string{`D1 "a"`, `N1 "0"`}},
		{[]string{"compare", "--level", "95", "1", "10", "2", "10"}, []string{`--level "95"`}},
		{[]string{"plan"}, []string{"--p0", "--n"}},
		{[]string{"plan", "--p0", "1.2", "--n", "100"}, []string{`--p0 "1.2"`}},
		{[]string{"plan", "--p0", "0.1", "--n", "0"}, []string{`--n "0"`}},
		{[]string{"plan", "--p0", "0.1", "--n", "-5"}, []string{`--n "-5"`}},
		{[]string{"plan", "--p0", "0.1", "--p1", "0.1", "--n", "50"}, []string{`--p1 "0.1"`}},
		{[]string{"plan", "--p0", "0.1", "--arl1", "3", "--n", "50"}, []string{`--arl1 "3"`}},
		{[]string{"plan", "--p0", "0.1", "--p1", "0.2", "--arl1", "0.5"}, []string{`--arl1 "0.5"`}},
		{[]string{"plan", "--p0", "0.1", "--sigma", "-3", "--n", "50"}, []string{`--sigma "-3"`}},
		{[]string{"plan", "--p0", "0.1", "--n", "50", "extra"}, []string{`"extra"`}},
		{[]string{"plan", "--p0", "0.1", "--n", "50", "--x", "1"}, []string{"--x"}},
		{[]string{"plan", "--p0", "0.1", "--p1", "0.2", "--arl1", "2", "--max-n", "100000000"}, []string{`--max-n "100000000"`}},
	}
	for _, tt := range tests {
		code, out, errs := runStats(tt.args...)
		if code != exitUsage {
			t.Errorf("%v: status %d, want %d", tt.args, code, exitUsage)
		}
		if out != "" {
			t.Errorf("%v: stdout %q, want nothing", tt.args, out)
		}
		lines := strings.Split(strings.TrimSuffix(errs, "\n"), "\n")
		if len(lines) != len(tt.lines) {
			t.Errorf("%v: %d stderr lines, want %d:\n%s", tt.args, len(lines), len(tt.lines), errs)
			continue
		}
		for i, want := range tt.lines {
			if !strings.Contains(lines[i], want) {
				t.Errorf("%v: line %q lacks %q", tt.args, lines[i], want)
			}
		}
	}
}

func TestStatsCommandsHelp(t *testing.T) {
	for name, words := range map[string][]string{
		"interval": {"--method", "--level", "--format", "wilson", "clopper-pearson", "agresti-coull", "jeffreys", "wald"},
		"compare":  {"--level", "--format", "D1", "N2", "first minus second"},
		"plan":     {"--p0", "--p1", "--n", "--arl1", "--sigma", "--max-n", "--format"},
	} {
		for _, h := range []string{"-h", "--help"} {
			code, out, errs := runStats(name, h)
			if code != exitOK || errs != "" {
				t.Errorf("%s %s: status %d stderr %q", name, h, code, errs)
			}
			for _, w := range words {
				if !strings.Contains(out, w) {
					t.Errorf("%s %s: help lacks %q", name, h, w)
				}
			}
		}
		if code, out, _ := runStats("help", name); code != exitOK || !strings.Contains(out, "Usage: lotwatch "+name) {
			t.Errorf("help %s: status %d", name, code)
		}
		if _, ok := commands[name]; !ok || commands[name].summary == "" {
			t.Errorf("%s not registered with a summary", name)
		}
	}
}

package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// orangeJuiceCSV is Montgomery's orange-juice concentrate can example
// (Introduction to Statistical Quality Control, p chart of 30 samples of
// n = 50; from memory): trial limits p̄ = 0.2313, UCL 0.4102, LCL 0.0524,
// samples 15 and 23 above the UCL; revised without them p̄ = 0.2150,
// UCL 0.3893, LCL 0.0407.
func orangeJuiceCSV() string {
	counts := []int{12, 15, 8, 10, 4, 7, 16, 9, 14, 10, 5, 6, 17, 12, 22, 8, 10, 5, 13, 11, 20, 18, 24, 15, 9, 12, 7, 13, 9, 6}
	var b strings.Builder
	b.WriteString("Lot,Inspected,Defective,operator\r\n")
	for i, c := range counts {
		fmt.Fprintf(&b, "S%d,50,%d,x\r\n", i+1, c)
	}
	return b.String()
}

func runCmd(t *testing.T, stdin string, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errb bytes.Buffer
	code = run(args, strings.NewReader(stdin), &out, &errb)
	return code, out.String(), errb.String()
}

// analyzeJSON is the exact contract of `lotwatch analyze --format json`.
type analyzeJSON struct {
	Chart  *string  `json:"chart"`
	Center *float64 `json:"center"`
	Sigma  *float64 `json:"sigma"`
	Lots   []struct {
		Lot         *string  `json:"lot"`
		Inspected   *int64   `json:"inspected"`
		Count       *int64   `json:"count"`
		Value       *float64 `json:"value"`
		Center      *float64 `json:"center"`
		UCL         *float64 `json:"ucl"`
		LCL         *float64 `json:"lcl"`
		Z           *float64 `json:"z"`
		OutOfLimits *bool    `json:"out_of_limits"`
		Signals     []string `json:"signals"`
	} `json:"lots"`
	Signals []struct {
		Rule        string   `json:"rule"`
		Lots        []string `json:"lots"`
		Description string   `json:"description"`
	} `json:"signals"`
	Warnings   []string `json:"warnings"`
	Dispersion *struct {
		ChiSquare *float64 `json:"chi_square"`
		DF        *int     `json:"df"`
		Ratio     *float64 `json:"ratio"`
		PValue    *float64 `json:"p_value"`
		SigmaZ    *float64 `json:"sigma_z"`
	} `json:"dispersion"`
}

func TestAnalyzeJSONContract(t *testing.T) {
	tests := []struct {
		name             string
		args             []string
		center, ucl, lcl float64
		out              []string
		source           string
	}{
		{"trial", nil, 0.2313, 0.4102, 0.0524, []string{"S15", "S23"}, "Montgomery orange juice, trial limits (from memory)"},
		{"revised", []string{"--exclude", "S15,S23"}, 0.2150, 0.3893, 0.0407, []string{"S15", "S21", "S23"},
			"Montgomery orange juice, revised limits (from memory); S21 = 20/50 = 0.40 > 0.3893 by arithmetic"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			args := append([]string{"analyze", "--format", "json"}, tt.args...)
			code, stdout, stderr := runCmd(t, orangeJuiceCSV(), append(args, "-")...)
			if code != exitOK {
				t.Fatalf("exit %d, stderr %s", code, stderr)
			}
			var got analyzeJSON
			if err := json.Unmarshal([]byte(stdout), &got); err != nil {
				t.Fatalf("%v\n%s", err, stdout)
			}
			if got.Chart == nil || *got.Chart != "p" || got.Sigma == nil || *got.Sigma != 3 || got.Center == nil {
				t.Fatalf("chart/sigma/center: %+v", got)
			}
			if math.Abs(*got.Center-tt.center) > 5e-5 { // source: tt.source
				t.Errorf("center %.4f, want %.4f (%s)", *got.Center, tt.center, tt.source)
			}
			if len(got.Lots) != 30 || got.Dispersion == nil || got.Dispersion.DF == nil || got.Dispersion.PValue == nil {
				t.Fatalf("lots %d, dispersion %+v", len(got.Lots), got.Dispersion)
			}
			var out []string
			for _, l := range got.Lots {
				if l.Lot == nil || l.Inspected == nil || l.Count == nil || l.Value == nil || l.Center == nil ||
					l.UCL == nil || l.LCL == nil || l.Z == nil || l.OutOfLimits == nil || l.Signals == nil {
					t.Fatalf("lot misses a contract field: %+v", l)
				}
				if math.Abs(*l.UCL-tt.ucl) > 5e-5 || math.Abs(*l.LCL-tt.lcl) > 5e-5 { // source: tt.source
					t.Errorf("%s limits %.4f–%.4f, want %.4f–%.4f (%s)", *l.Lot, *l.LCL, *l.UCL, tt.lcl, tt.ucl, tt.source)
				}
				if *l.OutOfLimits {
					out = append(out, *l.Lot)
				}
			}
			if fmt.Sprint(out) != fmt.Sprint(tt.out) {
				t.Errorf("out of limits %v, want %v (%s)", out, tt.out, tt.source)
			}
			for _, s := range got.Signals {
				if s.Rule == "" || len(s.Lots) == 0 || s.Description == "" {
					t.Errorf("signal misses a field: %+v", s)
				}
			}
		})
	}
}

func TestAnalyzeTextAndCSV(t *testing.T) {
	code, stdout, stderr := runCmd(t, orangeJuiceCSV(), "analyze", "-")
	if code != exitOK || stderr != "" {
		t.Fatalf("exit %d, stderr %s", code, stderr)
	}
	for _, want := range []string{"p chart", "0.2313", "S15", "ABOVE UCL", "Caution"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("text output lacks %q", want)
		}
	}
	code, stdout, _ = runCmd(t, orangeJuiceCSV(), "analyze", "--format", "csv", "-")
	if code != exitOK || !strings.HasPrefix(stdout, "lot,inspected,count,value,center,lcl,ucl,z,out_of_limits") || strings.Count(stdout, "\n") != 31 {
		t.Errorf("csv output: exit %d\n%s", code, stdout)
	}
}

func TestAnalyzeDemoFile(t *testing.T) {
	file := filepath.Join("..", "..", "testdata", "demo", "line-4-harness-continuity.csv")
	code, stdout, stderr := runCmd(t, "", "analyze", "--rules", "nelson", "--limits", "exact", "--format", "json", file)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var got analyzeJSON
	if err := json.Unmarshal([]byte(stdout), &got); err != nil {
		t.Fatal(err)
	}
	if len(got.Lots) == 0 || len(got.Signals) == 0 {
		t.Errorf("the drifting harness line should show signals; got %d lots, %d signals", len(got.Lots), len(got.Signals))
	}
}

func TestAnalyzeBadInput(t *testing.T) {
	dir := t.TempDir()
	write := func(name, body string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	tests := []struct {
		name  string
		args  []string
		file  string
		wants []string // each must appear on stderr
	}{
		{"empty file", nil, "", []string{"line 1", "empty"}},
		{"header only", nil, "lot,inspected,defective\n", []string{"no lots"}},
		{"missing column", nil, "lot,defective\nA,1\n", []string{"inspected"}},
		{"non-integer", nil, "lot,inspected,defective\nA,50,1.5\n", []string{"line 2", "defective", `"1.5"`}},
		{"negative", nil, "lot,inspected,defective\nA,50,-1\n", []string{"line 2", "defective", `"-1"`}},
		{"defective above inspected", nil, "lot,inspected,defective\nA,50,51\n", []string{"line 2", "defective", `"51"`}},
		{"inspected zero", nil, "lot,inspected,defective\nA,0,0\n", []string{"line 2", "inspected", `"0"`}},
		{"two problems", nil, "lot,inspected,defective\nA,0,0\nB,10,x\n", []string{"line 2", "line 3"}},
		{"duplicate lot", nil, "lot,inspected,defective\nA,10,1\nA,10,1\n", []string{"line 3", "twice"}},
		{"unknown flag", []string{"--bogus"}, "lot,inspected,defective\nA,10,1\n", []string{"bogus"}},
		{"unknown method", []string{"--limits", "magic"}, "lot,inspected,defective\nA,10,1\n", []string{"--limits", "magic"}},
		{"unknown rules", []string{"--rules", "we9"}, "lot,inspected,defective\nA,10,1\n", []string{"--rules", "we9"}},
		{"unknown chart", []string{"--chart", "x"}, "lot,inspected,defective\nA,10,1\n", []string{"--chart"}},
		{"bad center", []string{"--center", "1.5"}, "lot,inspected,defective\nA,10,1\n", []string{"--center", "1.5"}},
		{"exclude unknown lot", []string{"--exclude", "Q"}, "lot,inspected,defective\nA,10,1\n", []string{"--exclude", `"Q"`}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			f := write(strings.ReplaceAll(tt.name, " ", "_")+".csv", tt.file)
			args := append(append([]string{"analyze"}, tt.args...), f)
			code, stdout, stderr := runCmd(t, "", args...)
			if code != exitUsage {
				t.Errorf("exit %d, want %d; stderr %s", code, exitUsage, stderr)
			}
			if stdout != "" {
				t.Errorf("stdout should be empty, got %q", stdout)
			}
			for _, w := range tt.wants {
				if !strings.Contains(stderr, w) {
					t.Errorf("stderr lacks %q:\n%s", w, stderr)
				}
			}
		})
	}
	// every problem line names the file
	code, _, stderr := runCmd(t, "", "analyze", write("named.csv", "lot,inspected,defective\nA,0,0\nB,10,x\n"))
	if code != exitUsage {
		t.Fatal(code)
	}
	for _, line := range strings.Split(strings.TrimSpace(stderr), "\n") {
		if !strings.Contains(line, "named.csv") {
			t.Errorf("problem line does not name the file: %q", line)
		}
	}
}

// TestAnalyzeBaseline checks that --baseline N judges every lot against
// the centre of the first N lots: the first 15 samples of Montgomery's
// orange-juice data above (from memory) hold 167 nonconforming of 750
// units (by arithmetic), p̄ = 0.22267.
func TestAnalyzeBaseline(t *testing.T) {
	code, stdout, stderr := runCmd(t, orangeJuiceCSV(), "analyze", "--baseline", "15", "--format", "json", "-")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var got analyzeJSON
	if err := json.Unmarshal([]byte(stdout), &got); err != nil {
		t.Fatal(err)
	}
	if math.Abs(*got.Center-167.0/750) > 1e-9 || len(got.Lots) != 30 {
		t.Errorf("center %v over %d lots, want 167/750 over 30", *got.Center, len(got.Lots))
	}
	if code, _, _ := runCmd(t, orangeJuiceCSV(), "analyze", "--baseline", "31", "-"); code != exitUsage {
		t.Errorf("a baseline longer than the file: exit %d, want 2", code)
	}
}

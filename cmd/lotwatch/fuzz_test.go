package main

import (
	"bytes"
	"encoding/json"
	"math"
	"strings"
	"testing"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
	"lotwatch/store/lotcsv"
)

var (
	fuzzAnalyzeCharts  = []spc.Chart{"", spc.ChartP, spc.ChartNP, spc.ChartU, spc.ChartC}
	fuzzAnalyzeMethods = []spc.Method{spc.MethodSigma, spc.MethodExact, spc.MethodLaney}
)

// FuzzAnalyze once found two faults with huge lots (BENCHMARKS.md, F1 and
// F2, and a negative tail probability at 10⁹ units); spc.CheckLot now
// refuses lots above spc.MaxInspected, and the seeds below keep such
// inputs in every run.

// FuzzAnalyze drives the input path of `lotwatch analyze` — readAnalyzeLots
// on arbitrary bytes, then spc.Analyze on what it accepts — with every
// chart and limit method and a range of limit widths. It must never panic;
// bad input must come back as problem lines naming the file; an analysis
// must have one point per lot, finite centre, limits and z with
// LCL ≤ centre ≤ UCL (sigma and Laney limits are centre ± K·σ), a tail
// probability in [0, 1], and must encode as JSON.
func FuzzAnalyze(f *testing.F) {
	for _, s := range []string{
		"lot,inspected,defective\nA1,100,2\nA2,100,0\nA3,120,9\n",
		"lot,inspected,defects\nA1,1,0\nA2,1,0\nA3,1,0\n",
		"lot,inspected,defective\nA1,1,1\nA2,1,1\n",
		"lot,inspected,defective\nA1,1000000000000,1000000000000\nA2,1,0\n",
		"lot,inspected,defects\nA1,1,1000000000000\nA2,1000000000000,0\n",
		"lot,inspected,defective\nA1,9223372036854775807,1\nA2,1,0\n",
		"lot,inspected,defective\nA1,1000000000000,1\nA2,3,2\n",
		"lot,inspected,defective\nA1,0,0\nA1,5,6\nA3,-1,0\n",
		"lot,inspected,defective\n",
		"\xEF\xBB\xBFlot,inspected,defective\r\nA1,10,1\r\n",
	} {
		f.Add([]byte(s), uint8(0), uint8(0), uint8(30))
	}
	f.Fuzz(func(t *testing.T, data []byte, chart, method, k10 uint8) {
		c := fuzzAnalyzeCharts[int(chart)%len(fuzzAnalyzeCharts)]
		lots, got, bad := readAnalyzeLots("in.csv", bytes.NewReader(data), lotcsv.Options{Chart: c, IgnoreUnknown: true})
		if len(bad) > 0 {
			for _, b := range bad {
				if !strings.HasPrefix(b, "in.csv: ") {
					t.Fatalf("problem line %q does not name the file", b)
				}
			}
			return
		}
		if len(lots) == 0 {
			t.Fatal("no problems and no lots")
		}
		cfg := spc.Config{Chart: got, Method: fuzzAnalyzeMethods[int(method)%len(fuzzAnalyzeMethods)],
			K: 0.5 + float64(k10%96)/10, Rules: spc.RulesNelson}
		a, err := spc.Analyze(lots, cfg)
		if err != nil {
			if err.Error() == "" {
				t.Fatal("empty error")
			}
			return
		}
		if len(a.Points) != len(lots) {
			t.Fatalf("%d points for %d lots", len(a.Points), len(lots))
		}
		finite := func(name string, v float64) {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("%s chart, %s limits, K %v: %s = %v\ninput %q", cfg.Chart, cfg.Method, cfg.K, name, v, data)
			}
		}
		finite("rate", a.Rate)
		finite("centre", a.Center)
		for i, p := range a.Points {
			finite("value", p.Value)
			finite("centre", p.Center)
			finite("UCL", p.UCL)
			finite("LCL", p.LCL)
			finite("z", p.Z)
			if !(p.TailP >= 0 && p.TailP <= 1) {
				t.Fatalf("lot %d: tail probability %v", i, p.TailP)
			}
			if cfg.Method != spc.MethodExact && !(p.LCL <= p.Center+1e-9*math.Abs(p.Center) && p.Center <= p.UCL+1e-9*math.Abs(p.UCL)) {
				t.Fatalf("lot %d: LCL %v, centre %v, UCL %v out of order", i, p.LCL, p.Center, p.UCL)
			}
		}
		for _, s := range a.Signals {
			if s.First < 0 || s.Last >= len(a.Points) || s.First > s.Last {
				t.Fatalf("signal %v spans %d..%d of %d points", s.Rule, s.First, s.Last, len(a.Points))
			}
		}
		if _, err := json.Marshal(chartjson.Analysis(a)); err != nil {
			t.Fatalf("the analysis does not encode as JSON: %v", err)
		}
	})
}

package main

import (
	"encoding/json"
	"fmt"
	"lotwatch/spc"
	"math"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// monitorsJSON is the exact contract of the monitors in
// `lotwatch analyze --format json`.
type monitorsJSON struct {
	CUSUM *struct {
		P0     *float64 `json:"p0"`
		P1     *float64 `json:"p1"`
		H      *float64 `json:"h"`
		ARL0   *float64 `json:"arl0"`
		ARL1   *float64 `json:"arl1"`
		Points []struct {
			Lot    *string  `json:"lot"`
			S      *float64 `json:"s"`
			Signal *bool    `json:"signal"`
		} `json:"points"`
		Signals []struct {
			Lot   *string `json:"lot"`
			Start *string `json:"start"`
		} `json:"signals"`
	} `json:"cusum"`
	EWMA *struct {
		P0     *float64 `json:"p0"`
		Lambda *float64 `json:"lambda"`
		Width  *float64 `json:"width"`
		ARL0   *float64 `json:"arl0"`
		Points []struct {
			Lot    *string  `json:"lot"`
			Z      *float64 `json:"z"`
			UCL    *float64 `json:"ucl"`
			LCL    *float64 `json:"lcl"`
			Signal *bool    `json:"signal"`
		} `json:"points"`
	} `json:"ewma"`
}

func TestAnalyzeMonitorsJSON(t *testing.T) {
	code, plain, _ := runCmd(t, orangeJuiceCSV(), "analyze", "--format", "json", "-")
	if code != 0 {
		t.Fatal(code)
	}
	code, out, stderr := runCmd(t, orangeJuiceCSV(), "analyze", "--format", "json", "--monitor", "cusum", "--shift", "0.35", "--monitor", "ewma", "-")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var m monitorsJSON
	if err := json.Unmarshal([]byte(out), &m); err != nil {
		t.Fatal(err)
	}
	c, e := m.CUSUM, m.EWMA
	if c == nil || e == nil || c.P0 == nil || c.P1 == nil || c.H == nil || c.ARL0 == nil || c.ARL1 == nil || e.P0 == nil || e.Lambda == nil || e.Width == nil {
		t.Fatalf("fields missing: %s", out)
	}
	// p0 is the chart's centre, 347/1500 (Montgomery's orange juice, from memory).
	if math.Abs(*c.P0-347.0/1500) > 1e-15 || *c.P1 != 0.35 || *c.ARL0 < 370 || !(*c.ARL1 < *c.ARL0) || *e.Lambda != 0.2 || *e.Width != 3 || *e.P0 != *c.P0 {
		t.Errorf("cusum %v %v %v %v, ewma %v %v", *c.P0, *c.P1, *c.ARL0, *c.ARL1, *e.Lambda, *e.Width)
	}
	// The EWMA's false alarms: λ 0.2 and L 3 give 559.9 lots between them
	// for normal data (Crowder's integral equation, SciPy:
	// spc/testdata/ewma_arl_reference.json); 50 units at 0.23 (11.6
	// nonconforming a lot) are near enough normal for 5 % (common
	// practice, no source).
	if e.ARL0 == nil || math.Abs(*e.ARL0/559.9-1) > 0.05 {
		t.Errorf("EWMA arl0 %v, want about 560 lots", e.ARL0)
	}
	if len(c.Points) != 30 || len(e.Points) != 30 || *c.Points[0].Lot != "S1" || *e.Points[29].Lot != "S30" {
		t.Fatalf("%d and %d points", len(c.Points), len(e.Points))
	}
	// The CUSUM written out: binomial scores from 0, restarting after a signal.
	a, b := math.Log(0.35/(*c.P0)), math.Log(0.65/(1-*c.P0))
	counts := []float64{12, 15, 8, 10, 4, 7, 16, 9, 14, 10, 5, 6, 17, 12, 22, 8, 10, 5, 13, 11, 20, 18, 24, 15, 9, 12, 7, 13, 9, 6}
	s, last0 := 0.0, -1
	var want []string
	for i, d := range counts {
		s = math.Max(0, s+d*a+(50-d)*b)
		p := c.Points[i]
		if math.Abs(*p.S-s) > 1e-12 || *p.Signal != (s >= *c.H) {
			t.Errorf("lot %d: S %v signal %v, want %v", i+1, *p.S, *p.Signal, s)
		}
		if s == 0 {
			last0 = i
		} else if s >= *c.H {
			want = append(want, *c.Points[i].Lot+"<"+*c.Points[last0+1].Lot)
			s, last0 = 0, i
		}
	}
	var got []string
	for _, sg := range c.Signals {
		got = append(got, *sg.Lot+"<"+*sg.Start)
	}
	if strings.Join(got, " ") != strings.Join(want, " ") || len(got) == 0 {
		t.Errorf("signals %v, want %v", got, want)
	}
	// The Shewhart part is what it is without the monitors.
	var with, without map[string]json.RawMessage
	json.Unmarshal([]byte(out), &with)
	json.Unmarshal([]byte(plain), &without)
	delete(with, "cusum")
	delete(with, "ewma")
	wj, _ := json.Marshal(with)
	pj, _ := json.Marshal(without)
	if string(wj) != string(pj) {
		t.Error("the chart's JSON changed with the monitors")
	}
	// --decision-interval sets h.
	_, out, _ = runCmd(t, orangeJuiceCSV(), "analyze", "--format", "json", "--monitor", "cusum", "--shift", "0.1", "--decision-interval", "2.5", "-")
	var m2 monitorsJSON
	json.Unmarshal([]byte(out), &m2)
	if m2.CUSUM == nil || *m2.CUSUM.H != 2.5 || *m2.CUSUM.ARL0 <= 0 {
		t.Errorf("decision interval: %s", out)
	}
}

func TestAnalyzeMonitorsBadValues(t *testing.T) {
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"--monitor", "cusum", "--shift", "1.2"}, "--shift: 1.2"},
		{[]string{"--monitor", "cusum", "--shift", "0"}, "--shift: 0"},
		{[]string{"--monitor", "cusum", "--shift", "0.23133333333333334"}, "--shift: 0.23133333333333334 equals the centre"},
		{[]string{"--monitor", "cusum", "--shift", "0.3", "--arl0", "0.5"}, "--arl0: 0.5"},
		{[]string{"--monitor", "cusum", "--shift", "0.3", "--decision-interval", "-1"}, "--decision-interval: -1"},
		{[]string{"--monitor", "ewma", "--lambda", "0"}, "--lambda: 0"},
		{[]string{"--monitor", "ewma", "--lambda", "1.5"}, "--lambda: 1.5"},
		{[]string{"--monitor", "ewma", "--width", "0"}, "--width: 0"},
		{[]string{"--monitor", "ewma", "--width", "-2"}, "--width: -2"},
		{[]string{"--monitor", "cusum"}, "--shift"},
		{[]string{"--monitor", "median"}, "median"},
		{[]string{"--shift", "0.3"}, "--shift: 0.3"},
		{[]string{"--arl0", "500"}, "--arl0: 500 is for --monitor cusum or ewma"},
		{[]string{"--monitor", "ewma", "--arl0", "500", "--width", "3"}, "--arl0 and --width both set the EWMA's width"},
		{[]string{"--monitor", "ewma", "--arl0", "0.5"}, "--arl0: 0.5"},
	} {
		args := append(append([]string{"analyze"}, tc.args...), "-")
		code, out, stderr := runCmd(t, orangeJuiceCSV(), args...)
		lines := strings.Split(strings.TrimSpace(stderr), "\n")
		if code != exitUsage || out != "" || len(lines) != 1 || !strings.Contains(stderr, tc.want) {
			t.Errorf("%v: exit %d, stdout %q, stderr %q; want exit 2 and one line naming %q", tc.args, code, out, stderr, tc.want)
		}
	}
}

func TestAnalyzeMonitorsHelpAndText(t *testing.T) {
	_, help, _ := runCmd(t, "", "analyze", "-h")
	for _, opt := range []string{"-monitor", "-shift", "-arl0", "-decision-interval", "-lambda", "-width"} {
		if !strings.Contains(help, opt) {
			t.Errorf("help does not explain %s", opt)
		}
	}
	code, out, _ := runCmd(t, orangeJuiceCSV(), "analyze", "--monitor", "cusum", "--shift", "0.35", "--monitor", "ewma", "-")
	if code != 0 || !strings.Contains(out, "CUSUM watching for a rise") || !strings.Contains(out, "the change probably began at lot") || !strings.Contains(out, "EWMA of the rates") || !regexp.MustCompile(`on average 5\d\d\.\d lots between false alarms at the centre \(limits at their steady width`).MatchString(out) {
		t.Errorf("text: %s", out)
	}
}

// TestAnalyzeLaneyBaselineSigmaZ: with --baseline N, Laney limits use the
// σ_z of the first N lots, and the JSON and the text report that σ_z, not
// the σ_z of all lots (p′ and u′). σ_z is written out from Laney (2002):
// the mean moving range of z over the baseline lots divided by 1.128.
func TestAnalyzeLaneyBaselineSigmaZ(t *testing.T) {
	for _, tc := range []struct {
		chart, col string
		n          []float64
		c          []float64
	}{
		{"p", "defective", []float64{200, 180, 220, 200, 210, 190}, []float64{10, 3, 18, 6, 30, 2}},
		{"u", "defects", []float64{20, 18, 22, 20, 21, 19}, []float64{30, 12, 50, 22, 70, 9}},
	} {
		var b strings.Builder
		b.WriteString("lot,inspected," + tc.col + "\n")
		for i := range tc.n {
			b.WriteString("L" + string(rune('1'+i)) + "," + strconvF(tc.n[i]) + "," + strconvF(tc.c[i]) + "\n")
		}
		var sn, sc float64
		for i := 0; i < 4; i++ {
			sn += tc.n[i]
			sc += tc.c[i]
		}
		rate := sc / sn
		z := make([]float64, 4)
		for i := range z {
			sd := math.Sqrt(rate / tc.n[i])
			if tc.chart == "p" {
				sd = math.Sqrt(rate * (1 - rate) / tc.n[i])
			}
			z[i] = (tc.c[i]/tc.n[i] - rate) / sd
		}
		want := (math.Abs(z[1]-z[0]) + math.Abs(z[2]-z[1]) + math.Abs(z[3]-z[2])) / 3 / 1.128
		code, out, stderr := runCmd(t, b.String(), "analyze", "--chart", tc.chart, "--limits", "laney", "--baseline", "4", "--format", "json", "-")
		if code != 0 {
			t.Fatalf("%s: exit %d %s", tc.chart, code, stderr)
		}
		var got struct {
			SigmaZ float64 `json:"sigma_z"`
			Lots   []struct {
				UCL float64 `json:"ucl"`
			} `json:"lots"`
		}
		json.Unmarshal([]byte(out), &got)
		sd := math.Sqrt(rate / tc.n[5])
		if tc.chart == "p" {
			sd = math.Sqrt(rate * (1 - rate) / tc.n[5])
		}
		if math.Abs(got.SigmaZ-want) > 1e-12 || math.Abs(got.Lots[5].UCL-(rate+3*sd*want)) > 1e-12 {
			t.Errorf("%s: sigma_z %v, UCL %v; want σ_z %v and UCL %v", tc.chart, got.SigmaZ, got.Lots[5].UCL, want, rate+3*sd*want)
		}
		_, text, _ := runCmd(t, b.String(), "analyze", "--chart", tc.chart, "--limits", "laney", "--baseline", "4", "-")
		if !strings.Contains(text, "sigma_z "+strconv.FormatFloat(want, 'f', 3, 64)) {
			t.Errorf("%s: text header does not report σ_z %.3f:\n%s", tc.chart, want, text)
		}
	}
	if code, _, stderr := runCmd(t, orangeJuiceCSV(), "analyze", "--baseline", "-1", "-"); code != exitUsage || !strings.Contains(stderr, "--baseline: -1") {
		t.Errorf("--baseline -1: exit %d, %q", code, stderr)
	}
}

func strconvF(v float64) string { return strconv.FormatFloat(v, 'f', -1, 64) }

// TestPlanComparesCUSUM: with --p1 and --n, plan reports the CUSUM for
// the same shift at an in-control ARL no shorter than the chart's, and
// says which catches the shift sooner, consistently with the two ARL1.
func TestPlanComparesCUSUM(t *testing.T) {
	code, out, stderr := runCmd(t, "", "plan", "--p0", "0.005", "--p1", "0.01", "--n", "200", "--format", "json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var got struct {
		ARL0, ARL1 float64
		CUSUM      *struct{ H, ARL0, ARL1 float64 }
		Sooner     string
	}
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatal(err)
	}
	if got.CUSUM == nil || got.CUSUM.ARL0 < got.ARL0 || got.CUSUM.H <= 0 {
		t.Fatalf("%s", out)
	}
	want := "same"
	if got.CUSUM.ARL1 < 0.99*got.ARL1 {
		want = "cusum"
	} else if got.ARL1 < 0.99*got.CUSUM.ARL1 {
		want = "chart"
	}
	if got.Sooner != want {
		t.Errorf("sooner %q with ARL1 %v (chart) and %v (CUSUM)", got.Sooner, got.ARL1, got.CUSUM.ARL1)
	}
	_, text, _ := runCmd(t, "", "plan", "--p0", "0.005", "--p1", "0.01", "--n", "200")
	if !strings.Contains(text, "catches this shift sooner") && !strings.Contains(text, "equally soon") {
		t.Errorf("text does not say which is sooner:\n%s", text)
	}
}

// TestPlanComparesEWMA: with --p1 and --n, plan also reports the EWMA
// for the same shift, with no more false alarms than the chart: the
// weight of spc.EWMAWeights that catches it soonest, its width designed
// for that (spc.DesignEWMA, checked against Lucas & Saccucci's designs in
// spc), and its ARL at the shift as spc.EWMA.ARL gives it. Without --p1
// there is no shift to weigh, and no EWMA.
func TestPlanComparesEWMA(t *testing.T) {
	type planOut struct {
		ARL0 float64
		EWMA *struct{ Lambda, Width, ARL0, ARL1 float64 }
	}
	code, out, stderr := runCmd(t, "", "plan", "--p0", "0.005", "--p1", "0.01", "--n", "200", "--format", "json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var got planOut
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatal(err)
	}
	e := got.EWMA
	if e == nil || !slices.Contains(spc.EWMAWeights, e.Lambda) || e.ARL0 < got.ARL0 {
		t.Fatalf("%s", out)
	}
	ewma := spc.EWMA{Chart: spc.ChartP, P0: 0.005, Lambda: e.Lambda, L: e.Width}
	if a0, a1 := ewma.ARL(0.005, []int64{200}), ewma.ARL(0.01, []int64{200}); a0 != e.ARL0 || a1 != e.ARL1 {
		t.Errorf("EWMA ARLs %v and %v, spc gives %v and %v", e.ARL0, e.ARL1, a0, a1)
	}
	ewma.L -= 0.01
	if ewma.ARL(0.005, []int64{200}) >= got.ARL0 {
		t.Errorf("a width of %g would do: it is not the narrowest with no more false alarms than the chart", ewma.L)
	}
	_, text, _ := runCmd(t, "", "plan", "--p0", "0.005", "--p1", "0.01", "--n", "200")
	if !strings.Contains(text, "An EWMA of the lots' rates (weight") {
		t.Errorf("text does not set an EWMA beside the chart:\n%s", text)
	}
	// "Soonest" only when its ARL beats the chart's and the CUSUM's.
	var all struct {
		ARL1  float64
		CUSUM struct{ ARL1 float64 }
	}
	json.Unmarshal([]byte(out), &all)
	soonest := e.ARL1 < 0.99*all.ARL1 && e.ARL1 < 0.99*all.CUSUM.ARL1
	if strings.Contains(text, "The EWMA catches this shift soonest") != soonest {
		t.Errorf("EWMA ARL1 %v, chart %v, CUSUM %v: the text's verdict on the soonest does not follow them:\n%s", e.ARL1, all.ARL1, all.CUSUM.ARL1, text)
	}
	_, out, _ = runCmd(t, "", "plan", "--p0", "0.005", "--n", "200", "--format", "json")
	got = planOut{}
	json.Unmarshal([]byte(out), &got)
	if got.EWMA != nil {
		t.Errorf("an EWMA without a shift: %s", out)
	}
}

// TestAnalyzeEWMADesignedWidth: `analyze --monitor ewma --arl0 A` without
// --width sets the EWMA's width to spc.DesignEWMA's for A over the file's
// lot sizes (checked against Lucas & Saccucci's designs in spc), says so,
// and the JSON carries the target beside the ARL0 reached.
func TestAnalyzeEWMADesignedWidth(t *testing.T) {
	code, out, stderr := runCmd(t, orangeJuiceCSV(), "analyze", "--format", "json", "--monitor", "ewma", "--lambda", "0.1", "--arl0", "500", "-")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var got struct {
		EWMA *struct {
			P0         float64 `json:"p0"`
			Width      float64 `json:"width"`
			ARL0       float64 `json:"arl0"`
			ARL0Target float64 `json:"arl0_target"`
		} `json:"ewma"`
	}
	if err := json.Unmarshal([]byte(out), &got); err != nil || got.EWMA == nil {
		t.Fatalf("%v: %s", err, out)
	}
	sizes := make([]int64, 30)
	for i := range sizes {
		sizes[i] = 50
	}
	want, err := spc.DesignEWMA(spc.ChartP, got.EWMA.P0, 0.1, sizes, 500)
	if err != nil {
		t.Fatal(err)
	}
	if e := got.EWMA; e.Width != want.L || e.ARL0 != want.ARL0 || e.ARL0Target != 500 {
		t.Errorf("EWMA width %v (ARL0 %v, target %v), want %v (ARL0 %v, target 500)", e.Width, e.ARL0, e.ARL0Target, want.L, want.ARL0)
	}
	_, text, _ := runCmd(t, orangeJuiceCSV(), "analyze", "--monitor", "ewma", "--lambda", "0.1", "--arl0", "500", "-")
	if !strings.Contains(text, fmt.Sprintf("limits at %g standard deviations, centre 0.2313 (the narrowest with an in-control ARL of at least 500 lots)", want.L)) {
		t.Errorf("text does not say the width was designed:\n%s", text)
	}
}

package web

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"lotwatch/spc"
)

// chartSeries reads the series of the ECharts chart in the element id as
// the browser drew it: each series' name and its values, "-" where a
// series has no point.
func chartSeries(t *testing.T, ctx context.Context, id string) (series map[string][]any, xAxis []string) {
	t.Helper()
	js := `(function () {
  var o = echarts.getInstanceByDom(document.getElementById(` + fmt.Sprintf("%q", id) + `)).getOption();
  var out = {series: {}, x: o.xAxis[0].data};
  o.series.forEach(function (s) {
    out.series[s.name] = s.data.map(function (d) { return d !== null && typeof d === 'object' ? d.value : d; });
  });
  return JSON.stringify(out);
})()`
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	raw, err := chromedp.Run(sctx, chromedp.Evaluate[string](js))
	if err != nil {
		t.Fatalf("reading the chart %s: %v", id, err)
	}
	var got struct {
		Series map[string][]any `json:"series"`
		X      []string         `json:"x"`
	}
	if err := json.Unmarshal([]byte(raw), &got); err != nil {
		t.Fatalf("chart %s: %v", id, err)
	}
	return got.Series, got.X
}

// TestE2EShiftMonitorCharts opens, in a real browser, the chart page of
// a process watched by a CUSUM and an EWMA, over 40 lots of 200 near
// 1 % and then 20 near 3 %, none beyond its 3σ limit. Below the control
// chart, on the same lots, the CUSUM chart draws S with its decision
// interval h and the EWMA chart the average with its limits, each with
// its signalling lots marked, and the control chart marks the lots of
// both monitors' signals and no other (the process runs no run rules). The expected figures are spc's CUSUM (designed
// for the chart's centre and the lots' sizes, as the page's process
// asks) and EWMA run here on the same lots; their arithmetic is checked
// in spc against simulation and written-out recursions. Screenshots go
// to the screenshot folder (see DEVELOPERS.md).
func TestE2EShiftMonitorCharts(t *testing.T) {
	if testing.Short() && os.Getenv("CI") != "true" {
		t.Skip("browser test skipped in -short mode")
	}
	ctx := browser(t)
	e := newTestEnv(t)
	p := e.proc
	p.Monitors = spc.Monitors{CUSUMShift: 0.03, CUSUMARL0: 370, EWMALambda: 0.2, EWMAWidth: 3}
	p.Rules = "none" // so that the control chart marks the monitors' signals alone
	p, err := e.db.UpdateProcess(t.Context(), "setup", "watch for a small rise", p)
	if err != nil {
		t.Fatal(err)
	}
	stored := e.addLots(t, 60, func(i int) int64 {
		if i >= 40 {
			return int64([]int{6, 7, 5, 7, 6}[i%5])
		}
		return int64([]int{2, 1, 3, 2, 2}[i%5])
	})
	lots := make([]spc.Lot, len(stored))
	sizes := make([]int64, len(stored))
	var d, n int64
	for i, l := range stored {
		lots[i] = spc.Lot{Code: l.Lot, Inspected: l.Inspected, Count: l.Count}
		sizes[i] = l.Inspected
		d, n = d+l.Count, n+l.Inspected
	}
	p0 := float64(d) / float64(n) // trial limits: the centre of all lots
	cusum, err := spc.DesignCUSUM(spc.ChartP, p0, 0.03, sizes, 370, 0)
	if err != nil {
		t.Fatal(err)
	}
	cPoints, cSignals := cusum.Run(lots)
	ewma := spc.EWMA{Chart: spc.ChartP, P0: p0, Lambda: 0.2, L: 3}
	ePoints := ewma.Run(lots)
	if len(cSignals) == 0 {
		t.Fatal("the CUSUM does not signal on the rise; the test's lots do not show what it checks")
	}

	ts := httptest.NewServer(e.h)
	defer ts.Close()
	srv := ts.URL
	dir := screenshotDir(t)
	step(t, ctx, "sign in", chromedp.EmulateViewport(1280, 900),
		chromedp.Navigate(srv+"/signin"),
		chromedp.WaitVisible(chromedp.CSS(`input[name=name]`)),
		chromedp.SendKeys(chromedp.CSS(`input[name=name]`), "viewer1"),
		chromedp.SendKeys(chromedp.CSS(`input[name=password]`), testPassword),
		chromedp.Submit(chromedp.CSS(`input[name=password]`)),
		chromedp.WaitVisible(chromedp.CSS(`ul.board`)))
	step(t, ctx, "chart page", chromedp.Navigate(fmt.Sprintf("%s/processes/%d?period=all", srv, p.ID)),
		chromedp.WaitVisible(chromedp.CSS(`#chart[data-chart-ready]`)),
		chromedp.WaitVisible(chromedp.CSS(`#cusum-chart[data-chart-ready]`)),
		chromedp.WaitVisible(chromedp.CSS(`#ewma-chart[data-chart-ready]`)))

	main, codes := chartSeries(t, ctx, "chart")
	cs, cx := chartSeries(t, ctx, "cusum-chart")
	es, ex := chartSeries(t, ctx, "ewma-chart")
	if fmt.Sprint(cx) != fmt.Sprint(codes) || fmt.Sprint(ex) != fmt.Sprint(codes) || len(codes) != len(lots) {
		t.Fatalf("the monitor charts are not on the control chart's %d lots: CUSUM %d, EWMA %d", len(codes), len(cx), len(ex))
	}
	near := func(got any, want float64) bool {
		f, ok := got.(float64)
		return ok && math.Abs(f-want) <= 1e-12*math.Max(1, math.Abs(want))
	}
	marked := func(s []any, i int) bool { return i < len(s) && s[i] != "-" && s[i] != nil }
	shiftLots := map[int]bool{}
	for _, sg := range cSignals {
		for i := sg.Start; i <= sg.Lot; i++ {
			shiftLots[i] = true
		}
	}
	for i := range lots {
		if !near(cs["h"][i], cusum.H) || !near(cs["S"][i], cPoints[i].S) {
			t.Errorf("lot %s: CUSUM drawn S %v, h %v; want S %v, h %v", codes[i], cs["S"][i], cs["h"][i], cPoints[i].S, cusum.H)
		}
		if marked(cs["signal"], i) != cPoints[i].Signal {
			t.Errorf("lot %s: CUSUM signal marked %v, want %v", codes[i], marked(cs["signal"], i), cPoints[i].Signal)
		}
		ep := ePoints[i]
		if !near(es["EWMA"][i], ep.Z) || !near(es["EWMA UCL"][i], ep.UCL) || !near(es["EWMA LCL"][i], ep.LCL) {
			t.Errorf("lot %s: EWMA drawn %v in [%v, %v], want %v in [%v, %v]", codes[i], es["EWMA"][i], es["EWMA LCL"][i], es["EWMA UCL"][i], ep.Z, ep.LCL, ep.UCL)
		}
		if marked(es["signal"], i) != ep.Signal {
			t.Errorf("lot %s: EWMA signal marked %v, want %v", codes[i], marked(es["signal"], i), ep.Signal)
		}
		if ep.Signal {
			shiftLots[i] = true
		}
		if onMain := marked(main["in a signal"], i) || marked(main["out of limits"], i); onMain != shiftLots[i] {
			t.Errorf("lot %s: marked on the control chart %v; takes part in a shift signal %v", codes[i], onMain, shiftLots[i])
		}
	}
	// Each monitor's legend carries its false-alarm cost.
	legends := text(t, ctx, "main")
	for what, arl0 := range map[string]float64{"CUSUM": cusum.ARL0, "EWMA": ewma.ARL(p0, sizes)} {
		if want := fmt.Sprintf("on average %.0f lots between false alarms at the centre", arl0); !strings.Contains(legends, want) {
			t.Errorf("the %s legend does not say %q:\n%s", what, want, legends)
		}
	}
	for _, id := range []string{"cusum-chart", "ewma-chart"} {
		sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
		png, err := chromedp.Run(sctx, chromedp.Screenshot(chromedp.CSS("#"+id)))
		cancel()
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, id+".png"), png, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	shoot(t, ctx, dir, "chart-with-monitors")
	t.Logf("CUSUM h = %.2f (ARL0 %.0f, ARL1 %.1f lots), %d signals; screenshots in %s", cusum.H, cusum.ARL0, cusum.ARL1, len(cSignals), dir)
}

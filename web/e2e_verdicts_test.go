package web

import (
	"context"
	"fmt"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"lotwatch/spc"
	"lotwatch/store"
)

// TestE2EReviewAndPlanScreens opens the weekly review of a plant of 20
// processes and the planning page in a real browser at a desktop width and
// at 390 px (a phone): the review leads with its summary, sorted by
// concern, and keeps its tables within the page; the filter narrows it to
// one process with its section; the planning page draws its ARL chart;
// the chart page and a lot's page (its history table) stay within 390 px.
// Screenshots go to the screenshot folder (see DEVELOPERS.md).
func TestE2EReviewAndPlanScreens(t *testing.T) {
	if testing.Short() && os.Getenv("CI") != "true" {
		t.Skip("browser test skipped in -short mode")
	}
	ctx := browser(t)
	e := newTestEnv(t)
	now := e.clock.Now()
	loc := e.proc.Location()
	year, week := spc.ISOWeekOf(now, loc)
	start, _ := spc.ISOWeekRange(year, week, loc)
	for i := 0; i < 19; i++ {
		p, err := e.db.AddProcess(t.Context(), "setup", store.Process{Name: fmt.Sprintf("Press line %02d", i), Chart: spc.ChartP,
			Method: spc.MethodSigma, K: 3, Rules: "we", TimeZone: "Europe/Berlin", Active: true})
		if err != nil {
			t.Fatal(err)
		}
		var in []store.LotInput
		for j := 0; j < 14; j++ { // two weeks, a lot a day
			d := int64(4)
			if i == 3 && j >= 7 {
				d = 14 // a clear rise in the reviewed week
			}
			in = append(in, store.LotInput{Lot: fmt.Sprintf("P%02d-%02d", i, j), Time: start.AddDate(0, 0, j-14).Add(10 * time.Hour), Inspected: 200, Count: d})
		}
		if _, err := e.db.AddLots(t.Context(), "setup", p.ID, in); err != nil {
			t.Fatal(err)
		}
	}
	own := e.addLots(t, 30, func(i int) int64 { return int64(2 + i%5) })
	prev := spc.FormatISOWeek(spc.PreviousISOWeek(year, week))
	srv := httptest.NewServer(e.h)
	defer srv.Close()
	ts := srv.URL
	dir := screenshotDir(t)
	step(t, ctx, "sign in", chromedp.EmulateViewport(1280, 900),
		chromedp.Navigate(ts+"/signin"),
		chromedp.WaitVisible(chromedp.CSS(`input[name=name]`)),
		chromedp.SendKeys(chromedp.CSS(`input[name=name]`), "viewer1"),
		chromedp.SendKeys(chromedp.CSS(`input[name=password]`), testPassword),
		chromedp.Submit(chromedp.CSS(`input[name=password]`)),
		chromedp.WaitVisible(chromedp.CSS(`ul.board`)))

	pages := []struct{ name, path, ready string }{
		{"review", "/review?week=" + prev, `table.lw-summary`},
		{"review-filtered", "/review?week=" + prev + "&process=line+03", `section.lw-process`},
		{"plan", fmt.Sprintf("/plan?process=%d&p1=0.06&arl1=2", e.proc.ID), `#plan-chart[data-chart-ready]`},
		{"chart", fmt.Sprintf("/processes/%d?period=all", e.proc.ID), `#chart[data-chart-ready]`},
		{"lot", fmt.Sprintf("/lots/%d", own[3].ID), `#history`},
	}
	for _, pg := range pages {
		for _, w := range []int64{1280, 390} {
			step(t, ctx, pg.name, chromedp.EmulateViewport(w, 900), chromedp.Navigate(ts+pg.path), chromedp.WaitVisible(chromedp.CSS(pg.ready)))
			sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
			over, err := chromedp.Run(sctx, chromedp.Evaluate[float64](`document.documentElement.scrollWidth - window.innerWidth`))
			if err == nil && over > 0 {
				t.Errorf("%s at %d px: the page is %v px wider than the window", pg.name, w, over)
			}
			png, err2 := chromedp.Run(sctx, chromedp.FullScreenshot(100))
			cancel()
			if err != nil || err2 != nil {
				t.Fatal(err, err2)
			}
			if err := os.WriteFile(filepath.Join(dir, fmt.Sprintf("%s-%d.png", pg.name, w)), png, 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	// The summary is sorted by concern: the process with the rise first.
	step(t, ctx, "review", chromedp.EmulateViewport(1280, 900), chromedp.Navigate(ts+"/review?week="+prev), chromedp.WaitVisible(chromedp.CSS(`table.lw-summary`)))
	if first := text(t, ctx, `table.lw-summary tbody tr td`); first != "Press line 03" {
		t.Errorf("first row of the summary %q, want the process with the rise", first)
	}
	if s := text(t, ctx, `table.lw-summary tbody tr`); !strings.Contains(s, "a rise unlikely from sampling alone") {
		t.Errorf("first row %q", s)
	}
	t.Log("screenshots in ", dir)
}

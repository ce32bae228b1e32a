package web

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/chromedp/cdproto/cdp"
	"github.com/chromedp/cdproto/emulation"
	"github.com/chromedp/chromedp"

	"lotwatch/spc"
	"lotwatch/store"
)

// TestE2EReviewPrint opens the weekly review in a real browser as a
// reviewer would print it: under print media the navigation is gone, the
// Pareto and trend charts are drawn with a real size, and the page prints
// to a PDF. The self-contained HTML download, opened from a file as a
// mailed attachment is, loads no resource at all.
func TestE2EReviewPrint(t *testing.T) {
	if testing.Short() && os.Getenv("CI") != "true" {
		t.Skip("browser test skipped in -short mode")
	}
	ctx := browser(t)
	e := newTestEnv(t)
	// three weeks of lots, one every four hours, the last week with a
	// higher rate so that the review has a change, a Pareto and a trend
	now := e.clock.Now()
	var in []store.LotInput
	for i := 0; i < 6*21; i++ {
		d := int64(2 + i%3)
		if i >= 6*14 {
			d += 3
		}
		in = append(in, store.LotInput{Lot: fmt.Sprintf("R%03d", i), Time: now.Add(-time.Duration(6*21-i) * 4 * time.Hour),
			Inspected: 200, Count: d, Categories: map[string]int64{"scratch": d - d/3, "dent": d / 3}})
	}
	if _, err := e.db.AddLots(t.Context(), "setup", e.proc.ID, in); err != nil {
		t.Fatal(err)
	}
	year, week := spc.ISOWeekOf(now, e.proc.Location())
	wk := spc.FormatISOWeek(year, week)
	ts := httptest.NewServer(e.h)
	defer ts.Close()
	dir := screenshotDir(t)

	step(t, ctx, "sign in", chromedp.EmulateViewport(1280, 900),
		chromedp.Navigate(ts.URL+"/signin"),
		chromedp.WaitVisible(chromedp.CSS(`input[name=name]`)),
		chromedp.SendKeys(chromedp.CSS(`input[name=name]`), "viewer1"),
		chromedp.SendKeys(chromedp.CSS(`input[name=password]`), testPassword),
		chromedp.Submit(chromedp.CSS(`input[name=password]`)),
		chromedp.WaitVisible(chromedp.CSS(`ul.board`)))
	step(t, ctx, "open the review", chromedp.Navigate(ts.URL+"/review?week="+wk), chromedp.WaitVisible(chromedp.CSS(`main svg`)))
	step(t, ctx, "print media", chromedp.Func(func(ctx context.Context, tg *chromedp.Target) error {
		_, err := cdp.Call(ctx, tg, emulation.SetEmulatedMedia, emulation.SetEmulatedMediaParams{Media: "print"})
		return err
	}))
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	navShown, err := chromedp.Run(sctx, chromedp.Evaluate[bool](`(function(){var n=document.querySelector('nav, header');return !!n && n.getBoundingClientRect().height>0 && getComputedStyle(n).display!=='none'})()`))
	if err != nil {
		t.Fatal(err)
	}
	if navShown {
		t.Error("the site navigation still shows under print media")
	}
	sizes, err := chromedp.Run(sctx, chromedp.Evaluate[[]float64](`Array.from(document.querySelectorAll('main svg')).map(function(s){var r=s.getBoundingClientRect();return r.width*r.height})`))
	if err != nil {
		t.Fatal(err)
	}
	if len(sizes) < 2 {
		t.Errorf("want the Pareto and the trend charts, found %d charts", len(sizes))
	}
	for i, a := range sizes {
		if a < 10000 {
			t.Errorf("chart %d is drawn %v px² under print media, too small to read", i, a)
		}
	}
	png, err := chromedp.Run(sctx, chromedp.FullScreenshot(90))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "review-print-1280.png"), png, 0o644); err != nil {
		t.Fatal(err)
	}
	// print as a browser does, at the paper's width rather than the
	// emulated screen's
	if err := chromedp.Do(sctx, chromedp.EmulateReset()); err != nil {
		t.Fatal(err)
	}
	pdf, err := chromedp.Run(sctx, chromedp.PrintToPDF(chromedp.PDFPaper(chromedp.PaperSize{Width: 8.27, Height: 11.69})))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.HasPrefix(pdf, []byte("%PDF")) || len(pdf) < 5000 {
		t.Errorf("printing gave %d bytes, not a PDF with the review", len(pdf))
	}
	if err := os.WriteFile(filepath.Join(dir, "review-print.pdf"), pdf, 0o644); err != nil {
		t.Fatal(err)
	}
	t.Log("printed review in ", dir)

	// The downloaded file, opened from disk, must need nothing else.
	rq, _ := http.NewRequest("GET", ts.URL+"/review/download?format=html&week="+wk, nil)
	rq.AddCookie(e.signIn(t, "viewer1", testPassword))
	resp, err := http.DefaultClient.Do(rq)
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != 200 {
		t.Fatalf("download: %s", resp.Status)
	}
	file := filepath.Join(t.TempDir(), "review.html")
	if err := os.WriteFile(file, body, 0o644); err != nil {
		t.Fatal(err)
	}
	step(t, ctx, "open the mailed file", chromedp.Navigate("about:blank"), chromedp.Navigate("file://"+file))
	sctx, cancel = context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	res, err := chromedp.Run(sctx, chromedp.Evaluate[int](`performance.getEntriesByType('resource').length`))
	if err != nil {
		t.Fatal(err)
	}
	if res != 0 {
		t.Errorf("the self-contained review loaded %d resources", res)
	}
	charts, err := chromedp.Run(sctx, chromedp.Evaluate[int](`document.querySelectorAll('svg').length`))
	if err != nil {
		t.Fatal(err)
	}
	if charts < 2 {
		t.Errorf("the self-contained review has %d charts, want the Pareto and the trend", charts)
	}
}

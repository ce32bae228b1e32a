package web

import (
	"context"
	"fmt"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"lotwatch/store"
)

// chromiumPath finds a Chromium to drive: $LOTWATCH_CHROMIUM, Debian's
// /usr/bin/chromium, or one on $PATH.
func chromiumPath() string {
	if p := os.Getenv("LOTWATCH_CHROMIUM"); p != "" {
		return p
	}
	for _, name := range []string{"/usr/bin/chromium", "chromium", "chromium-browser", "google-chrome"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	return ""
}

// skipE2E skips a browser test, or fails it under CI=true, where a skipped
// browser test would hide a broken set-up.
func skipE2E(t *testing.T, why string) {
	t.Helper()
	if os.Getenv("CI") == "true" {
		t.Fatal("browser test cannot run under CI=true: " + why)
	}
	t.Skip("browser test skipped: " + why)
}

// browser starts headless Chromium with a fresh profile and returns a
// chromedp context on it.
func browser(t *testing.T) context.Context {
	t.Helper()
	path := chromiumPath()
	if path == "" {
		skipE2E(t, "no Chromium found (install Debian's chromium or set LOTWATCH_CHROMIUM)")
	}
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(path),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.Flag("headless", true),
		chromedp.Flag("no-sandbox", true),
		chromedp.Flag("disable-gpu", true),
		chromedp.Flag("disable-quic", true),
		chromedp.Flag("no-first-run", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.NoDefaultBrowserCheck,
	}
	actx, cancelA := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancelB := chromedp.NewContext(actx)
	t.Cleanup(func() { cancelB(); cancelA() })
	// Start the browser without a deadline: a timeout on the first run
	// would stop the browser itself.
	if err := chromedp.Do(ctx, chromedp.Navigate("about:blank")); err != nil {
		skipE2E(t, "Chromium at "+path+" does not start: "+err.Error())
	}
	return ctx
}

// step runs browser actions with a bound on how long they may take.
func step(t *testing.T, ctx context.Context, what string, actions ...chromedp.Action[chromedp.Void]) {
	t.Helper()
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	if err := chromedp.Do(sctx, actions...); err != nil {
		t.Fatalf("%s: %v", what, err)
	}
}

// text returns the text of the first element matching the CSS selector.
func text(t *testing.T, ctx context.Context, sel string) string {
	t.Helper()
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	s, err := chromedp.Run(sctx, chromedp.Text(chromedp.CSS(sel)))
	if err != nil && strings.Contains(err.Error(), "No node with given id") {
		// The browser renumbered its nodes between finding the element
		// and reading it (a large page still being laid out): find it
		// again; the text asserted is the same.
		s, err = chromedp.Run(sctx, chromedp.Text(chromedp.CSS(sel)))
	}
	if err != nil {
		t.Fatalf("text of %s: %v", sel, err)
	}
	return s
}

// screenshotDir is where the screenshots go: $LOTWATCH_SCREENSHOTS or a
// temporary directory.
func screenshotDir(t *testing.T) string {
	dir := os.Getenv("LOTWATCH_SCREENSHOTS")
	if dir == "" {
		var err error
		if dir, err = os.MkdirTemp("", "lotwatch-screens-"); err != nil {
			t.Fatal(err)
		}
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	return dir
}

// shoot saves full-page screenshots of the current page at desktop and
// tablet widths.
func shoot(t *testing.T, ctx context.Context, dir, name string) {
	t.Helper()
	for _, w := range []int64{1280, 800} {
		sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
		err := chromedp.Do(sctx, chromedp.EmulateViewport(w, 900), chromedp.Sleep(150*time.Millisecond))
		var png []byte
		if err == nil {
			png, err = chromedp.Run(sctx, chromedp.FullScreenshot(100))
		}
		cancel()
		if err != nil {
			t.Fatalf("screenshot %s at %d px: %v", name, w, err)
		}
		if err := os.WriteFile(filepath.Join(dir, fmt.Sprintf("%s-%d.png", name, w)), png, 0o644); err != nil {
			t.Fatal(err)
		}
		// and the first screen alone, as a user sees it on opening the page
		sctx, cancel = context.WithTimeout(ctx, 20*time.Second)
		png, err = chromedp.Run(sctx, chromedp.CaptureScreenshot())
		cancel()
		if err != nil {
			t.Fatalf("screenshot %s at %d px: %v", name, w, err)
		}
		if err := os.WriteFile(filepath.Join(dir, fmt.Sprintf("%s-%d-first-screen.png", name, w)), png, 0o644); err != nil {
			t.Fatal(err)
		}
		// no horizontal scrolling at this width
		sctx, cancel = context.WithTimeout(ctx, 20*time.Second)
		wide, err := chromedp.Run(sctx, chromedp.Evaluate[bool](`document.documentElement.scrollWidth > document.documentElement.clientWidth + 1`))
		cancel()
		if err != nil {
			t.Fatal(err)
		}
		if wide {
			t.Errorf("%s at %d px scrolls sideways", name, w)
		}
	}
	step(t, ctx, "viewport back", chromedp.EmulateViewport(1280, 900))
}

// seedE2E logs 48 lots in control, one an hour up to an hour ago.
func seedE2E(t *testing.T, e *testEnv) {
	t.Helper()
	counts := []int64{3, 5, 2, 6, 4, 3, 5, 4, 2, 6, 4, 5}
	in := make([]store.LotInput, 48)
	start := e.clock.Now().Add(-49 * time.Hour)
	for i := range in {
		in[i] = store.LotInput{Lot: fmt.Sprintf("L%03d", i), Time: start.Add(time.Duration(i) * time.Hour), Shift: []string{"early", "late", "night"}[(i/8)%3],
			Inspected: 200, Count: counts[i%len(counts)], Categories: map[string]int64{"scratch": counts[i%len(counts)]}}
	}
	if _, err := e.db.AddLots(t.Context(), "setup", e.proc.ID, in); err != nil {
		t.Fatal(err)
	}
}

// TestE2E drives the pages in a real browser: sign in, log a lot outside
// the limits, see it flagged on the chart, record its cause, see the
// status board change, freeze a limit set and upload a CSV file with an
// error.
func TestE2E(t *testing.T) {
	if testing.Short() && os.Getenv("CI") != "true" {
		t.Skip("browser test skipped in -short mode")
	}
	ctx := browser(t)
	e := newTestEnv(t)
	seedE2E(t, e)
	ts := httptest.NewServer(e.h)
	defer ts.Close()
	dir := screenshotDir(t)
	t.Log("screenshots in ", dir)
	id := fmt.Sprint(e.proc.ID)
	u := func(p string) string { return ts.URL + p }

	step(t, ctx, "sign in", chromedp.EmulateViewport(1280, 900),
		chromedp.Navigate(u("/")),
		chromedp.WaitVisible(chromedp.CSS(`input[name=name]`)),
		chromedp.SendKeys(chromedp.CSS(`input[name=name]`), "inspector1"),
		chromedp.SendKeys(chromedp.CSS(`input[name=password]`), testPassword),
		chromedp.Submit(chromedp.CSS(`input[name=password]`)),
		chromedp.WaitVisible(chromedp.CSS(`ul.board`)))
	before := text(t, ctx, `ul.board .verdict`)
	if !strings.Contains(before, "nothing needs attention") {
		t.Fatalf("status board before: %q, want nothing needing attention", before)
	}
	shoot(t, ctx, dir, "board")

	step(t, ctx, "open the lot form", chromedp.Navigate(u("/processes/"+id+"/log")), chromedp.WaitVisible(chromedp.CSS(`#f-lot`)))
	shoot(t, ctx, dir, "lot-form")
	step(t, ctx, "log a bad lot",
		chromedp.SendKeys(chromedp.CSS(`#f-lot`), "E2E-OUT"),
		chromedp.SendKeys(chromedp.CSS(`#f-inspected`), "200"),
		chromedp.SendKeys(chromedp.CSS(`#f-count`), "40"),
		chromedp.SendKeys(chromedp.CSS(`#f-cat0`), "40"),
		chromedp.Click(chromedp.CSS(`form.card-form button[type=submit]`)),
		chromedp.WaitVisible(chromedp.CSS(`#verdict`)))
	if v := text(t, ctx, `#verdict .big`); !strings.Contains(v, "Outside the control limits") {
		t.Fatalf("verdict after logging: %q", v)
	}

	step(t, ctx, "today's chart", chromedp.Navigate(u("/processes/"+id+"?period=7d")),
		chromedp.WaitVisible(chromedp.CSS(`#chart[data-chart-ready]`)))
	if row := text(t, ctx, `table.data tbody tr:first-child`); !strings.Contains(row, "E2E-OUT") || !strings.Contains(row, "outside limits") {
		t.Fatalf("chart table's newest row: %q", row)
	}
	// the chart drew the lot as an out-of-limits mark
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	marked, err := chromedp.Run(sctx, chromedp.Evaluate[bool](`(function(){var c=echarts.getInstanceByDom(document.getElementById('chart'));
var s=c.getOption().series.find(function(x){return x.name==='out of limits'});
return s.data.some(function(d){return d && d.name==='E2E-OUT' && d.value!=='-'});})()`))
	cancel()
	if err != nil || !marked {
		t.Fatalf("the chart does not mark E2E-OUT out of limits (err %v)", err)
	}
	shoot(t, ctx, dir, "chart")

	step(t, ctx, "record the cause", chromedp.Click(chromedp.CSS(`table.data tbody tr:first-child a`)),
		chromedp.WaitVisible(chromedp.CSS(`#c-cause`)),
		chromedp.SendKeys(chromedp.CSS(`#c-cause`), "Worn fixture clamp scratched the parts"),
		chromedp.SendKeys(chromedp.CSS(`#c-action`), "Clamp pad replaced"),
		chromedp.Click(chromedp.CSS(`#cause button[type=submit]`)),
		chromedp.WaitVisible(chromedp.CSS(`.cause-item`)))
	if c := text(t, ctx, `.cause-item`); !strings.Contains(c, "Worn fixture clamp") || !strings.Contains(c, "Open") {
		t.Fatalf("recorded cause: %q", c)
	}

	step(t, ctx, "board again", chromedp.Navigate(u("/")), chromedp.WaitVisible(chromedp.CSS(`ul.board`)))
	after := text(t, ctx, `ul.board li`)
	if !strings.Contains(after, "out of limits today") || !strings.Contains(after, "1 open") || !strings.Contains(after, "nothing needs attention") {
		t.Fatalf("status board after: %q", after)
	}

	// An engineer freezes a limit set from the baseline, leaving out the
	// bad lot with its reason.
	step(t, ctx, "sign out", chromedp.Click(chromedp.CSS(`header .who button`)), chromedp.WaitVisible(chromedp.CSS(`input[name=name]`)))
	step(t, ctx, "sign in as engineer",
		chromedp.SendKeys(chromedp.CSS(`input[name=name]`), "engineer1"),
		chromedp.SendKeys(chromedp.CSS(`input[name=password]`), testPassword),
		chromedp.Submit(chromedp.CSS(`input[name=password]`)),
		chromedp.WaitVisible(chromedp.CSS(`ul.board`)),
		chromedp.Navigate(u("/processes/"+id+"/limits")),
		chromedp.WaitVisible(chromedp.CSS(`#ex-E2E-OUT`)),
		chromedp.WaitVisible(chromedp.CSS(`#chart[data-chart-ready]`)),
		// the keyboard, as a user without a mouse would: focus the box, tick it with the space bar
		chromedp.Focus(chromedp.CSS(`#ex-E2E-OUT`)),
		chromedp.SendKeys(chromedp.CSS(`#ex-E2E-OUT`), " "),
		chromedp.SendKeys(chromedp.CSS(`#why-E2E-OUT`), "worn clamp, cause recorded"),
		chromedp.Submit(chromedp.CSS(`#why-E2E-OUT`)),
		// the recomputed page: its box is ticked in the markup itself
		chromedp.WaitVisible(chromedp.CSS(`input#ex-E2E-OUT[checked]`)))
	if sum := text(t, ctx, `section.summary`); !strings.Contains(sum, "1 left out") {
		t.Fatalf("trial limits after leaving the lot out: %q", sum)
	}
	shoot(t, ctx, dir, "limits")
	step(t, ctx, "freeze",
		chromedp.SendKeys(chromedp.CSS(`#l-reason`), "Stable two days after the clamp fix"),
		chromedp.Click(chromedp.CSS(`#l-reason`)),
		chromedp.Submit(chromedp.CSS(`#l-reason`)),
		chromedp.WaitVisible(chromedp.CSS(`p.notice`)))
	if n := text(t, ctx, `p.notice`); !strings.Contains(n, "Limit set 1 is frozen") {
		t.Fatalf("after freezing: %q", n)
	}
	sets, err := e.db.LimitSets(t.Context(), e.proc.ID)
	if err != nil || len(sets) != 1 || sets[0].Excluded["E2E-OUT"] == "" {
		t.Fatalf("stored limit sets %+v (err %v), want one with E2E-OUT left out", sets, err)
	}

	// A CSV file with a bad row: the problem names its line, nothing is
	// stored.
	csvPath := filepath.Join(t.TempDir(), "lots.csv")
	csvBody := "lot,inspected,defective\nU-1,200,3\nU-2,200,300\nU-3,200,4\n"
	if err := os.WriteFile(csvPath, []byte(csvBody), 0o644); err != nil {
		t.Fatal(err)
	}
	before48 := e.lotCount(t)
	step(t, ctx, "upload a CSV with an error", chromedp.Navigate(u("/upload?process="+id)),
		chromedp.WaitVisible(chromedp.CSS(`#u-file`)),
		chromedp.SetUploadFiles(chromedp.CSS(`#u-file`), []string{csvPath}),
		chromedp.Click(chromedp.CSS(`form.card-form button[type=submit]`)),
		chromedp.WaitVisible(chromedp.CSS(`#problems`)))
	if p := text(t, ctx, `#problems`); !strings.Contains(p, "line 3") || !strings.Contains(p, "defective") {
		t.Fatalf("upload problems: %q", p)
	}
	shoot(t, ctx, dir, "upload-problem")
	if n := e.lotCount(t); n != before48 {
		t.Fatalf("a rejected upload stored lots: %d, want %d", n, before48)
	}
	// The corrected file previews, then imports on confirmation.
	if err := os.WriteFile(csvPath, []byte(strings.Replace(csvBody, "300", "5", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	step(t, ctx, "upload the corrected CSV",
		chromedp.SetUploadFiles(chromedp.CSS(`#u-file`), []string{csvPath}),
		chromedp.Click(chromedp.CSS(`form.card-form button[type=submit]`)),
		chromedp.WaitVisible(chromedp.CSS(`section[aria-label=Preview] button`)))
	if n := e.lotCount(t); n != before48 {
		t.Fatalf("the preview stored lots: %d, want %d", n, before48)
	}
	step(t, ctx, "confirm the import", chromedp.Click(chromedp.CSS(`section[aria-label=Preview] button`)),
		chromedp.WaitVisible(chromedp.CSS(`p.notice`)))
	if n := e.lotCount(t); n != before48+3 {
		t.Fatalf("after the import: %d lots, want %d", n, before48+3)
	}
}

// TestScreensOfRunningServer photographs the pages of a running lotwatch
// (for example `lotwatch demo`) named by $LOTWATCH_SCREENS_URL, signed in
// as $LOTWATCH_SCREENS_USER (default admin, password demo-admin).
func TestScreensOfRunningServer(t *testing.T) {
	base := os.Getenv("LOTWATCH_SCREENS_URL")
	if base == "" {
		t.Skip("set LOTWATCH_SCREENS_URL to photograph a running server")
	}
	user := os.Getenv("LOTWATCH_SCREENS_USER")
	if user == "" {
		user = "admin"
	}
	ctx := browser(t)
	dir := screenshotDir(t)
	t.Log("screenshots in ", dir)
	step(t, ctx, "sign in", chromedp.EmulateViewport(1280, 900), chromedp.Navigate(base+"/signin"),
		chromedp.WaitVisible(chromedp.CSS(`input[name=name]`)),
		chromedp.SendKeys(chromedp.CSS(`input[name=name]`), user),
		chromedp.SendKeys(chromedp.CSS(`input[name=password]`), "demo-"+user),
		chromedp.Submit(chromedp.CSS(`input[name=password]`)),
		chromedp.WaitVisible(chromedp.CSS(`ul.board`)))
	shoot(t, ctx, dir, "demo-board")
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	links, err := chromedp.Run(sctx, chromedp.Evaluate[[]string](`Array.from(document.querySelectorAll('ul.board h2 a')).map(function(a){return a.getAttribute('href')})`))
	cancel()
	if err != nil {
		t.Fatal(err)
	}
	for i, l := range links {
		step(t, ctx, "chart "+l, chromedp.Navigate(base+l), chromedp.WaitVisible(chromedp.CSS(`#chart[data-chart-ready]`)))
		shoot(t, ctx, dir, fmt.Sprintf("demo-chart-%d", i))
	}
	for _, p := range []string{"/review", "/plan?process=1", "/admin/users", "/settings/processes", "/upload", "/log"} {
		step(t, ctx, p, chromedp.Navigate(base+p), chromedp.WaitVisible(chromedp.CSS(`main h1`)))
		shoot(t, ctx, dir, "demo"+strings.NewReplacer("/", "-", "?", "-", "=", "-").Replace(p))
	}
}

// TestE2ELargeChart opens the chart of a process with 10,000 lots in the
// browser: the page says that the series is thinned for drawing, and the
// chart starts.
func TestE2ELargeChart(t *testing.T) {
	if testing.Short() && os.Getenv("CI") != "true" {
		t.Skip("browser test skipped in -short mode")
	}
	ctx := browser(t)
	e := newTestEnv(t)
	e.addLots(t, 10000, func(i int) int64 { return int64(3+i%5) + int64(15*btoi(i%997 == 0)) })
	ts := httptest.NewServer(e.h)
	defer ts.Close()
	step(t, ctx, "sign in", chromedp.EmulateViewport(1280, 900),
		chromedp.Navigate(ts.URL+"/signin"),
		chromedp.SendKeys(chromedp.CSS(`input[name=name]`), "viewer1"),
		chromedp.SendKeys(chromedp.CSS(`input[name=password]`), testPassword),
		chromedp.Submit(chromedp.CSS(`input[name=password]`)),
		chromedp.WaitVisible(chromedp.CSS(`ul.board`)))
	t0 := time.Now()
	step(t, ctx, "the whole record", chromedp.Navigate(fmt.Sprintf("%s/processes/%d?period=all", ts.URL, e.proc.ID)),
		chromedp.WaitVisible(chromedp.CSS(`#chart[data-chart-ready]`)))
	t.Logf("chart of 10,000 lots loaded and drawn in %v", time.Since(t0))
	if n := text(t, ctx, `p.notice[role=note]`); !strings.Contains(n, "10,000 lots drawn as") {
		t.Fatalf("no thinning notice: %q", n)
	}
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	marked, err := chromedp.Run(sctx, chromedp.Evaluate[int](`(function(){var c=echarts.getInstanceByDom(document.getElementById('chart'));
return c.getOption().series.find(function(x){return x.name==='out of limits'}).data.filter(function(d){return d && d.value!=='-'}).length;})()`))
	if err != nil {
		t.Fatal(err)
	}
	if want := 10000/997 + 1; marked != want {
		t.Errorf("%d lots marked out of limits on the thinned chart, want all %d", marked, want)
	}
}

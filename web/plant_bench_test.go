package web

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"runtime"
	"strconv"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// plantEnv is a server on a plant of procs processes (besides the test
// environment's own) of 2,190 p-chart lots each, three a day for two
// years up to an hour before the clock, one in ten ending in a ×1.8 shift
// over its last four weeks; each process is in one of five areas. Each
// process's lots are stored in one batch (the bulk path of an import).
func plantEnv(b *testing.B, procs int) *testEnv {
	b.Helper()
	e := newTestEnv(b)
	ctx := context.Background()
	const perProcess = 2190
	rng := rand.New(rand.NewPCG(1, 2))
	end := e.clock.Now().Add(-time.Hour)
	start := end.Add(-perProcess * 8 * time.Hour)
	for i := range procs {
		p, err := e.db.AddProcess(ctx, "bench", store.Process{Name: fmt.Sprintf("line-%03d", i), Chart: spc.ChartP, K: 3, Rules: "we",
			TimeZone: "UTC", Area: fmt.Sprintf("Hall %c", 'A'+i%5)})
		if err != nil {
			b.Fatal(err)
		}
		in := make([]store.LotInput, perProcess)
		for j := range in {
			p0 := 0.02
			if i%10 == 0 && j >= perProcess-84 {
				p0 *= 1.8
			}
			n := int64(150 + rng.IntN(100))
			d := int64(0)
			for range n {
				if rng.Float64() < p0 {
					d++
				}
			}
			in[j] = store.LotInput{Lot: fmt.Sprintf("L%03d-%05d", i, j), Time: start.Add(time.Duration(j) * 8 * time.Hour),
				Shift: []string{"early", "late", "night"}[j%3], Inspected: n, Count: d}
		}
		if _, err := e.db.AddLots(ctx, "bench", p.ID, in); err != nil {
			b.Fatal(err)
		}
	}
	return e
}

// heapMB is the live heap after a collection, in MB.
func heapMB() float64 {
	runtime.GC()
	var m runtime.MemStats
	runtime.ReadMemStats(&m)
	return float64(m.HeapAlloc) / 1e6
}

// BenchmarkBoardPlant: the status board (table view), the attention list
// and the weekly review page at plant scale, 500 processes
// (LOTWATCH_BENCH_PROCESSES) of 2,190 lots (1.1 M lots). Reported: the
// first board (every chart judged: "cold"), the board and GET
// /api/v1/attention once the process summaries are kept ("warm"; the
// board also in processor time, which a machine shared with other work
// does not inflate), the review page of the last complete week with the
// summaries kept (warm) and as the first page a newly started server
// serves (cold), the live heap of the whole test process with the server
// warm, the lots its chart cache holds and the entries its summaries hold,
// and, as the baseline measured in the same run, the read of every lot of
// every process from the store; "ratio" is the warm board over that read,
// "review-ratio" and "cold-review-ratio" the reviews over it.
func BenchmarkBoardPlant(b *testing.B) {
	procs := 500
	if v := os.Getenv("LOTWATCH_BENCH_PROCESSES"); v != "" {
		var err error
		if procs, err = strconv.Atoi(v); err != nil || procs < 1 {
			b.Fatalf("LOTWATCH_BENCH_PROCESSES %q", v)
		}
	}
	t0 := time.Now()
	e := plantEnv(b, procs)
	build := time.Since(t0)
	ctx := context.Background()
	readAll := func() time.Duration {
		t0 := time.Now()
		all, err := e.db.Processes(ctx, false)
		if err != nil {
			b.Fatal(err)
		}
		for _, p := range all {
			if _, err := e.db.Lots(ctx, p.ID, time.Time{}, time.Time{}); err != nil {
				b.Fatal(err)
			}
		}
		return time.Since(t0)
	}
	base := readAll()
	before := heapMB()
	cookie := e.signIn(b, "viewer1", testPassword)
	board := func() string {
		rec := e.do(req{method: "GET", path: "/?view=table", cookie: cookie})
		if rec.Code != 200 {
			b.Fatalf("board: %d", rec.Code)
		}
		return rec.Body.String()
	}
	t0 = time.Now()
	page := board()
	cold := time.Since(t0)
	// The board must not say that nothing needs attention: one process in
	// ten ends in a shift nobody explained.
	if strings.Contains(page, "Nothing needs attention") || !strings.Contains(page, "need attention in") {
		b.Fatalf("the board does not lead with what needs attention")
	}
	b.ResetTimer()
	t0 = time.Now()
	cpu0 := cpuTime()
	for b.Loop() {
		board()
	}
	warm := time.Since(t0) / time.Duration(b.N)
	warmCPU := (cpuTime() - cpu0) / time.Duration(b.N)
	b.StopTimer()
	tok := e.tokens[store.RoleViewer]
	t0 = time.Now()
	rec := e.do(req{method: "GET", path: "/api/v1/attention", token: tok})
	list := time.Since(t0)
	if rec.Code != 200 {
		b.Fatalf("attention: %d", rec.Code)
	}
	need := decodeJSON[[]attentionJSON](b, rec)
	shifted := map[int64]bool{}
	for _, l := range need {
		if n, err := strconv.Atoi(strings.TrimPrefix(l.Process, "line-")); err == nil && n%10 == 0 {
			shifted[l.ProcessID] = true
		}
	}
	review := func() (time.Duration, string) {
		t0 := time.Now()
		rec := e.do(req{method: "GET", path: "/review", cookie: cookie})
		if rec.Code != 200 {
			b.Fatalf("review: %d", rec.Code)
		}
		return time.Since(t0), rec.Body.String()
	}
	review()
	warmReview, reviewPage := review()
	heap := heapMB()
	charts, lots := e.srv.judges.cachedLots()
	summaries, entries := e.srv.summaries.size()
	// A newly started server on the same database: its first page is the
	// review, which judges every record.
	srv, err := NewServer(Config{DB: e.db, Now: e.clock.Now, Logger: e.srv.log})
	if err != nil {
		b.Fatal(err)
	}
	e.srv, e.h = srv, srv.Handler()
	coldReview, _ := review()
	b.ReportMetric(float64(warm.Microseconds())/1e3, "ms/board")
	b.ReportMetric(float64(warmCPU.Microseconds())/1e3, "cpu-ms/board")
	b.ReportMetric(float64(cold.Milliseconds()), "ms/cold-board")
	b.ReportMetric(float64(list.Milliseconds()), "ms/attention")
	b.ReportMetric(float64(base.Milliseconds()), "ms/read-all")
	b.ReportMetric(float64(warm)/float64(base), "ratio")
	b.ReportMetric(float64(warmReview.Milliseconds()), "ms/review")
	b.ReportMetric(float64(coldReview.Milliseconds()), "ms/cold-review")
	b.ReportMetric(float64(warmReview)/float64(base), "review-ratio")
	b.ReportMetric(float64(coldReview)/float64(base), "cold-review-ratio")
	b.ReportMetric(float64(len(reviewPage))/1e6, "MB/review-page")
	b.ReportMetric(float64(summaries), "summaries")
	b.ReportMetric(float64(entries), "summary-entries")
	b.ReportMetric(heap, "MB/heap")
	b.ReportMetric(heap-before, "MB/server")
	b.ReportMetric(float64(lots), "cached-lots")
	b.ReportMetric(float64(charts), "cached-charts")
	b.ReportMetric(float64(len(need)), "lots-needing")
	b.ReportMetric(float64(len(shifted)), "shifted-procs-listed")
	b.ReportMetric(float64(len(page))/1e6, "MB/page")
	b.ReportMetric(build.Seconds(), "s/fixture")
}

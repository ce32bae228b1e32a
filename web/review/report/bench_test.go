package report

import (
	"bytes"
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/review"
)

// BenchmarkReviewPlant builds the weekly review of a plant: 500 processes
// (LOTWATCH_BENCH_PROCESSES) of 2,190 lots each, three a day for two
// years, one in ten ending in a ×1.8 shift over its last four weeks. It
// reports the time of Build, the size of the web page (the summary alone
// at this scale) and of the mailed HTML file, and, as the baseline
// measured in the same run, the time to read every lot of every process
// from the store; "ratio" is Build's time over the reading. Processor
// times (cpu-ms, all threads) are reported beside the wall times, which a
// machine shared with other work inflates.
func BenchmarkReviewPlant(b *testing.B) {
	procs := 500
	if v := os.Getenv("LOTWATCH_BENCH_PROCESSES"); v != "" {
		var err error
		if procs, err = strconv.Atoi(v); err != nil || procs < 1 {
			b.Fatalf("LOTWATCH_BENCH_PROCESSES %q", v)
		}
	}
	const perProcess = 2190
	ctx := context.Background()
	db, err := store.Open(filepath.Join(b.TempDir(), "plant.db"))
	if err != nil {
		b.Fatal(err)
	}
	defer db.Close()
	rng := rand.New(rand.NewPCG(1, 2))
	end := time.Date(2026, 11, 30, 0, 0, 0, 0, time.UTC) // Monday of 2026-W49
	start := end.Add(-perProcess * 8 * time.Hour)
	for i := range procs {
		p, err := db.AddProcess(ctx, "bench", store.Process{Name: fmt.Sprintf("line-%03d", i), Chart: spc.ChartP, K: 3, Rules: "we", TimeZone: "UTC"})
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
			in[j] = store.LotInput{Lot: fmt.Sprintf("L%03d-%05d", i, j), Time: start.Add(time.Duration(j) * 8 * time.Hour), Inspected: n, Count: d}
		}
		if _, err := db.AddLots(ctx, "bench", p.ID, in); err != nil {
			b.Fatal(err)
		}
	}
	opt := review.Options{Week: "2026-W48", Now: end}
	readAll := func() (time.Duration, time.Duration) {
		t0, c0 := time.Now(), cpuTime()
		all, err := db.Processes(ctx, false)
		if err != nil {
			b.Fatal(err)
		}
		for _, p := range all {
			if _, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{}); err != nil {
				b.Fatal(err)
			}
		}
		return time.Since(t0), cpuTime() - c0
	}
	base, baseCPU := readAll()
	b.ResetTimer()
	var r *review.Review
	t0, c0 := time.Now(), cpuTime()
	for b.Loop() {
		if r, err = review.Build(ctx, db, opt); err != nil {
			b.Fatal(err)
		}
	}
	per := time.Since(t0) / time.Duration(b.N)
	perCPU := (cpuTime() - c0) / time.Duration(b.N)
	b.StopTimer()
	page, err := HTMLView(r, View{MaxDetails: 12, DetailURL: func(pr *review.ProcessReview) string { return "/review?process=" + pr.Process.Name }})
	if err != nil {
		b.Fatal(err)
	}
	var doc bytes.Buffer
	if err := WriteHTML(&doc, r); err != nil {
		b.Fatal(err)
	}
	b.ReportMetric(float64(per.Milliseconds()), "ms/review")
	b.ReportMetric(float64(base.Milliseconds()), "ms/read-all")
	b.ReportMetric(float64(perCPU.Milliseconds()), "cpu-ms/review")
	b.ReportMetric(float64(baseCPU.Milliseconds()), "cpu-ms/read-all")
	b.ReportMetric(float64(per)/float64(base), "ratio")
	b.ReportMetric(float64(len(page))/1e6, "MB/page")
	b.ReportMetric(float64(doc.Len())/1e6, "MB/file")
	b.ReportMetric(float64(r.Chance.Stated), "changes")
}

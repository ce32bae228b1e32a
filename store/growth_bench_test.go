package store

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"testing"
	"time"

	"lotwatch/spc"
)

// growthSizes are the numbers of lots BenchmarkGrowth runs at: 1k, 10k
// and 100k, and 1M when LOTWATCH_BENCH_FULL=1.
func growthSizes() []int {
	s := []int{1_000, 10_000, 100_000}
	if os.Getenv("LOTWATCH_BENCH_FULL") == "1" {
		s = append(s, 1_000_000)
	}
	return s
}

var growthT0 = time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)

// growthCSV streams a lot file of n lots (a p chart with two categories;
// lot sizes vary from 150 to 249) without holding it in memory.
func growthCSV(n int) io.Reader {
	pr, pw := io.Pipe()
	go func() {
		w := bufio.NewWriterSize(pw, 64<<10)
		w.WriteString("lot,time,shift,inspected,defective,dent,scratch,inspector,note\n")
		var b []byte
		for i := range n {
			d := int64(i % 7)
			b = append(b[:0], 'G')
			b = strconv.AppendInt(b, int64(100000000+i), 10)
			b = append(b, ',')
			b = growthT0.Add(time.Duration(i)*time.Minute).AppendFormat(b, time.RFC3339)
			b = append(b, ',')
			b = append(b, [3]string{"early", "late", "night"}[i%3]...)
			b = append(b, ',')
			b = strconv.AppendInt(b, int64(150+i%100), 10)
			b = append(b, ',')
			b = strconv.AppendInt(b, d, 10)
			b = append(b, ',')
			b = strconv.AppendInt(b, d/2, 10)
			b = append(b, ',')
			b = strconv.AppendInt(b, d-d/2, 10)
			b = append(b, ",kim,\n"...)
			w.Write(b)
		}
		w.Flush()
		pw.Close()
	}()
	return pr
}

func growthDB(b *testing.B) (*DB, Process) {
	b.Helper()
	db, err := Open(filepath.Join(b.TempDir(), "growth.db"))
	if err != nil {
		b.Fatal(err)
	}
	p, err := db.AddProcess(context.Background(), "bench", Process{Name: "weld", Chart: spc.ChartP, Categories: []string{"dent", "scratch"}})
	if err != nil {
		b.Fatal(err)
	}
	return db, p
}

// BenchmarkGrowth measures how the cost of the three things a plant does
// with its record grows with the number of lots of one process: import a
// file of n lots (validated, one transaction), read the n lots back in
// time order (EachLot), and analyse the chart of the n lots (read plus
// spc.Analyze, p chart with the Western Electric rules). Each reports
// ns/lot; a flat ns/lot across sizes is linear growth. The import also
// reports its peak heap (MiB), which should not grow with n (the import
// streams).
func BenchmarkGrowth(b *testing.B) {
	ctx := context.Background()
	for _, n := range growthSizes() {
		b.Run(fmt.Sprintf("import/lots=%d", n), func(b *testing.B) {
			var total time.Duration
			var peak float64
			for b.Loop() {
				b.StopTimer()
				db, _ := growthDB(b)
				runtime.GC()
				stop := heapPeak() // bench_test.go
				b.StartTimer()
				t0 := time.Now()
				res, err := db.Import(ctx, "bench", growthCSV(n), ImportOptions{Process: "weld"})
				total += time.Since(t0)
				b.StopTimer()
				peak = max(peak, float64(stop())/(1<<20))
				if err != nil || res.Added != n {
					b.Fatalf("import: %+v %v", res, err)
				}
				db.Close()
				b.StartTimer()
			}
			b.ReportMetric(float64(total.Nanoseconds())/float64(n*b.N), "ns/lot")
			b.ReportMetric(peak, "peak-heap-MiB")
		})
	}
	for _, n := range growthSizes() {
		db, p := growthDB(b)
		if _, err := db.Import(ctx, "bench", growthCSV(n), ImportOptions{Process: "weld"}); err != nil {
			b.Fatal(err)
		}
		// Warm the page cache once, so that every pass reads alike.
		if err := db.EachLot(ctx, p.ID, time.Time{}, time.Time{}, func(Lot) error { return nil }); err != nil {
			b.Fatal(err)
		}
		b.Run(fmt.Sprintf("read/lots=%d", n), func(b *testing.B) {
			t0 := time.Now()
			for b.Loop() {
				got := 0
				if err := db.EachLot(ctx, p.ID, time.Time{}, time.Time{}, func(Lot) error { got++; return nil }); err != nil || got != n {
					b.Fatalf("read %d lots (%v), want %d", got, err, n)
				}
			}
			b.ReportMetric(float64(time.Since(t0).Nanoseconds())/float64(n*b.N), "ns/lot")
		})
		b.Run(fmt.Sprintf("chart/lots=%d", n), func(b *testing.B) {
			var analyse time.Duration
			t0 := time.Now()
			for b.Loop() {
				lots := make([]spc.Lot, 0, n)
				if err := db.EachLot(ctx, p.ID, time.Time{}, time.Time{}, func(l Lot) error {
					lots = append(lots, spc.Lot{Code: l.Lot, Inspected: l.Inspected, Count: l.Count})
					return nil
				}); err != nil {
					b.Fatal(err)
				}
				t1 := time.Now()
				a, err := spc.Analyze(lots, spc.Config{Chart: spc.ChartP, Rules: spc.RulesWE})
				analyse += time.Since(t1)
				if err != nil || len(a.Points) != n {
					b.Fatalf("analyze: %v", err)
				}
			}
			all := time.Since(t0)
			b.ReportMetric(float64(all.Nanoseconds())/float64(n*b.N), "ns/lot")
			b.ReportMetric(float64(analyse.Nanoseconds())/float64(n*b.N), "analyze-ns/lot")
		})
		db.Close()
	}
}

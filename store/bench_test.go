package store

import (
	"bufio"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"lotwatch/spc"
)

// benchLots is the size of the benchmarks: LOTWATCH_BENCH_LOTS, default
// 1,000,000.
func benchLots(b *testing.B) int {
	if s := os.Getenv("LOTWATCH_BENCH_LOTS"); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n <= 0 {
			b.Fatalf("LOTWATCH_BENCH_LOTS=%q: want a positive whole number", s)
		}
		return n
	}
	return 1_000_000
}

var benchT0 = time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)

// benchLot is lot i of the benchmark data (the same rows for every
// benchmark).
func benchLot(i int) LotInput {
	d := int64(i % 7)
	return LotInput{Lot: "L" + strconv.Itoa(100000000+i), Time: benchT0.Add(time.Duration(i) * time.Minute),
		Shift: [3]string{"early", "late", "night"}[i%3], Inspected: 200, Count: d,
		Categories: map[string]int64{"dent": d / 2, "scratch": d - d/2}, Inspector: "kim"}
}

// csvSource streams the CSV of n benchmark lots without holding it.
func csvSource(n int) io.Reader {
	pr, pw := io.Pipe()
	go func() {
		w := bufio.NewWriterSize(pw, 64<<10)
		w.WriteString("lot,time,shift,inspected,defective,dent,scratch,inspector,note\n")
		var buf []byte
		for i := 0; i < n; i++ {
			l := benchLot(i)
			buf = append(buf[:0], l.Lot...)
			buf = append(buf, ',')
			buf = l.Time.AppendFormat(buf, time.RFC3339)
			buf = append(buf, ',')
			buf = append(buf, l.Shift...)
			buf = append(buf, ',')
			buf = strconv.AppendInt(buf, l.Inspected, 10)
			buf = append(buf, ',')
			buf = strconv.AppendInt(buf, l.Count, 10)
			buf = append(buf, ',')
			buf = strconv.AppendInt(buf, l.Categories["dent"], 10)
			buf = append(buf, ',')
			buf = strconv.AppendInt(buf, l.Categories["scratch"], 10)
			buf = append(buf, ",kim,\n"...)
			w.Write(buf)
		}
		w.Flush()
		pw.Close()
	}()
	return pr
}

// heapPeak samples HeapInuse until stop is called and returns the maximum.
func heapPeak() (stop func() uint64) {
	var peak atomic.Uint64
	done := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		var ms runtime.MemStats
		t := time.NewTicker(20 * time.Millisecond)
		defer t.Stop()
		for {
			runtime.ReadMemStats(&ms)
			if ms.HeapInuse > peak.Load() {
				peak.Store(ms.HeapInuse)
			}
			select {
			case <-done:
				return
			case <-t.C:
			}
		}
	}()
	return func() uint64 { close(done); wg.Wait(); return peak.Load() }
}

func benchDB(b *testing.B) (*DB, Process) {
	b.Helper()
	db, err := Open(filepath.Join(b.TempDir(), "bench.db"))
	if err != nil {
		b.Fatal(err)
	}
	p, err := db.AddProcess(ctx, "bench", Process{Name: "weld", Chart: spc.ChartP, Categories: []string{"dent", "scratch"}})
	if err != nil {
		b.Fatal(err)
	}
	return db, p
}

// bareInsert puts n benchmark lots into the lots table through one
// prepared statement in one transaction, nothing else: the baseline.
func bareInsert(b *testing.B, db *DB, p Process, n int) {
	tx, err := db.w.Begin()
	if err != nil {
		b.Fatal(err)
	}
	st, err := tx.Prepare(`INSERT INTO lots (process_id, lot, time, shift, inspected, count, categories, inspector, note, revision, voided, recorded, recorded_by)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, 1, 0, ?, ?)`)
	if err != nil {
		b.Fatal(err)
	}
	now := time.Now().UnixNano()
	for i := 0; i < n; i++ {
		l := benchLot(i)
		if _, err := st.Exec(p.ID, l.Lot, l.Time.UnixNano(), l.Shift, l.Inspected, l.Count, encodeCategories(l.Categories), l.Inspector, l.Note, now, "bench"); err != nil {
			b.Fatal(err)
		}
	}
	st.Close()
	if err := tx.Commit(); err != nil {
		b.Fatal(err)
	}
}

// BenchmarkImportCSV imports CSV bytes into committed rows (with all the
// validation) and, in the same run, the same rows by bareInsert; it
// reports both rates, their ratio and the peak heap, for a tenth of the
// size and the full size (the heap should not grow with the lots).
func BenchmarkImportCSV(b *testing.B) {
	n := benchLots(b)
	for _, size := range []int{max(n/10, 1), n} {
		b.Run(fmt.Sprintf("lots=%d", size), func(b *testing.B) {
			var importNs, bareNs time.Duration
			var peak uint64
			for i := 0; i < b.N; i++ {
				b.StopTimer()
				db, _ := benchDB(b)
				runtime.GC()
				b.StartTimer()
				stop := heapPeak()
				t := time.Now()
				res, err := db.Import(ctx, "bench", csvSource(size), ImportOptions{Process: "weld"})
				importNs += time.Since(t)
				if pk := stop(); pk > peak {
					peak = pk
				}
				if err != nil || res.Added != size {
					b.Fatalf("import: %+v %v", res, err)
				}
				b.StopTimer()
				db.Close()
				db2, p2 := benchDB(b)
				t = time.Now()
				bareInsert(b, db2, p2, size)
				bareNs += time.Since(t)
				db2.Close()
				b.StartTimer()
			}
			imp := float64(size*b.N) / importNs.Seconds()
			bare := float64(size*b.N) / bareNs.Seconds()
			b.ReportMetric(imp, "lots/s")
			b.ReportMetric(bare, "bare-lots/s")
			b.ReportMetric(imp/bare, "import/bare")
			b.ReportMetric(float64(peak)/(1<<20), "peak-heap-MiB")
		})
	}
}

// BenchmarkBareInsert is the baseline alone: the benchmark rows through
// one prepared statement in one transaction.
func BenchmarkBareInsert(b *testing.B) {
	n := benchLots(b)
	var total time.Duration
	for i := 0; i < b.N; i++ {
		b.StopTimer()
		db, p := benchDB(b)
		b.StartTimer()
		t := time.Now()
		bareInsert(b, db, p, n)
		total += time.Since(t)
		b.StopTimer()
		db.Close()
		b.StartTimer()
	}
	b.ReportMetric(float64(n*b.N)/total.Seconds(), "lots/s")
}

// BenchmarkReadLots reads one process's lots in time order (EachLot) from
// a database holding them among another process's lots, and reports the
// rate beside the rate of a bare scan of the same rows (id and time only,
// through database/sql) measured in the same run: each pass reads both,
// so that a busy machine slows both alike. counts/bare is the same for
// LotCounts, the read of the charts, the board and the review.
func BenchmarkReadLots(b *testing.B) {
	n := benchLots(b)
	db, p := benchDB(b)
	defer db.Close()
	bareInsert(b, db, p, n)
	other, err := db.AddProcess(ctx, "bench", Process{Name: "other", Chart: spc.ChartP})
	if err != nil {
		b.Fatal(err)
	}
	bareInsert(b, db, other, n/10)
	// Warm up once so that every pass reads from the same (OS) cache.
	if err := db.EachLot(ctx, p.ID, time.Time{}, time.Time{}, func(Lot) error { return nil }); err != nil {
		b.Fatal(err)
	}
	bareScan := func() {
		rows, err := db.r.Query("SELECT id, time FROM lots WHERE process_id = ? ORDER BY time, id", p.ID)
		if err != nil {
			b.Fatal(err)
		}
		var id, tm int64
		k := 0
		for rows.Next() {
			rows.Scan(&id, &tm)
			k++
		}
		rows.Close()
		if k != n {
			b.Fatalf("bare scan read %d rows, want %d", k, n)
		}
	}
	bareScan()
	b.ResetTimer()
	var readNs, bareNs, countsNs time.Duration
	for i := 0; i < b.N; i++ {
		got := 0
		t := time.Now()
		if err := db.EachLot(ctx, p.ID, time.Time{}, time.Time{}, func(l Lot) error { got++; return nil }); err != nil {
			b.Fatal(err)
		}
		readNs += time.Since(t)
		if got != n {
			b.Fatalf("read %d lots, want %d", got, n)
		}
		b.StopTimer()
		t = time.Now()
		bareScan()
		bareNs += time.Since(t)
		t = time.Now()
		if counted, err := db.LotCounts(ctx, p.ID, time.Time{}, time.Time{}); err != nil || len(counted) != n {
			b.Fatalf("LotCounts: %d lots, %v", len(counted), err)
		}
		countsNs += time.Since(t)
		b.StartTimer()
	}
	rate := float64(n*b.N) / readNs.Seconds()
	bare := float64(n*b.N) / bareNs.Seconds()
	counts := float64(n*b.N) / countsNs.Seconds()
	b.ReportMetric(rate, "lots/s")
	b.ReportMetric(bare, "bare-scan-lots/s")
	b.ReportMetric(rate/bare, "read/bare")
	b.ReportMetric(counts/bare, "counts/bare")
}

// BenchmarkVerifyAudit checks the audit trail and every data row of a
// database holding the benchmark lots, imported in one file and added
// one by one (a tenth of them, as stations post them), and reports the
// rate in lots checked per second beside the rate of a bare scan of the
// lots table (all columns, through database/sql) in the same run.
func BenchmarkVerifyAudit(b *testing.B) {
	n := benchLots(b)
	db, p := benchDB(b)
	defer db.Close()
	if _, err := db.Import(ctx, "bench", csvSource(n), ImportOptions{Process: "weld"}); err != nil {
		b.Fatal(err)
	}
	single := max(n/10, 1)
	var wg sync.WaitGroup
	for w := range 8 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := w; i < single; i += 8 {
				l := benchLot(n + i)
				if _, err := db.AddLots(ctx, "station", p.ID, []LotInput{l}); err != nil {
					b.Error(err)
					return
				}
			}
		}()
	}
	wg.Wait()
	total := n + single
	b.ResetTimer()
	var verifyNs, bareNs time.Duration
	for i := 0; i < b.N; i++ {
		t := time.Now()
		chk, err := db.VerifyAudit(ctx)
		verifyNs += time.Since(t)
		if err != nil || !chk.OK {
			b.Fatalf("verify: %+v %v", chk, err)
		}
		b.StopTimer()
		t = time.Now()
		rows, err := db.r.Query("SELECT " + lotCols + " FROM lots ORDER BY id")
		if err != nil {
			b.Fatal(err)
		}
		var l Lot
		k := 0
		for rows.Next() {
			if err := scanLot(rows, &l, time.UTC); err != nil {
				b.Fatal(err)
			}
			k++
		}
		rows.Close()
		bareNs += time.Since(t)
		if k != total {
			b.Fatalf("scanned %d lots, want %d", k, total)
		}
		b.StartTimer()
	}
	b.ReportMetric(float64(total*b.N)/verifyNs.Seconds(), "lots/s")
	b.ReportMetric(float64(total*b.N)/bareNs.Seconds(), "bare-scan-lots/s")
	b.ReportMetric(bareNs.Seconds()/verifyNs.Seconds(), "verify/bare")
}

package web

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"slices"
	"sync"
	"testing"
	"time"

	"lotwatch/store"
)

// benchLots is the size of the process the chart benchmarks draw.
const benchLots = 10000

func benchEnv(b *testing.B, lots int) *testEnv {
	b.Helper()
	e := newTestEnv(b)
	// A stable process with an occasional bad lot.
	e.addLots(b, lots, func(i int) int64 { return int64(3+i%5) + int64(15*btoi(i%997 == 0)) })
	return e
}

// BenchmarkChartJSON: GET /api/v1/processes/{id}/chart for 10,000 lots.
func BenchmarkChartJSON(b *testing.B) {
	e := benchEnv(b, benchLots)
	path := fmt.Sprintf("/api/v1/processes/%d/chart", e.proc.ID)
	tok := e.tokens[store.RoleViewer]
	b.ResetTimer()
	start := time.Now()
	for b.Loop() {
		rec := e.do(req{method: "GET", path: path, token: tok})
		if rec.Code != 200 {
			b.Fatalf("status %d", rec.Code)
		}
	}
	b.ReportMetric(float64(time.Since(start).Milliseconds())/float64(b.N), "ms/req")
}

// BenchmarkChartPage: the chart page (go-echarts options embedded) for
// 10,000 lots over the whole record, where the series is thinned for
// drawing, and the same page pooled by day. Beside it, the bare analysis
// of the process (loading and judging the lots) is timed in the same run;
// "ratio" is the page's time over it.
func BenchmarkChartPage(b *testing.B) {
	e := benchEnv(b, benchLots)
	base := func() time.Duration {
		t0 := time.Now()
		const n = 5
		for range n {
			if _, err := e.srv.analyzeProcess(context.Background(), e.proc); err != nil {
				b.Fatal(err)
			}
		}
		return time.Since(t0) / n
	}()
	c := e.signIn(b, "viewer1", testPassword)
	for _, q := range []string{"period=all", "period=all&by=day", "period=30d"} {
		b.Run(q, func(b *testing.B) {
			path := fmt.Sprintf("/processes/%d?%s", e.proc.ID, q)
			start := time.Now()
			var size int
			for b.Loop() {
				rec := e.do(req{method: "GET", path: path, cookie: c})
				if rec.Code != 200 {
					b.Fatalf("status %d", rec.Code)
				}
				size = rec.Body.Len()
			}
			per := time.Since(start) / time.Duration(b.N)
			b.ReportMetric(float64(per.Microseconds())/1000, "ms/req")
			b.ReportMetric(float64(base.Microseconds())/1000, "analysis-ms")
			b.ReportMetric(float64(per)/float64(base), "ratio")
			b.ReportMetric(float64(size)/1024, "KiB/page")
		})
	}
}

// BenchmarkAPIPostLots: 32 concurrent inspection stations post single
// lots over loopback to a real server, to a process holding 200 lots and
// to one holding 10,000 (each verdict is judged on the whole record);
// every acknowledged lot must be stored and no request may fail. Beside
// it, the store's own durable single-lot insert rate (AddLots with one
// lot, serially) is measured in the same run; "ratio" is the API
// throughput over that rate.
func BenchmarkAPIPostLots(b *testing.B) {
	for _, size := range []int{200, benchLots} {
		b.Run(fmt.Sprintf("lots=%d", size), func(b *testing.B) { benchAPIPostLots(b, size) })
	}
}

func benchAPIPostLots(b *testing.B, size int) {
	const (
		clients   = 32
		perClient = 25
		serial    = 200
	)
	for b.Loop() {
		b.StopTimer()
		// Baseline: the store alone.
		base := newTestEnv(b)
		t0 := time.Now()
		for i := range serial {
			_, err := base.db.AddLots(context.Background(), "bench", base.proc.ID, []store.LotInput{{Lot: fmt.Sprintf("S%05d", i), Inspected: 200, Count: 3}})
			if err != nil {
				b.Fatal(err)
			}
		}
		storeRate := serial / time.Since(t0).Seconds()

		e := benchEnv(b, size)
		ts := httptest.NewServer(e.h)
		client := ts.Client()
		client.Transport.(*http.Transport).MaxIdleConnsPerHost = clients
		url := ts.URL + lotsPath(e)
		tok := e.tokens[store.RoleInspector]
		var (
			mu       sync.Mutex
			lat      []time.Duration
			errs     []error
			acked    []string
			wg       sync.WaitGroup
			startAll = make(chan struct{})
		)
		for c := range clients {
			wg.Add(1)
			go func() {
				defer wg.Done()
				<-startAll
				for k := range perClient {
					code := fmt.Sprintf("W%02d-%04d", c, k)
					body := fmt.Sprintf(`{"lot":%q,"inspected":200,"defective":%d,"shift":"A"}`, code, 2+k%5)
					r, _ := http.NewRequest("POST", url, bytes.NewReader([]byte(body)))
					r.Header.Set("Authorization", "Bearer "+tok)
					r.Header.Set("Content-Type", "application/json")
					t := time.Now()
					res, err := client.Do(r)
					d := time.Since(t)
					if err == nil {
						io.Copy(io.Discard, res.Body)
						res.Body.Close()
						if res.StatusCode != http.StatusCreated {
							err = fmt.Errorf("lot %s: status %d", code, res.StatusCode)
						}
					}
					mu.Lock()
					if err != nil {
						errs = append(errs, err)
					} else {
						lat = append(lat, d)
						acked = append(acked, code)
					}
					mu.Unlock()
				}
			}()
		}
		b.StartTimer()
		t1 := time.Now()
		close(startAll)
		wg.Wait()
		elapsed := time.Since(t1)
		b.StopTimer()
		ts.Close()
		if len(errs) > 0 {
			b.Fatalf("%d requests failed, first: %v", len(errs), errs[0])
		}
		stored, err := e.db.Lots(context.Background(), e.proc.ID, time.Time{}, time.Time{})
		if err != nil {
			b.Fatal(err)
		}
		have := map[string]bool{}
		for _, l := range stored {
			have[l.Lot] = true
		}
		for _, code := range acked {
			if !have[code] {
				b.Fatalf("acknowledged lot %s is not stored", code)
			}
		}
		slices.Sort(lat)
		p99 := lat[(len(lat)*99+99)/100-1]
		rate := float64(len(acked)) / elapsed.Seconds()
		b.ReportMetric(rate, "lots/s")
		b.ReportMetric(float64(p99.Microseconds())/1000, "p99-ms")
		b.ReportMetric(storeRate, "store-lots/s")
		b.ReportMetric(rate/storeRate, "ratio")
		b.ReportMetric(float64(len(errs)), "errors")
		b.StartTimer()
	}
}

// largeLots is the size of the record BenchmarkChartPageLarge draws: a
// lot every 30 minutes for about five and a half years.
const largeLots = 100000

// BenchmarkChartPageLarge measures the chart page of a large record as a
// user meets it: the whole record of 100,000 lots cold (no judged chart
// cached, so the lots are read and judged for the request), and the last
// 30 days of it, 1,440 lots, warm (the judged chart cached). Each lot has
// a shift and category counts. Beside them, in the same run, the bare
// read of the lots (store.Lots) and the bare analysis (read and judge);
// "ratio" is the page's time over the bare read. Beside the time a
// request took (ms/req), the processor time the whole process used
// meanwhile (cpu-ms/req, garbage collection included), which a machine
// shared with other work inflates less.
func BenchmarkChartPageLarge(b *testing.B) {
	e := newTestEnv(b)
	ctx := context.Background()
	now := e.clock.Now()
	in := make([]store.LotInput, 0, 10000)
	for i := range largeLots {
		c := int64(3+i%5) + int64(15*btoi(i%997 == 0))
		in = append(in, store.LotInput{Lot: lotCode(i), Time: now.Add(-time.Duration(largeLots-i)*30*time.Minute + 15*time.Minute),
			Shift: []string{"early", "late", "night"}[(i/16)%3], Inspected: 200, Count: c,
			Categories: map[string]int64{"scratch": c / 2, "dent": c - c/2}, Inspector: fmt.Sprintf("badge %d", i%7)})
		if len(in) == cap(in) {
			if _, err := e.db.AddLots(ctx, "setup", e.proc.ID, in); err != nil {
				b.Fatal(err)
			}
			in = in[:0]
		}
	}
	timed := func(f func()) time.Duration {
		const n = 3
		t0 := time.Now()
		for range n {
			f()
		}
		return time.Since(t0) / n
	}
	read := timed(func() {
		if _, err := e.db.LotCounts(ctx, e.proc.ID, time.Time{}, time.Time{}); err != nil {
			b.Fatal(err)
		}
	})
	analysis := timed(func() {
		if _, err := e.srv.analyzeProcess(ctx, e.proc); err != nil {
			b.Fatal(err)
		}
	})
	c := e.signIn(b, "viewer1", testPassword)
	for _, run := range []struct {
		name, query string
		cold        bool
	}{{"all-cold", "period=all", true}, {"30d-warm", "period=30d", false}} {
		b.Run(run.name, func(b *testing.B) {
			path := fmt.Sprintf("/processes/%d?%s", e.proc.ID, run.query)
			if rec := e.do(req{method: "GET", path: path, cookie: c}); rec.Code != 200 {
				b.Fatalf("status %d", rec.Code)
			}
			var size int
			var total, cpu time.Duration
			for b.Loop() {
				if run.cold {
					b.StopTimer()
					e.srv.judges.mu.Lock()
					e.srv.judges.cache = nil
					e.srv.judges.mu.Unlock()
					b.StartTimer()
				}
				t0, c0 := time.Now(), cpuTime()
				rec := e.do(req{method: "GET", path: path, cookie: c})
				total += time.Since(t0)
				cpu += cpuTime() - c0
				if rec.Code != 200 {
					b.Fatalf("status %d", rec.Code)
				}
				size = rec.Body.Len()
			}
			per := total / time.Duration(b.N)
			b.ReportMetric(float64(per.Microseconds())/1000, "ms/req")
			b.ReportMetric(float64((cpu/time.Duration(b.N)).Microseconds())/1000, "cpu-ms/req")
			b.ReportMetric(float64(size)/1e6, "MB/page")
			b.ReportMetric(float64(read.Microseconds())/1000, "read-ms")
			b.ReportMetric(float64(analysis.Microseconds())/1000, "analysis-ms")
			b.ReportMetric(float64(per)/float64(read), "ratio")
		})
	}
}

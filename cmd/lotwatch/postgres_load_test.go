package main

import (
	"context"
	"database/sql"
	"fmt"
	"io"
	"lotwatch/store/storetest"
	"net/http"
	"os"
	"os/exec"
	"sort"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// BenchmarkPostgresLoad: two `lotwatch serve` on one PostgreSQL database,
// 16 stations posting single lots to each for a bounded time (5 s; 30 s
// with LOTWATCH_BENCH_FULL). Errors and lost lots must be 0. Reported
// beside the same-run baseline: the same number of connections inserting
// the same rows straight into a table shaped like lots, one transaction
// per lot (the same durability: each committed before the next), with
// pgx. lots/s of the servers ÷ lots/s of the bare loop is the ratio
// (goal ≥ 0.8); p99 is of one post as a station sees it.
func BenchmarkPostgresLoad(b *testing.B) {
	pg := storetest.PostgresDatabase(b)
	bin := buildLotwatch(b)
	token := stationToken(b, bin, pg, "load-test-pass\n", [][]string{
		{"process", "add", "--db", pg, "--name", "weld", "--as", "t"},
		{"user", "add", "--db", pg, "--name", "station", "--role", "inspector", "--as", "t"},
	})
	var bases []string
	for range 2 {
		addr := freeAddr(b)
		srv := exec.Command(bin, "serve", "--db", pg, "--addr", addr)
		if err := srv.Start(); err != nil {
			b.Fatal(err)
		}
		defer func() { srv.Process.Signal(syscall.SIGTERM); srv.Wait() }()
		waitHealthy(b, "http://"+addr, srv)
		bases = append(bases, "http://"+addr)
	}
	run := 5 * time.Second
	if os.Getenv("LOTWATCH_BENCH_FULL") != "" {
		run = 30 * time.Second
	}
	const stations = 16
	b.ResetTimer()
	for range b.N {
		var (
			mu     sync.Mutex
			lat    []time.Duration
			acked  []string
			errs   int
			wg     sync.WaitGroup
			client = &http.Client{Transport: &http.Transport{MaxIdleConnsPerHost: 64}}
		)
		start, cpu0 := time.Now(), machineCPU(b)
		for i, base := range bases {
			for s := range stations {
				wg.Add(1)
				go func() {
					defer wg.Done()
					for k := 0; time.Since(start) < run; k++ {
						code := fmt.Sprintf("I%d-S%02d-%06d", i, s, k)
						body := fmt.Sprintf(`{"lot":%q,"inspected":50,"defective":1,"inspector":"badge %d"}`, code, s)
						req, _ := http.NewRequest("POST", base+"/api/v1/processes/1/lots", strings.NewReader(body))
						req.Header.Set("Authorization", "Bearer "+token)
						req.Header.Set("Content-Type", "application/json")
						t0 := time.Now()
						res, err := client.Do(req)
						d := time.Since(t0)
						ok := err == nil && res.StatusCode == http.StatusCreated
						if err == nil {
							io.Copy(io.Discard, res.Body)
							res.Body.Close()
						}
						mu.Lock()
						if ok {
							lat = append(lat, d)
							acked = append(acked, code)
						} else {
							errs++
						}
						mu.Unlock()
					}
				}()
			}
		}
		wg.Wait()
		served := float64(len(acked)) / time.Since(start).Seconds()
		servedCPU := (machineCPU(b) - cpu0).Seconds() * 1000 / float64(len(acked))
		cpu0 = machineCPU(b)
		bare, bareN, err := bareInserts(pg, 2*stations, run)
		if err != nil {
			b.Fatal(err)
		}
		bareCPU := (machineCPU(b) - cpu0).Seconds() * 1000 / float64(bareN)
		sort.Slice(lat, func(i, j int) bool { return lat[i] < lat[j] })
		p99 := lat[len(lat)*99/100]
		_, out := lotwatchCmd(b, bin, "", "export", "--db", pg, "--process", "weld")
		lost := 0
		for _, c := range acked {
			if !strings.Contains(out, c+",") {
				lost++
			}
		}
		if errs > 0 || lost > 0 {
			b.Errorf("%d errors, %d acknowledged lots lost", errs, lost)
		}
		b.ReportMetric(served, "lots/s")
		b.ReportMetric(bare, "bare-lots/s")
		b.ReportMetric(served/bare, "ratio")
		b.ReportMetric(float64(p99.Microseconds())/1000, "p99-ms")
		b.ReportMetric(servedCPU, "cpu-ms/lot")
		b.ReportMetric(bareCPU, "bare-cpu-ms/lot")
		b.Logf("2 servers × %d stations, %s: %d lots (%.0f/s), bare pgx loop %.0f/s, ratio %.2f, post p50 %s p99 %s, %d errors, %d lost",
			stations, run, len(acked), served, bare, served/bare, lat[len(lat)/2].Round(time.Millisecond), p99.Round(time.Millisecond), errs, lost)
		b.Logf("machine CPU a lot (all processes: stations, servers, PostgreSQL): %.2f ms posted, %.2f ms in the bare loop (%.1f×)",
			servedCPU, bareCPU, servedCPU/bareCPU)
	}
}

// bareInserts inserts lots into a table shaped like lots from conns
// connections for d, one transaction per lot, and returns lots/s and the
// lots inserted.
func bareInserts(url string, conns int, d time.Duration) (float64, int64, error) {
	db, err := sql.Open("pgx", url)
	if err != nil {
		return 0, 0, err
	}
	defer db.Close()
	db.SetMaxOpenConns(conns)
	ctx := context.Background()
	if _, err := db.ExecContext(ctx, "DROP TABLE IF EXISTS bare_lots; CREATE TABLE bare_lots (LIKE lots INCLUDING ALL)"); err != nil {
		return 0, 0, err
	}
	defer db.ExecContext(ctx, "DROP TABLE bare_lots")
	var n int64
	var mu sync.Mutex
	var first error
	var wg sync.WaitGroup
	start := time.Now()
	for c := range conns {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := 0; time.Since(start) < d; k++ {
				_, err := db.ExecContext(ctx, `INSERT INTO bare_lots (id, process_id, lot, time, shift, inspected, count, categories, inspector, note, revision, voided, recorded, recorded_by)
					VALUES ($1, 1, $2, $3, '', 50, 1, '', $4, '', 1, 0, $3, 'station')`, int64(c)<<32|int64(k), fmt.Sprintf("B-%02d-%06d", c, k), time.Now().UnixNano(), fmt.Sprintf("badge %d", c))
				mu.Lock()
				if err != nil && first == nil {
					first = err
				}
				if err == nil {
					n++
				}
				mu.Unlock()
			}
		}()
	}
	wg.Wait()
	return float64(n) / time.Since(start).Seconds(), n, first
}

// machineCPU is the processor time the whole machine has spent busy
// since boot (/proc/stat: every state but idle and waiting for the
// disk), so that a phase's difference counts the stations, the servers
// and PostgreSQL alike.
func machineCPU(b *testing.B) time.Duration {
	b.Helper()
	stat, err := os.ReadFile("/proc/stat")
	if err != nil {
		b.Skipf("no /proc/stat: %v", err)
	}
	line, _, _ := strings.Cut(string(stat), "\n")
	fields := strings.Fields(line) // cpu user nice system idle iowait irq softirq steal …
	var busy int64
	for i, f := range fields[1:] {
		if i == 3 || i == 4 || i >= 8 { // idle, iowait; guest time is in user already
			continue
		}
		n, err := strconv.ParseInt(f, 10, 64)
		if err != nil {
			b.Fatalf("/proc/stat: %q", line)
		}
		busy += n
	}
	return time.Duration(busy) * time.Second / 100 // USER_HZ, 100 on Linux
}

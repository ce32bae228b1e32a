package web

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"lotwatch/store"
)

// loadConfig is the shape of a load run: posting clients, the posts each
// sends, chart readers and the lots stored beforehand.
type loadConfig struct {
	posters, perPoster, readers, preload int
	setup                                func(e *testEnv) // run on the server's store before the load, when set
}

// loadPosts is the posts per client: LOTWATCH_LOAD_POSTS, default 20.
func loadPosts(t testing.TB) int {
	if s := os.Getenv("LOTWATCH_LOAD_POSTS"); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n <= 0 {
			t.Fatalf("LOTWATCH_LOAD_POSTS=%q: want a positive whole number", s)
		}
		return n
	}
	return 20
}

// loadResult is what a load run measured.
type loadResult struct {
	elapsed          time.Duration
	postLat, readLat []time.Duration
	errs             []error
	acked, stored    int
	lost             []string // acknowledged but not stored
}

func (r loadResult) postRate() float64 { return float64(len(r.postLat)) / r.elapsed.Seconds() }
func (r loadResult) readRate() float64 { return float64(len(r.readLat)) / r.elapsed.Seconds() }

// quantile is the q-quantile of sorted durations (nearest rank).
func quantile(d []time.Duration, q float64) time.Duration {
	if len(d) == 0 {
		return 0
	}
	i := int(q*float64(len(d))+0.999999) - 1
	return d[max(0, min(i, len(d)-1))]
}

// runLoad drives a real server on loopback: posters send single lots
// with Bearer tokens while readers fetch the chart JSON, until every
// poster is done. Each reader stops after at most 10 × perPoster charts,
// so that the run is bounded in count as well as time (30 s per request).
func runLoad(t testing.TB, cfg loadConfig) loadResult {
	e := newTestEnv(t)
	if cfg.preload > 0 {
		e.addLots(t, cfg.preload, func(i int) int64 { return int64(2 + i%5) })
	}
	if cfg.setup != nil {
		cfg.setup(e)
	}
	ts := httptest.NewServer(e.h)
	defer ts.Close()
	tr := &http.Transport{MaxIdleConnsPerHost: cfg.posters + cfg.readers, MaxConnsPerHost: cfg.posters + cfg.readers}
	defer tr.CloseIdleConnections()
	client := &http.Client{Transport: tr, Timeout: 30 * time.Second}
	postURL := ts.URL + lotsPath(e)
	chartURL := fmt.Sprintf("%s/api/v1/processes/%d/chart", ts.URL, e.proc.ID)
	var (
		mu      sync.Mutex
		res     loadResult
		acked   []string
		posters sync.WaitGroup
		readers sync.WaitGroup
		start   = make(chan struct{})
		done    = make(chan struct{})
	)
	fail := func(err error) { mu.Lock(); res.errs = append(res.errs, err); mu.Unlock() }
	do := func(method, url, token, body string) (time.Duration, int, error) {
		var rd io.Reader
		if body != "" {
			rd = strings.NewReader(body)
		}
		req, err := http.NewRequest(method, url, rd)
		if err != nil {
			return 0, 0, err
		}
		req.Header.Set("Authorization", "Bearer "+token)
		if body != "" {
			req.Header.Set("Content-Type", "application/json")
		}
		t0 := time.Now()
		r, err := client.Do(req)
		if err != nil {
			return 0, 0, err
		}
		_, err = io.Copy(io.Discard, r.Body)
		r.Body.Close()
		return time.Since(t0), r.StatusCode, err
	}
	for c := range cfg.posters {
		posters.Add(1)
		go func() {
			defer posters.Done()
			<-start
			for k := range cfg.perPoster {
				code := fmt.Sprintf("LD%02d-%05d", c, k)
				body := fmt.Sprintf(`{"lot":%q,"inspected":200,"defective":%d,"shift":"B","inspector":"station %d"}`, code, (c+k)%6, c)
				d, status, err := do("POST", postURL, e.tokens[store.RoleInspector], body)
				if err == nil && status != http.StatusCreated {
					err = fmt.Errorf("post %s: status %d", code, status)
				}
				if err != nil {
					fail(err)
					continue
				}
				mu.Lock()
				res.postLat = append(res.postLat, d)
				acked = append(acked, code)
				mu.Unlock()
			}
		}()
	}
	for range cfg.readers {
		readers.Add(1)
		go func() {
			defer readers.Done()
			<-start
			for range 10 * cfg.perPoster {
				select {
				case <-done:
					return
				default:
				}
				d, status, err := do("GET", chartURL, e.tokens[store.RoleViewer], "")
				if err == nil && status != http.StatusOK {
					err = fmt.Errorf("chart: status %d", status)
				}
				if err != nil {
					fail(err)
					continue
				}
				mu.Lock()
				res.readLat = append(res.readLat, d)
				mu.Unlock()
			}
		}()
	}
	t0 := time.Now()
	close(start)
	posters.Wait()
	res.elapsed = time.Since(t0)
	close(done)
	readers.Wait()
	lots, err := e.db.Lots(context.Background(), e.proc.ID, time.Time{}, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	have := make(map[string]bool, len(lots))
	for _, l := range lots {
		have[l.Lot] = true
	}
	res.acked, res.stored = len(acked), len(lots)-cfg.preload
	for _, code := range acked {
		if !have[code] {
			res.lost = append(res.lost, code)
		}
	}
	slices.Sort(res.postLat)
	slices.Sort(res.readLat)
	return res
}

// TestLoad: 32 stations post lots while 8 screens read the chart, over
// loopback against a real store. No request may fail and every
// acknowledged lot must be stored; the figures are logged (they are not
// asserted: timing is measured by BenchmarkLoad).
func TestLoad(t *testing.T) {
	cfg := loadConfig{posters: 32, perPoster: loadPosts(t), readers: 8, preload: 2000}
	r := runLoad(t, cfg)
	for i, err := range r.errs {
		if i == 5 {
			t.Errorf("… %d errors in all", len(r.errs))
			break
		}
		t.Error(err)
	}
	if len(r.lost) > 0 {
		t.Errorf("%d acknowledged lots are not stored, e.g. %s", len(r.lost), r.lost[0])
	}
	if want := cfg.posters * cfg.perPoster; r.acked != want || r.stored != want {
		t.Errorf("%d posts acknowledged and %d lots stored, want %d", r.acked, r.stored, want)
	}
	t.Logf("%d×%d posts and %d chart readers in %v: %.0f posts/s (p50 %v, p99 %v), %.0f charts/s (p50 %v, p99 %v), %d errors, %d lost",
		cfg.posters, cfg.perPoster, cfg.readers, r.elapsed.Round(time.Millisecond), r.postRate(),
		quantile(r.postLat, 0.5).Round(time.Microsecond), quantile(r.postLat, 0.99).Round(time.Microsecond),
		r.readRate(), quantile(r.readLat, 0.5).Round(time.Microsecond), quantile(r.readLat, 0.99).Round(time.Microsecond),
		len(r.errs), len(r.lost))
}

// BenchmarkLoad is TestLoad as a benchmark: posts/s, their p50 and p99,
// charts/s and their p99, errors and lots lost (both must be 0), and the
// post rate over the store's own serial single-lot insert rate measured
// in the same run ("x_store").
func BenchmarkLoad(b *testing.B) {
	cfg := loadConfig{posters: 32, perPoster: loadPosts(b), readers: 8, preload: 2000}
	for b.Loop() {
		b.StopTimer()
		base := newTestEnv(b)
		const serial = 200
		t0 := time.Now()
		for i := range serial {
			if _, err := base.db.AddLots(context.Background(), "bench", base.proc.ID, []store.LotInput{{Lot: fmt.Sprintf("S%05d", i), Inspected: 200, Count: 3}}); err != nil {
				b.Fatal(err)
			}
		}
		storeRate := serial / time.Since(t0).Seconds()
		b.StartTimer()
		r := runLoad(b, cfg)
		b.StopTimer()
		if len(r.errs) > 0 || len(r.lost) > 0 {
			b.Fatalf("%d errors (first: %v), %d lots lost", len(r.errs), r.errs, len(r.lost))
		}
		b.ReportMetric(r.postRate(), "posts/s")
		b.ReportMetric(float64(quantile(r.postLat, 0.5).Microseconds())/1000, "post-p50-ms")
		b.ReportMetric(float64(quantile(r.postLat, 0.99).Microseconds())/1000, "post-p99-ms")
		b.ReportMetric(r.readRate(), "charts/s")
		b.ReportMetric(float64(quantile(r.readLat, 0.99).Microseconds())/1000, "chart-p99-ms")
		b.ReportMetric(float64(len(r.errs)), "errors")
		b.ReportMetric(float64(len(r.lost)), "lost")
		b.ReportMetric(r.postRate()/storeRate, "x_store")
		b.StartTimer()
	}
}

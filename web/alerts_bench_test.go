package web

import (
	"context"
	"net/http"
	"net/http/httptest"
	"sync/atomic"
	"testing"

	"lotwatch/store"
)

// BenchmarkAlertLoad measures what alerting adds to the API's posting
// latency: the load of BenchmarkLoad (32 stations posting, 8 chart
// readers) run twice in the same benchmark, first without alert rules,
// then with a webhook rule on every trigger and the delivery worker
// running as in service (1 s polls; the posted lots, below the centre
// line, complete and extend run-rule signals, so messages are made and
// sent during the run). It reports both p99s and their ratio
// ("p99_ratio"; the aim is at most 1.10) and the messages delivered.
func BenchmarkAlertLoad(b *testing.B) {
	cfg := loadConfig{posters: 32, perPoster: loadPosts(b), readers: 8, preload: 2000}
	for b.Loop() {
		plain := runLoad(b, cfg)
		var sent atomic.Int64
		rc := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			sent.Add(1)
			w.WriteHeader(http.StatusNoContent)
		}))
		withAlerts := cfg
		withAlerts.setup = func(e *testEnv) {
			if _, err := e.db.AddAlertRule(context.Background(), "bench", store.AlertRule{ProcessID: e.proc.ID, Webhook: rc.URL, Secret: "bench",
				On: []string{store.TriggerOutOfLimits, store.TriggerRunRule}}); err != nil {
				b.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			done := make(chan struct{})
			go func() { defer close(done); e.srv.RunAlerts(ctx) }()
			b.Cleanup(func() { cancel(); <-done })
		}
		alerting := runLoad(b, withAlerts)
		rc.Close()
		for _, r := range []loadResult{plain, alerting} {
			if len(r.errs) > 0 || len(r.lost) > 0 {
				b.Fatalf("%d errors (first: %v), %d lots lost", len(r.errs), r.errs, len(r.lost))
			}
		}
		p0, p1 := quantile(plain.postLat, 0.99), quantile(alerting.postLat, 0.99)
		b.ReportMetric(float64(p0.Microseconds())/1000, "plain-p99-ms")
		b.ReportMetric(float64(p1.Microseconds())/1000, "alerts-p99-ms")
		b.ReportMetric(float64(p1)/float64(p0), "p99_ratio")
		b.ReportMetric(float64(sent.Load()), "sent")
	}
}

package metrics

import (
	"context"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"testing"

	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
	"lotwatch/web"
)

// scrape reads /metrics with the Prometheus text parser (the reference
// implementation of the format, github.com/prometheus/common/expfmt) and
// returns each sample as "name{labels}" → value.
func scrape(t *testing.T, url string) map[string]float64 {
	t.Helper()
	res, err := http.Get(url + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	if res.StatusCode != 200 || !strings.HasPrefix(res.Header.Get("Content-Type"), "text/plain") {
		t.Fatalf("GET /metrics: %d %q", res.StatusCode, res.Header.Get("Content-Type"))
	}
	p := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := p.TextToMetricFamilies(res.Body)
	if err != nil {
		t.Fatalf("not the Prometheus text format: %v", err)
	}
	out := map[string]float64{}
	for name, f := range fams {
		for _, m := range f.GetMetric() {
			key := name
			for _, l := range m.GetLabel() {
				key += "{" + l.GetName() + "=" + l.GetValue() + "}"
			}
			switch {
			case m.Counter != nil:
				out[key] = m.GetCounter().GetValue()
			case m.Gauge != nil:
				out[key] = m.GetGauge().GetValue()
			case m.Histogram != nil:
				out[key+"_count"] = float64(m.GetHistogram().GetSampleCount())
			}
		}
	}
	return out
}

// Exact contract of issue 15 (in process; cmd/lotwatch checks the
// binary's own listener): GET /metrics answers the Prometheus text format
// with a lotwatch_ metric counting stored lots that rises by one when a
// lot is posted, and the other figures move with what the server does.
func TestMetricsCountPostedLot(t *testing.T) {
	ctx := context.Background()
	db, err := store.Open(storetest.DB(t))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	p, err := db.AddProcess(ctx, "setup", store.Process{Name: "weld", Chart: spc.ChartP})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddUser(ctx, "setup", "station", store.RoleInspector, "a long enough password"); err != nil {
		t.Fatal(err)
	}
	token, _, err := db.CreateToken(ctx, "setup", "station", "line 1")
	if err != nil {
		t.Fatal(err)
	}
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	m := New(db, log)
	srv, err := web.NewServer(web.Config{DB: db, Observer: m, Logger: log})
	if err != nil {
		t.Fatal(err)
	}
	m.Watch(srv, log)
	public := httptest.NewServer(srv.Handler())
	defer public.Close()
	private := httptest.NewServer(m.Handler())
	defer private.Close()
	post := func(body string) int {
		req, _ := http.NewRequest("POST", public.URL+"/api/v1/processes/"+strconv.FormatInt(p.ID, 10)+"/lots", strings.NewReader(body))
		req.Header.Set("Authorization", "Bearer "+token)
		req.Header.Set("Content-Type", "application/json")
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		res.Body.Close()
		return res.StatusCode
	}
	before := scrape(t, private.URL)
	if code := post(`{"lot":"A1","inspected":100,"defective":2}`); code != http.StatusCreated {
		t.Fatalf("post: %d", code)
	}
	if code := post(`{"lot":"A2","inspected":100,"defective":200}`); code != http.StatusBadRequest {
		t.Fatalf("bad post: %d", code)
	}
	after := scrape(t, private.URL)
	rises := []struct {
		key  string
		by   float64
		note string
	}{
		{"lotwatch_lots_stored", 1, "lots in the database"},
		{"lotwatch_lots_accepted_total{source=api}", 1, "lots stored through the API"},
		{"lotwatch_lot_posts_refused_total{source=api}", 1, "the refused post"},
		{"lotwatch_store_commit_duration_seconds_count", 1, "one write transaction"},
		{"lotwatch_http_request_duration_seconds{code=201}{method=POST}{route=/api/v1/processes/{id}/lots}_count", 1, "the stored post"},
	}
	for _, r := range rises {
		if got := after[r.key] - before[r.key]; got != r.by {
			t.Errorf("%s (%s) rose by %v, want %v", r.key, r.note, got, r.by)
		}
	}
	if after["lotwatch_database_size_bytes"] <= 0 {
		t.Errorf("database size %v", after["lotwatch_database_size_bytes"])
	}
	for _, k := range []string{"out_of_limits", "run_rule", "shift"} {
		if _, ok := after["lotwatch_lots_needing_attention{kind="+k+"}"]; !ok {
			t.Errorf("no lots needing attention of kind %s", k)
		}
		if _, ok := after["lotwatch_signals{kind="+k+"}"]; !ok {
			t.Errorf("no signals of kind %s", k)
		}
	}
	for _, st := range []string{"pending", "sent", "failed"} {
		if _, ok := after["lotwatch_alert_deliveries{state="+st+"}"]; !ok {
			t.Errorf("no alert deliveries in state %s", st)
		}
	}
	// The metrics are on their own listener, not the public one.
	res, err := http.Get(public.URL + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	if res.StatusCode == http.StatusOK {
		t.Error("the public listener answers /metrics")
	}
}

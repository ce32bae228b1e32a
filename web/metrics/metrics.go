// Package metrics exposes what a lotwatch server does to Prometheus, on a
// listener of its own (lotwatch serve --metrics-addr), never on the
// public one: lots stored and refused by source, lots in the database,
// signals on the charts and lots needing attention by kind, alert
// deliveries by state, request time by route, store commit time and the
// database's size on disk.
//
// It is the only package that imports the Prometheus client: the server
// reports through web.Observer and the store through DB.OnCommit, so spc
// and store stay free of it.
package metrics

import (
	"context"
	"log/slog"
	"net/http"
	"strconv"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"lotwatch/store"
	"lotwatch/web/attention"
)

// Plant is what the metrics read of the plant at each scrape (a
// *web.Server).
type Plant interface {
	Attention(ctx context.Context) ([]attention.Lot, error)
	SignalCounts(ctx context.Context) (map[string]int, error)
}

// Metrics holds the registry of one server's metrics. It implements
// web.Observer.
type Metrics struct {
	reg      *prometheus.Registry
	accepted *prometheus.CounterVec
	refused  *prometheus.CounterVec
	requests *prometheus.HistogramVec
	commits  prometheus.Histogram
}

// scrapeTimeout bounds the figures read from the database at a scrape.
const scrapeTimeout = 10 * time.Second

// New registers the metrics of a server on db and plant (plant may be set
// later with Watch, as the server is made after the metrics).
func New(db *store.DB, log *slog.Logger) *Metrics {
	m := &Metrics{reg: prometheus.NewRegistry()}
	m.accepted = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "lotwatch_lots_accepted_total",
		Help: "Lots this server stored, by source (api, form, upload); a retry of a stored lot answered with it counts again.",
	}, []string{"source"})
	m.refused = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "lotwatch_lot_posts_refused_total",
		Help: "Requests posting lots that were refused (bad input, conflict, role), by source; nothing of them was stored.",
	}, []string{"source"})
	m.requests = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name:    "lotwatch_http_request_duration_seconds",
		Help:    "Time to answer a request, by method, route pattern and status code.",
		Buckets: prometheus.DefBuckets,
	}, []string{"method", "route", "code"})
	m.commits = prometheus.NewHistogram(prometheus.HistogramOpts{
		Name:    "lotwatch_store_commit_duration_seconds",
		Help:    "Time of one write transaction of the store from BEGIN to a durable COMMIT (group commit: it may carry several writes).",
		Buckets: []float64{0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5},
	})
	m.reg.MustRegister(m.accepted, m.refused, m.requests, m.commits,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	m.reg.MustRegister(prometheus.NewGaugeFunc(prometheus.GaugeOpts{
		Name: "lotwatch_lots_stored",
		Help: "Lots stored in the database (voided ones included: nothing is deleted), whoever wrote them.",
	}, func() float64 {
		ctx, cancel := context.WithTimeout(context.Background(), scrapeTimeout)
		defer cancel()
		n, err := db.LotCount(ctx)
		if err != nil {
			log.Warn("metrics: counting lots", "err", err)
			return -1
		}
		return float64(n)
	}))
	m.reg.MustRegister(prometheus.NewGaugeFunc(prometheus.GaugeOpts{
		Name: "lotwatch_database_size_bytes",
		Help: "Size of the database on disk: the file and its write-ahead log (on PostgreSQL, the tables of its schema with their indexes).",
	}, func() float64 {
		n, err := db.FileSize()
		if err != nil {
			return -1
		}
		return float64(n)
	}))
	m.reg.MustRegister(&deliveryCollector{db: db, log: log})
	if _, ok := db.ReplicaReads(); ok {
		registerReplicaReads(m.reg, db)
	}
	db.OnCommit(func(d time.Duration, writes int) { m.commits.Observe(d.Seconds()) })
	return m
}

// registerReplicaReads counts the reads of lots of a server with a read
// replica by who answered them: a replica that keeps lagging or failing
// shows as the primary answering.
func registerReplicaReads(reg *prometheus.Registry, db *store.DB) {
	for _, c := range []struct {
		by    string
		count func(store.ReplicaReads) int64
	}{
		{"replica", func(r store.ReplicaReads) int64 { return r.Replica }},
		{"primary_replica_lagging", func(r store.ReplicaReads) int64 { return r.Lagging }},
		{"primary_replica_failed", func(r store.ReplicaReads) int64 { return r.Failed }},
	} {
		reg.MustRegister(prometheus.NewCounterFunc(prometheus.CounterOpts{
			Name:        "lotwatch_lot_reads_total",
			Help:        "Reads of a process's lots (charts, board, reviews) on a server with --read-db, by who answered: the replica, or the primary because the replica had not yet replayed the process's latest change or could not be read.",
			ConstLabels: prometheus.Labels{"answered_by": c.by},
		}, func() float64 {
			r, _ := db.ReplicaReads()
			return float64(c.count(r))
		}))
	}
}

var deliveriesDesc = prometheus.NewDesc("lotwatch_alert_deliveries",
	"Alert deliveries (one per message and receiver) by state: pending (waiting or being retried), sent, failed (given up after retrying).", []string{"state"}, nil)

// deliveryStates are the states of an alert delivery, each reported even
// at zero.
var deliveryStates = []string{"pending", "sent", "failed"}

// deliveryCollector reads the alert deliveries at each scrape.
type deliveryCollector struct {
	db  *store.DB
	log *slog.Logger
}

func (c *deliveryCollector) Describe(ch chan<- *prometheus.Desc) { ch <- deliveriesDesc }

func (c *deliveryCollector) Collect(ch chan<- prometheus.Metric) {
	ctx, cancel := context.WithTimeout(context.Background(), scrapeTimeout)
	defer cancel()
	n, err := c.db.DeliveryCounts(ctx)
	if err != nil {
		c.log.Warn("metrics: alert deliveries", "err", err)
		return
	}
	for _, st := range deliveryStates {
		ch <- prometheus.MustNewConstMetric(deliveriesDesc, prometheus.GaugeValue, float64(n[st]), st)
	}
}

// Watch adds the figures read from the plant at each scrape: lots needing
// attention and signals on the charts, by kind.
func (m *Metrics) Watch(plant Plant, log *slog.Logger) {
	m.reg.MustRegister(&plantCollector{plant: plant, log: log})
}

// Handler answers GET /metrics in the Prometheus text format.
func (m *Metrics) Handler() http.Handler {
	mux := http.NewServeMux()
	mux.Handle("GET /metrics", promhttp.HandlerFor(m.reg, promhttp.HandlerOpts{}))
	return mux
}

// LotsAccepted implements web.Observer.
func (m *Metrics) LotsAccepted(source string, n int) {
	m.accepted.WithLabelValues(source).Add(float64(n))
}

// LotsRefused implements web.Observer.
func (m *Metrics) LotsRefused(source string) { m.refused.WithLabelValues(source).Inc() }

// Request implements web.Observer.
func (m *Metrics) Request(method, route string, status int, d time.Duration) {
	m.requests.WithLabelValues(method, route, strconv.Itoa(status)).Observe(d.Seconds())
}

var (
	attentionDesc = prometheus.NewDesc("lotwatch_lots_needing_attention",
		"Lots of active processes out of limits or in a signal and not yet explained by a cause, by their most pressing kind.", []string{"kind"}, nil)
	signalsDesc = prometheus.NewDesc("lotwatch_signals",
		"Signals on the charts of active processes, explained or not, by kind.", []string{"kind"}, nil)
)

// kinds are the attention kinds, each reported even at zero.
var kinds = []attention.Kind{attention.OutOfLimits, attention.RunRule, attention.Shift}

// plantCollector reads the plant's figures at each scrape.
type plantCollector struct {
	plant Plant
	log   *slog.Logger
}

func (c *plantCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- attentionDesc
	ch <- signalsDesc
}

// Collect leaves a figure out when the plant cannot be read (the scrape
// shows it missing rather than a wrong zero).
func (c *plantCollector) Collect(ch chan<- prometheus.Metric) {
	ctx, cancel := context.WithTimeout(context.Background(), scrapeTimeout)
	defer cancel()
	if ls, err := c.plant.Attention(ctx); err != nil {
		c.log.Warn("metrics: lots needing attention", "err", err)
	} else {
		n := map[attention.Kind]int{}
		for _, l := range ls {
			n[l.Kind]++
		}
		for _, k := range kinds {
			ch <- prometheus.MustNewConstMetric(attentionDesc, prometheus.GaugeValue, float64(n[k]), string(k))
		}
	}
	if sc, err := c.plant.SignalCounts(ctx); err != nil {
		c.log.Warn("metrics: signals", "err", err)
	} else {
		for _, k := range kinds {
			ch <- prometheus.MustNewConstMetric(signalsDesc, prometheus.GaugeValue, float64(sc[string(k)]), string(k))
		}
	}
}

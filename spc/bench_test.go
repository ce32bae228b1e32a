// The benchmarks of the engine make no check of values (the tests do,
// against their named sources); their reference is the bare limits loop
// baselineLimits, measured in the same run.
package spc

import (
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat/distuv"
)

const benchLots = 1_000_000

var (
	benchOnce sync.Once
	benchData []Lot
)

// benchSeries is 1,000,000 lots with 300 distinct lot sizes (50 to 1545)
// and a binomial count at p = 0.03, from a fixed seed.
func benchSeries() []Lot {
	benchOnce.Do(func() {
		rng := rand.New(rand.NewPCG(2024, 6))
		benchData = make([]Lot, benchLots)
		for i := range benchData {
			n := int64(50 + 5*rng.IntN(300))
			d := distuv.Binomial{N: float64(n), P: 0.03, Src: rng}.Rand()
			benchData[i] = Lot{Code: "lot", Inspected: n, Count: int64(d)}
		}
	})
	return benchData
}

// baselineLimits is the bare p-chart computation: p̄, then per lot the
// limits p̄ ± 3σᵢ (clamped) and zᵢ into a fresh slice of points.
func baselineLimits(lots []Lot) []Point {
	var sn, sd float64
	for i := range lots {
		sn += float64(lots[i].Inspected)
		sd += float64(lots[i].Count)
	}
	pb := sd / sn
	pq := pb * (1 - pb)
	pts := make([]Point, len(lots))
	for i := range lots {
		n := float64(lots[i].Inspected)
		v := float64(lots[i].Count) / n
		s := math.Sqrt(pq / n)
		p := &pts[i]
		p.Lot = lots[i]
		p.Value, p.Center, p.Sigma = v, pb, s
		p.UCL = min(1, pb+3*s)
		p.LCL = max(0, pb-3*s)
		p.Z = (v - pb) / s
		p.Above, p.Below = v > p.UCL, v < p.LCL
	}
	return pts
}

var sinkPoints []Point
var sinkAnalysis *Analysis

func reportRate(b *testing.B, d time.Duration, n int, unit string) {
	b.ReportMetric(float64(n*benchLots)/d.Seconds(), unit)
}

func BenchmarkBaselineLimits(b *testing.B) {
	lots := benchSeries()
	b.ReportAllocs()
	b.ResetTimer()
	start := time.Now()
	for range b.N {
		sinkPoints = baselineLimits(lots)
	}
	reportRate(b, time.Since(start), b.N, "lots/s")
}

func mallocs() uint64 {
	var m runtime.MemStats
	runtime.ReadMemStats(&m)
	return m.Mallocs
}

// timePair runs base and run alternately b.N times and reports lots/s of
// run, its ratio to base, and run's allocations per lot.
func timePair(b *testing.B, base, run func(), ratioName string) {
	b.ReportAllocs()
	b.ResetTimer()
	var tBase, tRun time.Duration
	var allocs uint64
	for range b.N {
		// Each side starts from a collected heap, so that a collection
		// left over from the other does not land in its time.
		b.StopTimer()
		runtime.GC()
		b.StartTimer()
		t0 := time.Now()
		base()
		tBase += time.Since(t0)
		b.StopTimer()
		runtime.GC()
		m0 := mallocs()
		b.StartTimer()
		t0 = time.Now()
		run()
		tRun += time.Since(t0)
		b.StopTimer()
		allocs += mallocs() - m0
		b.StartTimer()
	}
	reportRate(b, tRun, b.N, "lots/s")
	b.ReportMetric(tRun.Seconds()/tBase.Seconds(), ratioName)
	b.ReportMetric(float64(allocs)/float64(b.N)/benchLots, "allocs/lot")
}

func BenchmarkPChartRules(b *testing.B) {
	lots := benchSeries()
	cfg := Config{Chart: ChartP, Rules: RulesWE}
	timePair(b, func() { sinkPoints = baselineLimits(lots) }, func() {
		a, err := Analyze(lots, cfg)
		if err != nil {
			b.Fatal(err)
		}
		sinkAnalysis = a
	}, "x_baseline")
}

func BenchmarkExactLimits(b *testing.B) {
	lots := benchSeries()
	run := func(cfg Config) func() {
		return func() {
			a, err := Analyze(lots, cfg)
			if err != nil {
				b.Fatal(err)
			}
			sinkAnalysis = a
		}
	}
	timePair(b, run(Config{Chart: ChartP, Rules: RulesWE}), run(Config{Chart: ChartP, Rules: RulesWE, Method: MethodExact}), "x_pchart")
}

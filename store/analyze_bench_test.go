package store

import (
	"fmt"
	"math/rand/v2"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"lotwatch/spc"
)

// BenchmarkAnalyzeShareOfRead states the speed of the control-chart
// engine in the terms a user meets it: the time to judge a process's
// record (spc.Analyze) as a share of the time to read that record from
// the store (EachLot), both measured in the same run on the same lots.
// The record is 100,000 lots (LOTWATCH_BENCH_LOTS sets another number) of
// 300 lot sizes from 50 to 1545 units with binomial counts at 3 %, from a
// fixed seed. The goal is a share of at most 25 % for the p chart with
// the Western Electric rules.
func BenchmarkAnalyzeShareOfRead(b *testing.B) {
	n := 100_000
	if s := os.Getenv("LOTWATCH_BENCH_LOTS"); s != "" {
		v, err := strconv.Atoi(s)
		if err != nil || v <= 0 {
			b.Fatalf("LOTWATCH_BENCH_LOTS=%q: want a positive whole number", s)
		}
		n = v
	}
	db, p := benchDB(b)
	defer db.Close()
	rng := rand.New(rand.NewPCG(2024, 6))
	var csv strings.Builder
	csv.WriteString("lot,time,shift,inspected,defective,dent,scratch,inspector,note\n")
	for i := 0; i < n; i++ {
		size := 50 + 5*rng.IntN(300)
		d := int(distuv.Binomial{N: float64(size), P: 0.03, Src: rng}.Rand())
		fmt.Fprintf(&csv, "A%07d,%s,early,%d,%d,%d,0,kim,\n", i, benchT0.Add(time.Duration(i)*time.Minute).Format(time.RFC3339), size, d, d)
	}
	if _, err := db.Import(ctx, "bench", strings.NewReader(csv.String()), ImportOptions{Process: "weld"}); err != nil {
		b.Fatal(err)
	}
	read := func() []spc.Lot {
		lots := make([]spc.Lot, 0, n)
		if err := db.EachLot(ctx, p.ID, time.Time{}, time.Time{}, func(l Lot) error {
			lots = append(lots, spc.Lot{Code: l.Lot, Inspected: l.Inspected, Count: l.Count})
			return nil
		}); err != nil {
			b.Fatal(err)
		}
		return lots
	}
	read() // warm the cache once, so that every pass reads alike
	configs := []struct {
		name string
		cfg  spc.Config
	}{
		{"p+we", spc.Config{Chart: spc.ChartP, Rules: spc.RulesWE}},
		{"p+nelson", spc.Config{Chart: spc.ChartP, Rules: spc.RulesNelson}},
		{"p+exact+we", spc.Config{Chart: spc.ChartP, Method: spc.MethodExact, Rules: spc.RulesWE}},
		{"p+laney+we", spc.Config{Chart: spc.ChartP, Method: spc.MethodLaney, Rules: spc.RulesWE}},
	}
	b.ResetTimer()
	var readNs time.Duration
	spent := make([]time.Duration, len(configs))
	for range b.N {
		t := time.Now()
		lots := read()
		readNs += time.Since(t)
		if len(lots) != n {
			b.Fatalf("read %d lots, want %d", len(lots), n)
		}
		for j, c := range configs {
			t = time.Now()
			if _, err := spc.Analyze(lots, c.cfg); err != nil {
				b.Fatal(err)
			}
			spent[j] += time.Since(t)
		}
	}
	b.ReportMetric(float64(n*b.N)/readNs.Seconds(), "lots-read/s")
	for j, c := range configs {
		b.ReportMetric(100*spent[j].Seconds()/readNs.Seconds(), "%read-"+c.name)
	}
}

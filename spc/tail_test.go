package spc

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"
)

// TestTailTable checks the binomial tails of tailTable against SciPy
// 1.10.1: the binom.cdf/binom.sf values of the "tails" rows of
// testdata/engine_reference.json (engine_reference.py) for lot sizes the
// table serves, and the binom.sf values of the p-chart rows of
// testdata/tail_large_reference.json (tail_large_reference.py) at
// n = 100000, beyond the sizes the table serves, where the recurrence
// still holds to 10⁻¹¹ relative (the table's normalizing sum then has
// thousands of terms).
func TestTailTable(t *testing.T) {
	type row struct {
		n, count int64
		p, want  float64
		upper    bool
		tol      float64
		src      string
	}
	var rows []row
	ref := loadReference(t)
	for _, c := range ref.Tails {
		if c.Dist != "binomial" || c.N > tableMaxN || c.Count <= 0 || c.Count >= c.N {
			continue
		}
		// The reference tail is in the direction observed (Point.TailP).
		up := float64(c.Count) >= float64(c.N)*c.P
		rows = append(rows, row{c.N, c.Count, c.P, c.Tail, up, 1e-12, "engine_reference.json"})
	}
	raw, err := os.ReadFile(filepath.Join("testdata", "tail_large_reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	var large struct {
		Rows []struct {
			Chart    Chart
			N, K     int64
			Rate, SF float64
		}
	}
	if err := json.Unmarshal(raw, &large); err != nil {
		t.Fatal(err)
	}
	for _, r := range large.Rows {
		if r.Chart == ChartP && r.N == 100000 {
			rows = append(rows, row{r.N, r.K, r.Rate, r.SF, true, 1e-11, "tail_large_reference.json"})
		}
	}
	if len(rows) < 10 {
		t.Fatalf("only %d reference rows", len(rows))
	}
	for _, r := range rows {
		tt := newTailTable(r.n, r.p, 0, r.n)
		if tt == nil {
			t.Errorf("n %d p %v: no table around count %d", r.n, r.p, r.count)
			continue
		}
		j := r.count - tt.lo
		if j < 0 || j >= int64(len(tt.upper)) {
			t.Errorf("n %d p %v: table %d…%d misses count %d", r.n, r.p, tt.lo, tt.lo+int64(len(tt.upper))-1, r.count)
			continue
		}
		got := tt.lower[j]
		if r.upper {
			got = tt.upper[j]
		}
		if !relNear(got, r.want, r.tol) {
			t.Errorf("n %d p %v count %d upper %v: %v, want %v (SciPy, %s)", r.n, r.p, r.count, r.upper, got, r.want, r.src)
		}
	}
}

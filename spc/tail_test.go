package spc

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"
)

// TestTailSums checks the binomial and Poisson tails (countDist.tail)
// against SciPy 1.10.1: the binom/poisson cdf and sf values of the
// "tails" rows of testdata/engine_reference.json (engine_reference.py),
// to 10⁻¹² relative, and the sf values of every row of
// testdata/tail_large_reference.json (tail_large_reference.py), lots of
// 10⁵ to 10⁹ units, against the sums of mpmath at 40 digits there (SciPy's
// own poisson.sf is per cents off at such means), to 10⁻¹¹ relative,
// centre included.
func TestTailSums(t *testing.T) {
	type row struct {
		d     countDist
		count int64
		want  float64
		tol   float64
		src   string
	}
	var rows []row
	ref := loadReference(t)
	for _, c := range ref.Tails {
		d := poissonDist(c.Lambda)
		if c.Dist == "binomial" {
			d = binomialDist(c.N, c.P)
		}
		rows = append(rows, row{d, c.Count, c.Tail, 1e-12, "engine_reference.json"})
	}
	raw, err := os.ReadFile(filepath.Join("testdata", "tail_large_reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	var large struct {
		Rows []struct {
			Chart       Chart
			N, K        int64
			Rate, Exact float64
		}
	}
	if err := json.Unmarshal(raw, &large); err != nil {
		t.Fatal(err)
	}
	for _, r := range large.Rows {
		d := newModel(r.Chart, r.Rate).count(r.N)
		// The reference is P(X ≥ k), the tail observed at or above the mean.
		if float64(r.K) < d.mean {
			t.Fatalf("reference row below the mean: %+v", r)
		}
		rows = append(rows, row{d, r.K, r.Exact, 1e-11, "tail_large_reference.json"})
	}
	if len(rows) < 20 {
		t.Fatalf("only %d reference rows", len(rows))
	}
	for _, r := range rows {
		if got := r.d.tail(r.count); !relNear(got, r.want, r.tol) {
			t.Errorf("%+v count %d: tail %v, want %v (%s)", r.d, r.count, got, r.want, r.src)
		}
	}
}

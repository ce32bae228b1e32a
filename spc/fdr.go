package spc

import (
	"math"
	"sort"
)

// BenjaminiHochberg returns the p-values adjusted for the false discovery
// rate across the family of tests p (Benjamini & Hochberg 1995,
// "Controlling the false discovery rate: a practical and powerful approach
// to multiple testing", Journal of the Royal Statistical Society B
// 57:289–300). Declaring a change wherever the adjusted value is below q
// keeps the expected share of false declarations among all declared at or
// below q, when the tests are independent.
//
// With the m p-values in increasing order p(1) ≤ … ≤ p(m), the adjusted
// value of p(i) is min over j ≥ i of m·p(j)/j, capped at 1 (the "fdr_bh"
// adjustment of statsmodels' multipletests). The result is in the order of
// p. NaN entries (tests not run) stay NaN and do not count in m.
func BenjaminiHochberg(p []float64) []float64 {
	out := make([]float64, len(p))
	var idx []int
	for i, v := range p {
		out[i] = math.NaN()
		if !math.IsNaN(v) {
			idx = append(idx, i)
		}
	}
	sort.SliceStable(idx, func(a, b int) bool { return p[idx[a]] < p[idx[b]] })
	m := float64(len(idx))
	running := 1.0
	for r := len(idx) - 1; r >= 0; r-- {
		running = math.Min(running, m*p[idx[r]]/float64(r+1))
		out[idx[r]] = running
	}
	return out
}

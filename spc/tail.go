package spc

import (
	"math"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"
)

// countDist is the distribution of a lot's count under the centre line:
// binomial(n, p) or Poisson(mean).
type countDist struct {
	binomial bool
	n        int64
	p        float64
	mean, sd float64
	alpha2   float64

	lcl, ucl int64 // exact limits; lcl < 0 until computed

	// Per lot size, filled by prepare, which sets ready: centre, σᵢ and
	// scaled σᵢ of the plotted statistic, the limits in plotted units,
	// 1 when the expected counts are too small for normal limits and 1
	// when the lower limit is 0, and the values a point of this size
	// gets for Center, UCL, LCL and Sigma.
	ready                          bool
	ctr, sig, sigS                 float64
	uclV, lclV                     float64
	smallLot, lclZeroLot           int
	outCtr, outUCL, outLCL, outSig float64

	// The tails of the binomial counts near the mean, from one table
	// (see tailTable) once calls counts have been asked for one by one.
	calls    int
	tabTried bool
	tab      *tailTable
	// many reports that many lots of this size are expected, so that the
	// table is built at the first count asked for.
	many bool
}

// tailWindow bounds the counts whose points are cached per lot size;
// counts outside the window are rare and computed directly.
const tailWindow = 4096

// window returns the counts lo … lo+size−1 cached for this lot size: the
// mean ± 12σ and 16 more on each side. ok is false when the window would
// hold more than tailWindow counts.
func (d *countDist) window() (lo int64, size int, ok bool) {
	lo = max(0, int64(math.Floor(d.mean-12*d.sd-16)))
	hi := int64(math.Ceil(d.mean + 12*d.sd + 16))
	if d.binomial {
		hi = min(hi, d.n)
	}
	if hi-lo+1 > tailWindow {
		return 0, 0, false
	}
	return lo, int(hi - lo + 1), true
}

func (d *countDist) degenerate() bool {
	if d.binomial {
		return d.p <= 0 || d.p >= 1
	}
	return d.mean <= 0
}

// lower returns P(X ≤ k).
func (d *countDist) lower(k int64) float64 {
	switch {
	case k < 0:
		return 0
	case d.degenerate():
		if float64(k) >= d.mean {
			return 1
		}
		return 0
	case d.binomial:
		if k >= d.n {
			return 1
		}
		return distuv.Binomial{N: float64(d.n), P: d.p}.CDF(float64(k))
	}
	return distuv.Poisson{Lambda: d.mean}.CDF(float64(k))
}

// upper returns P(X ≥ k), computed without cancellation: for the
// binomial as P(n − X ≤ n − k) with n − X ~ binomial(n, 1 − p); for the
// Poisson as the regularized lower incomplete gamma P(k, λ)
// (Abramowitz & Stegun 26.4.21 via 6.5.1).
func (d *countDist) upper(k int64) float64 {
	switch {
	case k <= 0:
		return 1
	case d.degenerate():
		if float64(k) <= d.mean {
			return 1
		}
		return 0
	case d.binomial:
		if k > d.n {
			return 0
		}
		return distuv.Binomial{N: float64(d.n), P: 1 - d.p}.CDF(float64(d.n - k))
	}
	return mathext.GammaIncReg(float64(k), d.mean)
}

// tailDirect returns the one-sided tail probability of count in the
// direction observed (see Point.TailP).
func (d *countDist) tailDirect(count int64) float64 {
	if d.tab == nil && d.binomial && !d.tabTried && d.n <= tableMaxN {
		// A table costs about as much as 32 calls per count it holds
		// (a step of a recurrence against a continued fraction), so it
		// is built once the counts asked for suggest it pays.
		d.calls++
		if _, size, ok := d.window(); ok && (d.many || d.calls >= 4 && d.calls*32 >= size) {
			d.buildTable()
		}
	}
	if t := d.tab; t != nil && count > 0 && count < d.n {
		if j := uint64(count - t.lo); j < uint64(len(t.upper)) {
			if float64(count) >= d.mean {
				return t.upper[j]
			}
			return t.lower[j]
		}
	}
	if float64(count) >= d.mean {
		return d.upper(count)
	}
	return d.lower(count)
}

// buildTable makes the tail table of the counts of the window, once.
func (d *countDist) buildTable() {
	if d.tabTried || !d.binomial || d.n > tableMaxN {
		return
	}
	d.tabTried = true
	if lo, size, ok := d.window(); ok {
		d.tab = newTailTable(d.n, d.p, lo, lo+int64(size)-1)
	}
}

// tableCounts returns the counts lo … hi whose tails tailDirect takes
// from the table; ok is false when there is no table.
func (d *countDist) tableCounts() (lo, hi int64, ok bool) {
	t := d.tab
	if t == nil || len(t.upper) == 0 {
		return 0, 0, false
	}
	return max(t.lo, 1), min(t.lo+int64(len(t.upper))-1, d.n-1), true
}

// distNormalQ returns the standard normal quantile of 1 − q, the
// normal-theory starting point for the exact limit search.
func distNormalQ(q float64) float64 {
	return distuv.UnitNormal.Quantile(1 - q)
}

// tailTable holds P(X ≤ k) and P(X ≥ k) of a binomial(n, p) count X for
// the counts k = lo … lo+len(lower)−1.
type tailTable struct {
	lo           int64
	lower, upper []float64
}

// Bounds of the counts a tailTable holds: at most tableSteps steps of the
// recurrence from the mode, so that rounding errors (at most about 2.5
// units in the last place per step) stay below 10⁻¹², and probabilities
// no smaller than tableTiny times that of the mode, far from underflow.
//
// The table is used for lot sizes up to tableMaxN and tails from
// tableMinTail, where it and the incomplete beta function of
// Binomial.CDF agree to a relative 10⁻¹² (TestTailTable); beyond, the
// latter's own error grows (to about 2·10⁻¹⁰ at n = 70000, where the
// table agrees with SciPy's binom to 10⁻¹⁴).
const (
	tableSteps   = 1000
	tableTiny    = 1e-250
	tableMaxN    = 2000
	tableMinTail = 1e-20
)

// farTail sums the terms t·ρ₀, t·ρ₀ρ₁, … with ρᵢ = ratio(i), for the
// steps i < steps away from the mode, until the rest cannot change the sum:
// away from the mode the ratios fall, so the rest is at most t·ρ/(1−ρ).
// The terms are added from the far end inward, so that a small tail is a
// sum of small terms and keeps its relative accuracy. buf is scratch
// space, returned for reuse.
func farTail(t float64, steps int64, ratio func(step int64) float64, buf []float64) (float64, []float64) {
	buf = buf[:0]
	sum := 0.0
	for i := int64(0); i < steps; i++ {
		rho := ratio(i)
		t *= rho
		buf = append(buf, t)
		sum += t
		if rho < 1 && t*rho/(1-rho) < 0x1p-60*sum || t == 0 {
			break
		}
	}
	total := 0.0
	for j := len(buf) - 1; j >= 0; j-- {
		total += buf[j]
	}
	return total, buf
}

// newTailTable returns the tails of binomial(n, p) for the counts lo … hi
// (clamped to those it can hold with full accuracy), or nil when it holds
// none.
//
// The probabilities relative to the mode m = ⌊(n+1)p⌋ follow from the
// recurrence of the binomial probabilities (Johnson, Kemp & Kotz,
// Univariate Discrete Distributions, 3rd ed., eq. 3.3),
//
//	P(k+1)/P(k) = (n−k)/(k+1) · p/(1−p),
//
// outward from the mode, where each term is accurate to a few units in the
// last place relative to itself. They are continued beyond lo and hi until
// the rest cannot change the sums, then divided by their total. Each tail
// is summed from its far end inward, so that a small tail is a sum of
// small terms and keeps its relative accuracy.
func newTailTable(n int64, p float64, lo, hi int64) *tailTable {
	if !(p > 0 && p < 1) || n <= 1 {
		return nil
	}
	q := p / (1 - p)
	m := int64(math.Floor(float64(n+1) * p))
	m = min(max(m, 0), n)
	lo = max(lo, 0, m-tableSteps)
	hi = min(hi, n, m+tableSteps)
	if lo > m || hi < m {
		return nil
	}
	// r[k−lo] = P(k)/P(m) for lo ≤ k ≤ hi.
	r := make([]float64, hi-lo+1)
	r[m-lo] = 1
	for k := m; k < hi; k++ {
		r[k+1-lo] = r[k-lo] * (float64(n-k) / float64(k+1) * q)
	}
	for k := m; k > lo; k-- {
		r[k-1-lo] = r[k-lo] / (float64(n-k+1) / float64(k) * q)
	}
	// Cut the counts whose terms are too small to hold.
	a, b := int64(0), int64(len(r)-1)
	for a < m-lo && r[a] < tableTiny {
		a++
	}
	for b > m-lo && r[b] < tableTiny {
		b--
	}
	r = r[a : b+1]
	lo += a
	hi = lo + int64(len(r)) - 1
	// The sums beyond hi and below lo (farTail).
	var above, below float64
	var buf []float64
	if hi < n {
		above, buf = farTail(r[len(r)-1], n-hi, func(step int64) float64 {
			k := hi + step
			return float64(n-k) / float64(k+1) * q // P(k+1)/P(k)
		}, buf)
	}
	if lo > 0 {
		below, _ = farTail(r[0], lo, func(step int64) float64 {
			k := lo - step
			return float64(k) / (float64(n-k+1) * q) // P(k−1)/P(k)
		}, buf)
	}
	tt := &tailTable{lo: lo, lower: make([]float64, len(r)), upper: make([]float64, len(r))}
	s := below
	for i, v := range r {
		s += v
		tt.lower[i] = s
	}
	s = above
	for i := len(r) - 1; i >= 0; i-- {
		s += r[i]
		tt.upper[i] = s
	}
	total := tt.lower[len(r)-1] + above
	for i := range r {
		tt.lower[i] /= total
		tt.upper[i] /= total
	}
	// Keep the counts whose tails are at least tableMinTail, where the table
	// and the incomplete beta function agree.
	a, b = 0, int64(len(r)-1)
	for a <= b && tt.lower[a] < tableMinTail {
		a++
	}
	for b >= a && tt.upper[b] < tableMinTail {
		b--
	}
	if a > b {
		return nil
	}
	tt.lo += a
	tt.lower, tt.upper = tt.lower[a:b+1], tt.upper[a:b+1]
	return tt
}

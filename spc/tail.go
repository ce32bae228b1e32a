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
	if float64(count) >= d.mean {
		return d.upper(count)
	}
	return d.lower(count)
}

// distNormalQ returns the standard normal quantile of 1 − q, the
// normal-theory starting point for the exact limit search.
func distNormalQ(q float64) float64 {
	return distuv.UnitNormal.Quantile(1 - q)
}

package spc

import (
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// exactLimits returns the probability limits of a count X distributed as
// d, with at most alpha2 = α/2 = 1 − Φ(K) of false alarms in each tail:
//
//	ucl = the smallest integer u with P(X > u) ≤ α/2
//	lcl = the largest integer l with P(X < l) ≤ α/2
//
// A lot signals when its count is above ucl or below lcl (the usual
// definition of probability limits, e.g. Montgomery, Introduction to
// Statistical Quality Control, §7.2 "probability limits"). Because the
// distributions are discrete and skewed, the limits are in general not
// symmetric about the centre, and α/2 is only an upper bound on each
// tail's false-alarm probability: the lower tail's is 0 when even a count
// of 0 is not rare enough to fall below lcl.
func exactLimits(d countDist, alpha2 float64) (lcl, ucl int64) {
	if d.degenerate() {
		c := int64(math.Round(d.mean))
		return c, c
	}
	z := distuv.UnitNormal.Quantile(1 - alpha2)
	// P(X > u) = P(X ≥ u+1) falls as u grows; start from the normal
	// approximation and walk.
	over := func(u int64) bool { return d.upper(u+1) <= alpha2 }
	u := d.clamp(int64(math.Floor(d.mean + z*d.sd)))
	if over(u) {
		for u > 0 && over(u-1) {
			u--
		}
	} else {
		for !over(u) {
			u++
		}
	}
	// P(X < l) = P(X ≤ l−1) grows with l; l = 0 always qualifies.
	ok := func(l int64) bool { return l <= 0 || d.lower(l-1) <= alpha2 }
	l := d.clamp(int64(math.Ceil(d.mean - z*d.sd)))
	if ok(l) {
		for (!d.binomial || l < d.n) && ok(l+1) {
			l++
		}
	} else {
		for !ok(l) {
			l--
		}
	}
	return l, u
}

func (d countDist) clamp(x int64) int64 {
	x = max(x, 0)
	if d.binomial {
		x = min(x, d.n)
	}
	return x
}

package spc

import "math"

// distCache holds, per distinct lot size, the count distribution under
// the centre line, its exact limits and its tail probabilities, so that
// a long series with few distinct lot sizes costs a map look-up per lot.
type distCache struct {
	chart  Chart
	rate   float64
	alpha2 float64
	byN    map[int64]*countDist
	dense  []*countDist // indexed by lot size when the largest is small
	lastN  int64
	last   *countDist
}

// denseSizes is the largest lot size indexed directly rather than hashed.
const denseSizes = 1 << 16

func newDistCache(ch Chart, rate, alpha2 float64, maxN int64) *distCache {
	c := &distCache{chart: ch, rate: rate, alpha2: alpha2, byN: make(map[int64]*countDist), lastN: -1}
	if ch != ChartC && maxN < denseSizes {
		c.dense = make([]*countDist, maxN+1)
	}
	return c
}

// get returns the count distribution of a lot of n inspected.
func (c *distCache) get(n int64) *countDist {
	key := n
	if c.chart == ChartC {
		key = 0 // Poisson(c̄) whatever the lot size
	}
	if key == c.lastN {
		return c.last
	}
	if key < int64(len(c.dense)) {
		if d := c.dense[key]; d != nil {
			return d
		}
	}
	d := c.byN[key]
	if d == nil {
		d = &countDist{alpha2: c.alpha2, lcl: -1}
		switch c.chart {
		case ChartP, ChartNP:
			d.binomial, d.n, d.p = true, n, c.rate
			d.mean = float64(n) * c.rate
			d.sd = math.Sqrt(d.mean * (1 - c.rate))
		case ChartU:
			d.mean = float64(n) * c.rate
			d.sd = math.Sqrt(d.mean)
		default:
			d.mean = c.rate
			d.sd = math.Sqrt(d.mean)
		}
		c.byN[key] = d
		if key < int64(len(c.dense)) {
			c.dense[key] = d
		}
	}
	c.last, c.lastN = d, key
	return d
}

// limits computes the exact count limits once.
//
// For a count X distributed binomial(nᵢ, p̄) (p, np) or Poisson(nᵢū) (u)
// or Poisson(c̄) (c), with α/2 = (1 − Φ(K)) per tail:
//
//	ucl = the smallest integer u with P(X > u) ≤ α/2
//	lcl = the largest integer l with P(X < l) ≤ α/2
//
// A lot signals when its count is above ucl or below lcl, so each tail
// has a false-alarm probability of at most α/2 (the usual definition of
// probability limits, e.g. Montgomery, Introduction to Statistical
// Quality Control, §7.2 "probability limits"). Because the distributions
// are discrete and skewed, the two limits are in general not symmetric
// about the centre.
func (d *countDist) limits() {
	if d.lcl >= 0 {
		return
	}
	d.ucl = d.upperLimit()
	d.lcl = d.lowerLimit()
}

func (d *countDist) upperLimit() int64 {
	if d.degenerate() {
		return int64(math.Round(d.mean))
	}
	// P(X > u) = P(X ≥ u+1), decreasing in u.
	over := func(u int64) bool { return d.upper(u+1) <= d.alpha2 }
	u := d.clampCount(int64(math.Floor(d.mean + distNormalQ(d.alpha2)*d.sd)))
	if over(u) {
		for u > 0 && over(u-1) {
			u--
		}
		return u
	}
	for !over(u) {
		u++
	}
	return u
}

func (d *countDist) lowerLimit() int64 {
	if d.degenerate() {
		return int64(math.Round(d.mean))
	}
	// P(X < l) = P(X ≤ l−1), increasing in l; l = 0 always qualifies.
	ok := func(l int64) bool { return l <= 0 || d.lower(l-1) <= d.alpha2 }
	l := d.clampCount(int64(math.Ceil(d.mean - distNormalQ(d.alpha2)*d.sd)))
	if ok(l) {
		for (!d.binomial || l < d.n) && ok(l+1) {
			l++
		}
		return l
	}
	for !ok(l) {
		l--
	}
	return l
}

func (d *countDist) clampCount(x int64) int64 {
	x = max(x, 0)
	if d.binomial {
		x = min(x, d.n)
	}
	return x
}

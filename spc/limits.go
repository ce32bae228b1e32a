package spc

// lotLimits is what every lot of one size shares: its centre line, σᵢ
// (widened by σ_z for Laney limits), its control limits in the units of
// the plotted statistic (and, for exact limits, in counts), the
// distribution of its count and the tail probabilities of the counts
// seen so far.
type lotLimits struct {
	center, sigma float64
	ucl, lcl      float64
	uclN, lclN    int64 // exact limits in counts
	dist          countDist
	small         bool // expected counts too small for normal-theory limits
	tails         map[int64]float64
}

// newLotLimits returns the limits of a lot of n inspected on the chart m
// with limit width k (in σ) by method:
//
//	sigma: centre ± k·σᵢ, clamped to what the statistic can take
//	laney: centre ± k·σᵢ·σ_z (Laney 2002; see laneySigmaZ)
//	exact: the probability limits of the count (exactLimits), with the
//	       same α/2 = 1 − Φ(k) as the bound of each tail's false alarms
//
// sigmaZ is 1 unless the method is Laney's.
func newLotLimits(m model, method Method, k, sigmaZ float64, n int64) *lotLimits {
	nf := float64(n)
	l := &lotLimits{center: m.center(nf), sigma: m.sigma(nf), dist: m.count(n), small: m.small(nf), tails: map[int64]float64{}}
	if sigmaZ != 1 {
		l.sigma *= sigmaZ
	}
	if method == MethodExact {
		l.lclN, l.uclN = exactLimits(l.dist, AlphaForK(k)/2)
		l.ucl, l.lcl = float64(l.uclN), float64(l.lclN)
		if m.perUnit() {
			l.ucl /= nf
			l.lcl /= nf
		}
		return l
	}
	l.ucl = min(m.top(nf), l.center+k*l.sigma)
	l.lcl = max(0, l.center-k*l.sigma)
	return l
}

// tail returns the tail probability of count (countDist.tail), computed
// once per count.
func (l *lotLimits) tail(count int64) float64 {
	t, ok := l.tails[count]
	if !ok {
		t = l.dist.tail(count)
		l.tails[count] = t
	}
	return t
}

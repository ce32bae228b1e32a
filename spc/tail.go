package spc

import (
	"maps"
	"math"
	"slices"
)

// countDist is the distribution of a lot's count when the process runs at
// its centre line: binomial(n, p) for units (p and np charts) or
// Poisson(mean) for defects (u and c charts).
type countDist struct {
	binomial bool
	n        int64
	p        float64
	mean, sd float64
}

// binomialDist returns the count distribution of a lot of n units at the
// fraction nonconforming p.
func binomialDist(n int64, p float64) countDist {
	mean := float64(n) * p
	return countDist{binomial: true, n: n, p: p, mean: mean, sd: math.Sqrt(mean * (1 - p))}
}

// poissonDist returns the count distribution of defects with the given mean.
func poissonDist(mean float64) countDist {
	return countDist{mean: mean, sd: math.Sqrt(mean)}
}

func (d countDist) degenerate() bool {
	if d.binomial {
		return d.p <= 0 || d.p >= 1
	}
	return d.mean <= 0
}

// tail returns the one-sided probability, under the centre line, of a
// count at least as far from the mean as count in the direction observed:
// P(X ≥ count) at or above the mean, P(X ≤ count) below it (Point.TailP).
func (d countDist) tail(count int64) float64 {
	if float64(count) >= d.mean {
		return d.upper(count)
	}
	return d.lower(count)
}

// lower returns P(X ≤ k).
func (d countDist) lower(k int64) float64 {
	switch {
	case k < 0:
		return 0
	case d.degenerate():
		if float64(k) >= d.mean {
			return 1
		}
		return 0
	case d.binomial && k >= d.n:
		return 1
	case float64(k) >= d.mean:
		return 1 - d.upper(k+1)
	}
	return d.sumDown(k)
}

// upper returns P(X ≥ k).
func (d countDist) upper(k int64) float64 {
	switch {
	case k <= 0:
		return 1
	case d.degenerate():
		if float64(k) <= d.mean {
			return 1
		}
		return 0
	case d.binomial && k > d.n:
		return 0
	case float64(k) < d.mean:
		return 1 - d.lower(k-1)
	}
	return d.sumUp(k)
}

// sumUp returns P(X ≥ k) for a count k at or above the mean, and sumDown
// P(X ≤ k) for a count below it, as the probability of k times the sum of
// the ratios of the probabilities of the counts beyond it,
//
//	binomial: P(j+1)/P(j) = (n−j)/(j+1) · p/(1−p),   Poisson: P(j+1)/P(j) = λ/(j+1)
//
// (Johnson, Kemp & Kotz, Univariate Discrete Distributions, 3rd ed.,
// eqs. 3.3 and 4.5), summed until the rest cannot change the sum. Away
// from the mean the ratios fall, so the rest after a term t with ratio
// ρ < 1 is at most t·ρ/(1−ρ). Every term is positive, so a small tail
// keeps its relative accuracy; no subtraction is made.
func (d countDist) sumUp(k int64) float64 {
	t := d.pmf(k)
	sum := t
	q := d.p / (1 - d.p)
	for j := k; t > 0 && (!d.binomial || j < d.n); j++ {
		var rho float64
		if d.binomial {
			rho = float64(d.n-j) / float64(j+1) * q
		} else {
			rho = d.mean / float64(j+1)
		}
		t *= rho
		sum += t
		if rho < 1 && t*rho/(1-rho) < 0x1p-60*sum {
			break
		}
	}
	return min(sum, 1)
}

func (d countDist) sumDown(k int64) float64 {
	t := d.pmf(k)
	sum := t
	q := d.p / (1 - d.p)
	for j := k; t > 0 && j > 0; j-- {
		var rho float64
		if d.binomial {
			rho = float64(j) / (float64(d.n-j+1) * q)
		} else {
			rho = float64(j) / d.mean
		}
		t *= rho
		sum += t
		if rho < 1 && t*rho/(1-rho) < 0x1p-60*sum {
			break
		}
	}
	return min(sum, 1)
}

// pmf returns P(X = k) by the saddle-point form of Loader (2000), "Fast
// and accurate computation of binomial probabilities", which keeps full
// relative accuracy for lots of any size:
//
//	binomial: e^(δ(n) − δ(k) − δ(n−k) − D(k, np) − D(n−k, n(1−p))) · √(n / (2πk(n−k)))
//	Poisson:  e^(−δ(k) − D(k, λ)) / √(2πk)
//
// with δ the error of Stirling's formula (stirlerr) and D the deviance
// term (bd0).
func (d countDist) pmf(k int64) float64 {
	if d.binomial {
		n, p := d.n, d.p
		switch k {
		case 0:
			return math.Exp(float64(n) * math.Log1p(-p))
		case n:
			return math.Exp(float64(n) * math.Log(p))
		}
		nf, kf := float64(n), float64(k)
		lc := stirlerr(nf) - stirlerr(kf) - stirlerr(nf-kf) - bd0(kf, nf*p) - bd0(nf-kf, nf*(1-p))
		lf := math.Log(2*math.Pi) + math.Log(kf) + math.Log1p(-kf/nf)
		return math.Exp(lc - 0.5*lf)
	}
	if k == 0 {
		return math.Exp(-d.mean)
	}
	kf := float64(k)
	return math.Exp(-stirlerr(kf)-bd0(kf, d.mean)) / math.Sqrt(2*math.Pi*kf)
}

// stirlerr returns δ(n) = ln n! − ln(√(2πn)·(n/e)ⁿ), from ln Γ for small
// n and from the Stirling series (1/12n − 1/360n³ + 1/1260n⁵ − …) above
// (Loader 2000).
func stirlerr(n float64) float64 {
	const (
		s0 = 1.0 / 12
		s1 = 1.0 / 360
		s2 = 1.0 / 1260
		s3 = 1.0 / 1680
		s4 = 1.0 / 1188
	)
	if n <= 15 {
		lg, _ := math.Lgamma(n + 1)
		return lg - (n+0.5)*math.Log(n) + n - 0.5*math.Log(2*math.Pi)
	}
	nn := n * n
	switch {
	case n > 500:
		return (s0 - s1/nn) / n
	case n > 80:
		return (s0 - (s1-s2/nn)/nn) / n
	case n > 35:
		return (s0 - (s1-(s2-s3/nn)/nn)/nn) / n
	}
	return (s0 - (s1-(s2-(s3-s4/nn)/nn)/nn)/nn) / n
}

// bd0 returns D(x, m) = x·ln(x/m) + m − x without cancellation: by its
// series in v = (x−m)/(x+m) when x is near m (Loader 2000).
func bd0(x, m float64) float64 {
	if math.Abs(x-m) < 0.1*(x+m) {
		v := (x - m) / (x + m)
		s := (x - m) * v
		ej := 2 * x * v
		v *= v
		for j := 1; j < 1000; j++ {
			ej *= v
			s1 := s + ej/float64(2*j+1)
			if s1 == s {
				return s1
			}
			s = s1
		}
		return s
	}
	return x*math.Log(x/m) + m - x
}

// eachCount calls fn with each count k a lot may have while the rate is
// p, with its probability: the lot size n drawn from sizes (each entry
// equally likely; a c chart's lot is its own unit, n = 1), the count
// binomial (p, np charts) or Poisson (u, c). Counts beyond 12 standard
// deviations of the mean are left out. The sizes are taken in increasing
// order, so that sums over the counts come out the same to the last digit
// every time.
func eachCount(ch Chart, p float64, sizes []int64, fn func(n, k int64, prob float64)) {
	weight := map[int64]float64{}
	for _, n := range sizes {
		if ch == ChartC {
			n = 1
		}
		weight[n] += 1 / float64(len(sizes))
	}
	for _, n := range slices.Sorted(maps.Keys(weight)) {
		wt := weight[n]
		var d countDist
		switch ch {
		case ChartP, ChartNP:
			d = binomialDist(n, p)
		case ChartU:
			d = poissonDist(float64(n) * p)
		default:
			d = poissonDist(p)
		}
		lo := max(0, int64(math.Floor(d.mean-12*d.sd-10)))
		hi := int64(math.Ceil(d.mean + 12*d.sd + 10))
		if d.binomial {
			hi = min(hi, n)
		}
		for k := lo; k <= hi; k++ {
			if pr := d.pmf(k); pr > 0 {
				fn(n, k, wt*pr)
			}
		}
	}
}

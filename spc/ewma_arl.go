package spc

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// ewmaCells is the number of states of the Markov chain between the
// EWMA's limits. The chain puts Z at the middle of its cell, an error
// that shrinks with the square of the cell's width: 300 cells keep the
// ARLs of the usual designs within 1 % of the integral equation's
// (TestEWMAARLNormalLimit).
const ewmaCells = 300

// SteadyLimits returns the EWMA's limits at their steady width, those
// Run's limits approach after the first lots, when the lot sizes are
// drawn from sizes (each entry equally likely; the c chart ignores them):
//
//	P0 ± L·√(λ/(2 − λ)·σ̄²),  σ̄² the mean over the sizes of a lot's variance at P0
//
// the lower clamped at 0.
func (e EWMA) SteadyLimits(sizes []int64) (lcl, ucl float64) {
	var mean float64
	for _, n := range sizes {
		mean += e.variance(float64(n)) / float64(len(sizes))
	}
	half := e.L * math.Sqrt(e.Lambda/(2-e.Lambda)*mean)
	return max(0, e.P0-half), e.P0 + half
}

// variance is the variance of a lot's rate at P0 for a lot of n units.
func (e EWMA) variance(n float64) float64 {
	switch e.Chart {
	case ChartP, ChartNP:
		return e.P0 * (1 - e.P0) / n
	case ChartU:
		return e.P0 / n
	}
	return e.P0
}

// ARL returns the EWMA's average run length, in lots from Z₀ = P0, while
// the rate is p (in P0's units), the lot sizes drawn from sizes, with
// the limits at their steady width (SteadyLimits). ARL(P0) is the mean
// number of lots between false alarms. Run's limits are narrower over
// the first lots, so a false alarm comes a little sooner there than this
// says; the steady width is what the published designs use.
//
// It comes from the Markov chain of Lucas & Saccucci (1990, Technometrics
// 32, 1–12): the band between the limits is cut into ewmaCells cells, Z
// stands at the middle of its cell, and a lot moves it to the cell of
// λ·x + (1 − λ)·Z, or out of the band (a signal), x the lot's rate from
// its binomial (p, np) or Poisson (u, c) count. The ARL from the start's
// cell solves (I − Q)·L = 1, with Q the moves between cells.
func (e EWMA) ARL(p float64, sizes []int64) float64 {
	lcl, ucl := e.SteadyLimits(sizes)
	m := ewmaCells
	w := (ucl - lcl) / float64(m)
	moves := e.rateMoves(p, sizes, w)
	q := mat.NewDense(m, m, nil)
	for i := range m {
		q.Set(i, i, 1)
		z := lcl + (float64(i)+0.5)*w
		for _, mv := range moves {
			next := e.Lambda*mv.x + (1-e.Lambda)*z
			if next > ucl || next < lcl {
				continue // a signal
			}
			j := min(int((next-lcl)/w), m-1)
			q.Set(i, j, q.At(i, j)-mv.prob)
		}
	}
	ones := mat.NewVecDense(m, nil)
	for i := range m {
		ones.SetVec(i, 1)
	}
	var l mat.VecDense
	if err := l.SolveVec(q, ones); err != nil {
		return math.Inf(1)
	}
	return l.AtVec(min(int((e.P0-lcl)/w), m-1))
}

// ewmaMove is a lot's rate and its probability.
type ewmaMove struct{ x, prob float64 }

// rateMoves returns the rates a lot may have while the rate is p, the
// lot size drawn from sizes, with their probabilities. Rates closer than
// a quarter cell (w) of λ·x are merged at their mean: they move Z into
// nearly the same place, and a process with a thousand lot sizes would
// otherwise give the chain a thousand count distributions to walk.
func (e EWMA) rateMoves(p float64, sizes []int64, w float64) []ewmaMove {
	bin := w / (4 * e.Lambda)
	merged := map[int64]*ewmaMove{}
	eachCount(e.Chart, p, sizes, func(n, k int64, prob float64) {
		x := float64(k) / float64(n)
		b := int64(math.Round(x / bin))
		mv := merged[b]
		if mv == nil {
			mv = &ewmaMove{}
			merged[b] = mv
		}
		mv.x += prob * x // the weighted sum, until divided below
		mv.prob += prob
	})
	out := make([]ewmaMove, 0, len(merged))
	for _, mv := range merged {
		out = append(out, ewmaMove{mv.x / mv.prob, mv.prob})
	}
	return out
}

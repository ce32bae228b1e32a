package spc

import (
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"

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
	for _, b := range slices.Sorted(maps.Keys(merged)) { // in order: the same sums every time
		mv := merged[b]
		out = append(out, ewmaMove{mv.x / mv.prob, mv.prob})
	}
	return out
}

// ewmaGridStep is the step of the grid of widths DesignEWMA searches,
// and ewmaMaxWidth its end.
const (
	ewmaGridStep = 0.01
	ewmaMaxWidth = 6
)

// DesignEWMA returns the EWMA of chart ch with weight lambda whose width
// L is the smallest multiple of 0.01 (up to 6) giving an in-control ARL
// of at least arl0 lots, the lot sizes drawn from sizes (see ARL); its
// ARL0 is set. Lucas & Saccucci (1990) design their EWMAs so: the weight
// for the shift to be caught, then the width for the false alarms
// wanted.
func DesignEWMA(ch Chart, p0, lambda float64, sizes []int64, arl0 float64) (*EWMA, error) {
	if err := CheckEWMA(ch, p0, lambda, 1); err != nil {
		return nil, err
	}
	if len(sizes) == 0 {
		return nil, errors.New("an EWMA needs at least one lot size")
	}
	if !(arl0 >= 1) || math.IsInf(arl0, 0) {
		return nil, fmt.Errorf("target ARL0 %v is not a number of lots of 1 or more", arl0)
	}
	e := &EWMA{Chart: ch, P0: p0, Lambda: lambda}
	arlAt := func(step int) float64 {
		e.L = float64(step) * ewmaGridStep
		return e.ARL(p0, sizes)
	}
	hi := int(ewmaMaxWidth / ewmaGridStep)
	if arlAt(hi) < arl0 {
		return nil, fmt.Errorf("no width up to %g reaches an in-control ARL of %g lots", float64(ewmaMaxWidth), arl0)
	}
	lo := 0 // an ARL below the target at lo: a width of 0 signals at once
	for hi-lo > 1 {
		mid := (lo + hi) / 2
		if arlAt(mid) >= arl0 {
			hi = mid
		} else {
			lo = mid
		}
	}
	e.ARL0 = arlAt(hi)
	return e, nil
}

// EWMAWeights are the weights BestEWMA chooses from: the usual range
// (Montgomery §9.2: 0.05 to 0.25) and 0.4 for larger shifts.
var EWMAWeights = []float64{0.05, 0.1, 0.2, 0.4}

// BestEWMA returns, of the EWMAs with the weights EWMAWeights, each
// designed for an in-control ARL of at least arl0 (DesignEWMA), the one
// that catches a shift to p1 soonest, and its ARL there.
func BestEWMA(ch Chart, p0, p1 float64, sizes []int64, arl0 float64) (*EWMA, float64, error) {
	var best *EWMA
	bestARL := math.Inf(1)
	for _, lambda := range EWMAWeights {
		e, err := DesignEWMA(ch, p0, lambda, sizes, arl0)
		if err != nil {
			return nil, 0, err
		}
		if arl1 := e.ARL(p1, sizes); arl1 < bestARL {
			best, bestARL = e, arl1
		}
	}
	return best, bestARL, nil
}

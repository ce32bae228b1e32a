package spc

import "math"

// laneyD2 is d₂ for moving ranges of two, the constant Laney (2002) uses
// to turn the mean moving range of z into σ_z.
const laneyD2 = 1.128

// spread accumulates, over the baseline lots in order, what the
// dispersion check and Laney's σ_z are made of: the Pearson chi-square
// Σzᵢ² and the moving ranges |zᵢ − zᵢ₋₁| of the sigma-method zᵢ.
type spread struct {
	chi      float64
	m        int
	mr       float64
	nmr      int
	prev     float64
	havePrev bool
}

// add takes in the sigma-method z of the next baseline lot.
func (s *spread) add(z float64) {
	s.m++
	s.chi += z * z
	if s.havePrev {
		s.mr += math.Abs(z - s.prev)
		s.nmr++
	}
	s.prev, s.havePrev = z, true
}

// sigmaZ is Laney's σ_z (Laney 2002, Quality Engineering 14(4), 531–537):
// the mean moving range of z divided by d₂ = 1.128; 0 with fewer than two
// lots.
func (s *spread) sigmaZ() float64 {
	if s.nmr == 0 {
		return 0
	}
	return s.mr / float64(s.nmr) / laneyD2
}

// df is the degrees of freedom of the chi-square: m − 1 when the centre
// was estimated from the lots, m when a standard gives it.
func (s *spread) df(standard bool) int {
	if standard {
		return s.m
	}
	return s.m - 1
}

// baselineSpread returns the spread of the sigma-method z of the lots
// not excluded, in order.
func baselineSpread(lots []Lot, m model, excluded []bool) spread {
	var s spread
	for i, l := range lots {
		if excluded != nil && excluded[i] {
			continue
		}
		n := float64(l.Inspected)
		s.add(zOf(m.value(n, float64(l.Count))-m.center(n), m.sigma(n)))
	}
	return s
}

package spc

import "math"

// cChart is the c chart of defects per lot (Montgomery, Introduction to
// Statistical Quality Control, §7.3.1):
//
//	value cᵢ,  centre c̄,  σ = √c̄
//
// with c̄ = Σc/m over the m lots. It assumes the same amount inspected in
// every lot (a warning says so when the sizes differ). The count is
// Poisson(c̄) at the centre line.
type cChart struct{ c float64 }

func (m cChart) value(n, c float64) float64 { return c }
func (m cChart) center(n float64) float64   { return m.c }
func (m cChart) sigma(n float64) float64    { return math.Sqrt(m.c) }
func (m cChart) top(n float64) float64      { return math.Inf(1) }
func (m cChart) perUnit() bool              { return false }
func (m cChart) count(n int64) countDist    { return poissonDist(m.c) }
func (m cChart) small(n float64) bool       { return m.c < minExpected }

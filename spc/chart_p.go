package spc

import "math"

// pChart is the p chart of the fraction nonconforming of each lot
// (Montgomery, Introduction to Statistical Quality Control, §7.2):
//
//	value p̂ᵢ = dᵢ/nᵢ,  centre p̄,  σᵢ = √(p̄(1−p̄)/nᵢ)
//
// with p̄ = Σd/Σn. The count dᵢ is binomial(nᵢ, p̄) at the centre line.
type pChart struct{ p float64 }

func (m pChart) value(n, c float64) float64 { return c / n }
func (m pChart) center(n float64) float64   { return m.p }
func (m pChart) sigma(n float64) float64    { return math.Sqrt(m.p * (1 - m.p) / n) }
func (m pChart) top(n float64) float64      { return 1 }
func (m pChart) perUnit() bool              { return true }
func (m pChart) count(n int64) countDist    { return binomialDist(n, m.p) }
func (m pChart) small(n float64) bool       { return n*m.p < minExpected || n*(1-m.p) < minExpected }

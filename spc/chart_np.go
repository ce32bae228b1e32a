package spc

import "math"

// npChart is the np chart of the number nonconforming in each lot
// (Montgomery, Introduction to Statistical Quality Control, §7.2.2):
//
//	value dᵢ,  centre nᵢp̄,  σᵢ = √(nᵢp̄(1−p̄))
//
// with p̄ = Σd/Σn. It is meant for lots of one size; lots of other sizes
// get their own centre and limits (and a warning). The count is
// binomial(nᵢ, p̄) at the centre line.
type npChart struct{ p float64 }

func (m npChart) value(n, c float64) float64 { return c }
func (m npChart) center(n float64) float64   { return n * m.p }
func (m npChart) sigma(n float64) float64    { return math.Sqrt(n * m.p * (1 - m.p)) }
func (m npChart) top(n float64) float64      { return n }
func (m npChart) perUnit() bool              { return false }
func (m npChart) count(n int64) countDist    { return binomialDist(n, m.p) }
func (m npChart) small(n float64) bool       { return n*m.p < minExpected || n*(1-m.p) < minExpected }

package spc

import "math"

// uChart is the u chart of defects per unit inspected (Montgomery,
// Introduction to Statistical Quality Control, §7.3.2):
//
//	value uᵢ = cᵢ/nᵢ,  centre ū,  σᵢ = √(ū/nᵢ)
//
// with ū = Σc/Σn. The count cᵢ is Poisson(nᵢū) at the centre line.
type uChart struct{ u float64 }

func (m uChart) value(n, c float64) float64 { return c / n }
func (m uChart) center(n float64) float64   { return m.u }
func (m uChart) sigma(n float64) float64    { return math.Sqrt(m.u / n) }
func (m uChart) top(n float64) float64      { return math.Inf(1) }
func (m uChart) perUnit() bool              { return true }
func (m uChart) count(n int64) countDist    { return poissonDist(float64(n) * m.u) }
func (m uChart) small(n float64) bool       { return n*m.u < minExpected }

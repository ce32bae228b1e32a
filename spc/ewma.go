package spc

import (
	"fmt"
	"math"
)

// EWMA is an exponentially weighted moving average of the lots' rates,
// which catches small sustained shifts that single lots do not show
// (Roberts 1959, Technometrics 1, 239–250; for proportions with varying
// lot size, Montgomery, Introduction to Statistical Quality Control,
// §9.2). With xᵢ the lot's rate (p̂ for p and np, defects per unit for u,
// the count for c):
//
//	Z₀ = p0,  Zᵢ = λ·xᵢ + (1 − λ)·Zᵢ₋₁
//	Var(Zᵢ) = Σⱼ≤ᵢ λ²(1 − λ)^(2(i−j))·σⱼ²,  σⱼ² = p0(1 − p0)/nⱼ (p, np), u0/nⱼ (u), c0 (c)
//	limits p0 ± L·√Var(Zᵢ), the lower clamped at 0
//
// A lot signals when Zᵢ is strictly beyond a limit. The EWMA does not
// restart after a signal.
type EWMA struct {
	Chart Chart
	P0    float64
	// Lambda is the weight of the newest lot, in (0, 1]; L the width of
	// the limits in standard deviations of Z.
	Lambda, L float64
	// ARL0 is the mean number of lots between false alarms while the
	// rate stays at P0 (ARL, for the lot sizes watched); 0 when not
	// worked out.
	ARL0 float64
}

// The usual EWMA design (Montgomery §9.2: λ between 0.05 and 0.25, L = 3
// for an in-control ARL near that of a 3σ Shewhart chart): common
// practice.
const (
	DefaultEWMALambda = 0.2
	DefaultEWMAWidth  = 3
)

// EWMAPoint is the statistic and its limits after one lot.
type EWMAPoint struct {
	Lot      string
	Z        float64
	UCL, LCL float64
	Signal   bool
}

// CheckEWMA reports what is wrong with an EWMA's settings, naming the
// setting ("lambda", "width" or "p0") and its value.
func CheckEWMA(ch Chart, p0, lambda, width float64) error {
	switch {
	case !(lambda > 0 && lambda <= 1):
		return &FieldError{Field: "lambda", Value: fmt.Sprint(lambda), Reason: "is not a weight above 0 and at most 1"}
	case !(width > 0) || math.IsInf(width, 0):
		return &FieldError{Field: "width", Value: fmt.Sprint(width), Reason: "is not a width above 0"}
	case !(p0 >= 0) || math.IsInf(p0, 0) || ch.CountsUnits() && p0 > 1:
		return &FieldError{Field: "p0", Value: fmt.Sprint(p0), Reason: "is not a centre the chart can have"}
	}
	return nil
}

// Run applies the EWMA to the lots in order, one point per lot.
func (e EWMA) Run(lots []Lot) []EWMAPoint {
	pts := make([]EWMAPoint, len(lots))
	z, v := e.P0, 0.0
	keep := (1 - e.Lambda) * (1 - e.Lambda)
	for i, l := range lots {
		n, c := float64(l.Inspected), float64(l.Count)
		var x, s2 float64
		switch e.Chart {
		case ChartP, ChartNP:
			x, s2 = c/n, e.P0*(1-e.P0)/n
		case ChartU:
			x, s2 = c/n, e.P0/n
		default:
			x, s2 = c, e.P0
		}
		z = e.Lambda*x + (1-e.Lambda)*z
		v = keep*v + e.Lambda*e.Lambda*s2
		half := e.L * math.Sqrt(v)
		p := EWMAPoint{Lot: l.Code, Z: z, UCL: e.P0 + half, LCL: max(0, e.P0-half)}
		p.Signal = z > p.UCL || z < p.LCL
		pts[i] = p
	}
	return pts
}

package spc

import (
	"errors"
	"fmt"
	"math"
	"strconv"
)

// Plan is the exact behaviour of a p/np chart with k-sigma limits for lots
// of N units when the fraction nonconforming is P0 (in control) or P1
// (shifted).
//
// A lot signals when its count of nonconforming units is more than
// UCLCount or fewer than LCLCount. UCLCount = N when no count can signal
// high; LCLCount = −1 when no count can signal low (the lower limit is at
// or below zero), otherwise LCLCount ≥ 1.
//
// ARL0 and ARL1 are average run lengths, the mean number of lots until a
// signal, 1/P(signal), from the exact binomial distribution; +Inf when no
// lot can signal. ARL1 is 0 until a shift is set with WithShift.
type Plan struct {
	P0, P1          float64
	N               int64
	K               float64
	UCL, LCL        float64 // the limits as fractions, p0 ± k·√(p0(1−p0)/n)
	UCLCount        int64
	LCLCount        int64
	ARL0, ARL1      float64
	MinNPositiveLCL int64
}

// DefaultMinARL0 is the floor on ARL0, the average number of lots between
// false alarms of an in-control process, below which no lot size is
// recommended unless the user lowers it explicitly. It is a default of our
// own (common practice, no source): a chart that raises a false alarm
// more often than once in 100 lots teaches its readers to ignore it. For
// scale, 3-sigma limits on a normally distributed statistic give an ARL0
// of 370 (Montgomery, Introduction to Statistical Quality Control, §5.3);
// limits on small counts often give far less.
const DefaultMinARL0 = 100

// ErrNoPlan is returned (wrapped) by SmallestN when no lot size up to the
// search bound meets the target.
var ErrNoPlan = errors.New("no lot size meets the target")

// CheckPlanInput reports what is wrong with the inputs of PlanLimits, or nil.
func CheckPlanInput(p0 float64, n int64, k float64) error {
	switch {
	case !(p0 > 0 && p0 < 1):
		return &FieldError{Field: "p0", Value: strconv.FormatFloat(p0, 'g', -1, 64), Reason: "must be between 0 and 1, exclusive"}
	case n <= 0:
		return &FieldError{Field: "n", Value: strconv.FormatInt(n, 10), Reason: "must be a whole number greater than 0"}
	case !(k > 0) || math.IsInf(k, 1):
		return &FieldError{Field: "sigma", Value: strconv.FormatFloat(k, 'g', -1, 64), Reason: "must be a number greater than 0"}
	}
	return nil
}

// nearInt snaps x to the nearest integer when it is within rounding error
// of it, so that a limit that is exactly a whole count in decimal terms
// (e.g. 0.1 + 3·√(0.1·0.9/100) = 0.19 at n = 100) is treated as equal to it.
func nearInt(x float64) float64 {
	r := math.Round(x)
	if math.Abs(x-r) <= 1e-9*math.Max(1, math.Abs(x)) {
		return r
	}
	return x
}

// PlanLimits returns the plan for k-sigma limits p0 ± k·√(p0(1−p0)/n) on
// lots of n units (Montgomery, Introduction to Statistical Quality Control,
// ch. 7: the fraction nonconforming chart), expressed as counts: a lot with
// d nonconforming signals when d/n > UCL or d/n < LCL, so UCLCount is the
// largest d with d ≤ n·UCL and LCLCount the smallest d with d ≥ n·LCL. ARL0
// is 1/P(signal | p0) from the binomial(n, p0).
//
// Inputs outside the domain of CheckPlanInput give a Plan whose ARLs are NaN.
func PlanLimits(p0 float64, n int64, k float64) Plan {
	pl := Plan{P0: p0, N: n, K: k}
	if CheckPlanInput(p0, n, k) != nil {
		pl.ARL0, pl.ARL1 = math.NaN(), math.NaN()
		pl.UCL, pl.LCL = math.NaN(), math.NaN()
		return pl
	}
	nf := float64(n)
	sd := math.Sqrt(p0 * (1 - p0) / nf)
	pl.UCL, pl.LCL = p0+k*sd, p0-k*sd
	// n·UCL = n·p0 + k·√(n·p0·(1−p0)): the same value, fewer roundings.
	spread := k * math.Sqrt(nf*p0*(1-p0))
	hi := nearInt(nf*p0 + spread)
	lo := nearInt(nf*p0 - spread)
	pl.UCLCount = n
	if hi < nf {
		pl.UCLCount = int64(math.Floor(hi))
	}
	pl.LCLCount = -1
	if lo > 0 {
		pl.LCLCount = int64(math.Ceil(lo))
	}
	pl.MinNPositiveLCL = MinNPositiveLCL(p0, k)
	pl.ARL0 = 1 / pl.signalProb(p0)
	return pl
}

// WithShift returns the plan with P1 = p1 and ARL1 = 1/P(signal | p1).
func (pl Plan) WithShift(p1 float64) Plan {
	pl.P1 = p1
	if !(p1 >= 0 && p1 <= 1) || math.IsNaN(pl.ARL0) {
		pl.ARL1 = math.NaN()
		return pl
	}
	pl.ARL1 = 1 / pl.signalProb(p1)
	return pl
}

// SignalProb returns the probability that one lot signals when the
// fraction nonconforming is p: P(D > UCLCount) + P(D < LCLCount) for D
// binomial(N, p).
func (pl Plan) SignalProb(p float64) float64 { return pl.signalProb(p) }

func (pl Plan) signalProb(p float64) float64 {
	prob := binomSF(pl.UCLCount, pl.N, p)
	if pl.LCLCount > 0 {
		prob += binomCDF(pl.LCLCount-1, pl.N, p)
	}
	return prob
}

// MinNPositiveLCL returns the smallest lot size n for which the k-sigma
// lower limit p0 − k·√(p0(1−p0)/n) is above zero, so that a lot with too
// few nonconforming units can signal: n > k²(1−p0)/p0 (Montgomery,
// Introduction to Statistical Quality Control, §7.2).
func MinNPositiveLCL(p0, k float64) int64 {
	if !(p0 > 0 && p0 < 1) || !(k > 0) {
		return -1
	}
	bound := nearInt(k * k * (1 - p0) / p0)
	return int64(math.Floor(bound)) + 1
}

// SmallestN returns the smallest lot size n ≤ maxN whose k-sigma chart for
// p0 has ARL1 ≤ targetARL1 at the shifted fraction p1.
//
// Because counts are whole numbers, the ARL is not monotone in n: each time
// n·UCL or n·LCL crosses a whole number the limit count jumps, and ARL1 can
// rise again for a larger n. A bisection could therefore miss the smallest
// n, so every n from 1 up is evaluated in turn (the cost is two incomplete
// beta evaluations per n). A larger n than the one returned may fail the
// target again.
func SmallestN(p0, p1, k, targetARL1 float64, maxN int64) (int64, error) {
	return SmallestNWithARL0(p0, p1, k, targetARL1, 0, maxN)
}

// SmallestNWithARL0 is SmallestN with a floor on false alarms: the lot
// size must also give ARL0 ≥ minARL0 at p0. Small lots can meet an ARL1
// target only because their upper limit count is so low that in-control
// lots signal often too (p0 = 0.012, p1 = 0.03, target 5 lots: n = 52 with
// ARL0 ≈ 40); a floor keeps the plan honest about false alarms.
func SmallestNWithARL0(p0, p1, k, targetARL1, minARL0 float64, maxN int64) (int64, error) {
	if !(minARL0 >= 0) {
		return 0, &FieldError{Field: "min-arl0", Value: strconv.FormatFloat(minARL0, 'g', -1, 64), Reason: "must be a number of lots, 0 or more"}
	}
	if err := CheckPlanInput(p0, 1, k); err != nil {
		return 0, err
	}
	switch {
	case !(p1 > 0 && p1 < 1):
		return 0, &FieldError{Field: "p1", Value: strconv.FormatFloat(p1, 'g', -1, 64), Reason: "must be between 0 and 1, exclusive"}
	case p1 == p0:
		return 0, &FieldError{Field: "p1", Value: strconv.FormatFloat(p1, 'g', -1, 64), Reason: "must differ from p0"}
	case !(targetARL1 >= 1):
		return 0, &FieldError{Field: "arl1", Value: strconv.FormatFloat(targetARL1, 'g', -1, 64), Reason: "must be a number of lots, 1 or more"}
	case maxN < 1:
		return 0, &FieldError{Field: "max-n", Value: strconv.FormatInt(maxN, 10), Reason: "must be a whole number greater than 0"}
	}
	for n := int64(1); n <= maxN; n++ {
		pl := PlanLimits(p0, n, k).WithShift(p1)
		if pl.ARL1 <= targetARL1 && pl.ARL0 >= minARL0 {
			return n, nil
		}
	}
	if minARL0 > 0 {
		return 0, fmt.Errorf("%w: no n up to %d has ARL1 ≤ %g lots with ARL0 ≥ %g lots", ErrNoPlan, maxN, targetARL1, minARL0)
	}
	return 0, fmt.Errorf("%w: ARL1 stays above %g lots for every n up to %d", ErrNoPlan, targetARL1, maxN)
}

// ARLCurve returns the plan with shift p1 for each lot size in ns, for
// drawing ARL against n.
func ARLCurve(p0, p1, k float64, ns []int64) []Plan {
	out := make([]Plan, len(ns))
	for i, n := range ns {
		out[i] = PlanLimits(p0, n, k).WithShift(p1)
	}
	return out
}

package spc

import (
	"errors"
	"fmt"
	"math"
	"strconv"

	"gonum.org/v1/gonum/stat/distuv"
)

// IntervalMethod names a way of computing a confidence interval for a rate.
type IntervalMethod string

// The interval methods. The first five are for a proportion d/n; the last
// is for a count of defects per unit (a Poisson rate).
const (
	IntervalWilson         IntervalMethod = "wilson"
	IntervalClopperPearson IntervalMethod = "clopper-pearson"
	IntervalAgrestiCoull   IntervalMethod = "agresti-coull"
	IntervalJeffreys       IntervalMethod = "jeffreys"
	IntervalWald           IntervalMethod = "wald"
	IntervalPoissonExact   IntervalMethod = "poisson-exact"
)

// ProportionMethods lists the methods ProportionInterval accepts, the
// default (Wilson) first.
var ProportionMethods = []IntervalMethod{
	IntervalWilson, IntervalClopperPearson, IntervalAgrestiCoull, IntervalJeffreys, IntervalWald,
}

// ErrUnknownMethod is returned (wrapped) for a method name that is not one
// of the interval methods.
var ErrUnknownMethod = errors.New("unknown interval method")

// ParseIntervalMethod returns the interval method named by s.
func ParseIntervalMethod(s string) (IntervalMethod, error) {
	switch m := IntervalMethod(s); m {
	case IntervalWilson, IntervalClopperPearson, IntervalAgrestiCoull, IntervalJeffreys, IntervalWald, IntervalPoissonExact:
		return m, nil
	}
	return "", fmt.Errorf("%w %q (want wilson, clopper-pearson, agresti-coull, jeffreys, wald or poisson-exact)", ErrUnknownMethod, s)
}

// String returns the method's name as written in the literature.
func (m IntervalMethod) String() string {
	switch m {
	case IntervalWilson:
		return "Wilson"
	case IntervalClopperPearson:
		return "Clopper-Pearson"
	case IntervalAgrestiCoull:
		return "Agresti-Coull"
	case IntervalJeffreys:
		return "Jeffreys"
	case IntervalWald:
		return "Wald"
	case IntervalPoissonExact:
		return "exact Poisson (Garwood)"
	}
	return string(m)
}

// Caveat returns a warning to print beside an interval of this method, or
// "" when the method needs none. The Wald interval always carries one: its
// coverage is poor for small n and for rates near 0 or 1, and erratic even
// for large n (Brown, Cai & DasGupta 2001, Statistical Science 16(2):101–133).
func (m IntervalMethod) Caveat() string {
	if m == IntervalWald {
		return "The Wald interval covers the true rate much less often than stated when " +
			"the number inspected is small or the rate is near 0 or 1 (Brown, Cai & " +
			"DasGupta 2001, Statistical Science 16(2)); prefer Wilson."
	}
	return ""
}

// Interval is a confidence interval for a rate: Lower ≤ Estimate ≤ Upper
// at confidence Level.
type Interval struct {
	Method   IntervalMethod
	Level    float64
	Estimate float64
	Lower    float64
	Upper    float64
}

// checkLevel reports whether level is a usable confidence level.
func checkLevel(level float64) error {
	if !(level > 0 && level < 1) {
		return &FieldError{Field: "level", Value: strconv.FormatFloat(level, 'g', -1, 64), Reason: "must be between 0 and 1, exclusive"}
	}
	return nil
}

// normalQuantile returns z with P(Z ≤ z) = 1 − (1−level)/2 for a standard
// normal Z: the two-sided critical value for the level.
func normalQuantile(level float64) float64 {
	return distuv.UnitNormal.Quantile(1 - (1-level)/2)
}

// ProportionInterval returns the confidence interval at the given level for
// the proportion d/n by method m (one of ProportionMethods). The limits are
// clamped to [0, 1]; at d = 0 the lower limit is exactly 0 and at d = n the
// upper limit is exactly 1 for every method except Wald, whose limits
// collapse to the estimate there (one reason it carries a caveat).
func ProportionInterval(d, n int64, level float64, m IntervalMethod) (Interval, error) {
	switch {
	case n <= 0:
		return Interval{}, &FieldError{Field: "inspected", Value: strconv.FormatInt(n, 10), Reason: "must be a whole number greater than 0"}
	case d < 0:
		return Interval{}, &FieldError{Field: "defective", Value: strconv.FormatInt(d, 10), Reason: "must not be negative"}
	case d > n:
		return Interval{}, &FieldError{Field: "defective", Value: strconv.FormatInt(d, 10), Reason: fmt.Sprintf("is more than the %d units inspected", n)}
	}
	if err := checkLevel(level); err != nil {
		return Interval{}, err
	}
	iv := Interval{Method: m, Level: level, Estimate: float64(d) / float64(n)}
	switch m {
	case IntervalWilson:
		iv.Lower, iv.Upper = wilson(d, n, level)
	case IntervalClopperPearson:
		iv.Lower, iv.Upper = clopperPearson(d, n, level)
	case IntervalAgrestiCoull:
		iv.Lower, iv.Upper = agrestiCoull(d, n, level)
	case IntervalJeffreys:
		iv.Lower, iv.Upper = jeffreys(d, n, level)
	case IntervalWald:
		iv.Lower, iv.Upper = wald(d, n, level)
	case IntervalPoissonExact:
		return Interval{}, fmt.Errorf("%w: poisson-exact is for defects per unit, not a proportion", ErrUnknownMethod)
	default:
		_, err := ParseIntervalMethod(string(m))
		return Interval{}, err
	}
	return iv, nil
}

// wilson returns the Wilson score interval (Wilson 1927, "Probable inference,
// the law of succession, and statistical inference", JASA 22:209–212):
//
//	(p̂ + z²/2n ± z·√(p̂(1−p̂)/n + z²/4n²)) / (1 + z²/n),
//
// the set of p not rejected by the two-sided score test.
func wilson(d, n int64, level float64) (lo, hi float64) {
	z := normalQuantile(level)
	nf, p := float64(n), float64(d)/float64(n)
	z2 := z * z
	den := 1 + z2/nf
	centre := (p + z2/(2*nf)) / den
	half := z * math.Sqrt(p*(1-p)/nf+z2/(4*nf*nf)) / den
	lo, hi = clamp01(centre-half), clamp01(centre+half)
	// At the boundaries the score interval is exactly 0 or 1; the formula
	// only gets there up to rounding.
	if d == 0 {
		lo = 0
	}
	if d == n {
		hi = 1
	}
	return lo, hi
}

// clopperPearson returns the Clopper–Pearson interval (Clopper & Pearson
// 1934, "The use of confidence or fiducial limits illustrated in the case
// of the binomial", Biometrika 26:404–413) from beta quantiles:
//
//	lower = B(α/2; d, n−d+1),  upper = B(1−α/2; d+1, n−d),
//
// with lower = 0 at d = 0 and upper = 1 at d = n.
func clopperPearson(d, n int64, level float64) (lo, hi float64) {
	alpha := 1 - level
	lo, hi = 0, 1
	if d > 0 {
		lo = distuv.Beta{Alpha: float64(d), Beta: float64(n - d + 1)}.Quantile(alpha / 2)
	}
	if d < n {
		hi = distuv.Beta{Alpha: float64(d + 1), Beta: float64(n - d)}.Quantile(1 - alpha/2)
	}
	return lo, hi
}

// agrestiCoull returns the Agresti–Coull interval (Agresti & Coull 1998,
// "Approximate is better than 'exact' for interval estimation of binomial
// proportions", The American Statistician 52:119–126): the Wald interval
// about p̃ = (d + z²/2)/ñ with ñ = n + z²,
//
//	p̃ ± z·√(p̃(1−p̃)/ñ),
//
// clamped to [0, 1].
func agrestiCoull(d, n int64, level float64) (lo, hi float64) {
	z := normalQuantile(level)
	nt := float64(n) + z*z
	pt := (float64(d) + z*z/2) / nt
	half := z * math.Sqrt(pt*(1-pt)/nt)
	return clamp01(pt - half), clamp01(pt + half)
}

// jeffreys returns the Jeffreys interval, the equal-tailed interval of the
// beta(d+½, n−d+½) posterior under the Jeffreys prior, with the boundary
// convention of Brown, Cai & DasGupta (2001, Statistical Science 16(2),
// §4.1.2): lower = 0 at d = 0 and upper = 1 at d = n, where it is
// therefore not equal-tailed.
func jeffreys(d, n int64, level float64) (lo, hi float64) {
	alpha := 1 - level
	b := distuv.Beta{Alpha: float64(d) + 0.5, Beta: float64(n-d) + 0.5}
	lo, hi = 0, 1
	if d > 0 {
		lo = b.Quantile(alpha / 2)
	}
	if d < n {
		hi = b.Quantile(1 - alpha/2)
	}
	return lo, hi
}

// wald returns the Wald (normal approximation) interval p̂ ± z·√(p̂(1−p̂)/n)
// clamped to [0, 1] (e.g. Brown, Cai & DasGupta 2001, eq. 1). See Caveat.
func wald(d, n int64, level float64) (lo, hi float64) {
	z := normalQuantile(level)
	p := float64(d) / float64(n)
	half := z * math.Sqrt(p*(1-p)/float64(n))
	return clamp01(p - half), clamp01(p + half)
}

// PoissonInterval returns the exact (Garwood 1936, "Fiducial limits for the
// Poisson distribution", Biometrika 28:437–442) interval for a rate of
// defects per unit, c defects in exposure units inspected:
//
//	lower = χ²(α/2; 2c)/(2·exposure),  upper = χ²(1−α/2; 2c+2)/(2·exposure),
//
// computed as gamma quantiles (χ²(q; 2a)/2 is the q quantile of gamma(a, 1)),
// with lower = 0 at c = 0.
func PoissonInterval(c int64, exposure float64, level float64) (Interval, error) {
	switch {
	case c < 0:
		return Interval{}, &FieldError{Field: "defects", Value: strconv.FormatInt(c, 10), Reason: "must not be negative"}
	case !(exposure > 0) || math.IsInf(exposure, 1):
		return Interval{}, &FieldError{Field: "inspected", Value: strconv.FormatFloat(exposure, 'g', -1, 64), Reason: "must be a number greater than 0"}
	}
	if err := checkLevel(level); err != nil {
		return Interval{}, err
	}
	alpha := 1 - level
	iv := Interval{Method: IntervalPoissonExact, Level: level, Estimate: float64(c) / exposure}
	if c > 0 {
		iv.Lower = distuv.Gamma{Alpha: float64(c), Beta: 1}.Quantile(alpha/2) / exposure
	}
	iv.Upper = distuv.Gamma{Alpha: float64(c + 1), Beta: 1}.Quantile(1-alpha/2) / exposure
	return iv, nil
}

func clamp01(x float64) float64 {
	return math.Min(1, math.Max(0, x))
}

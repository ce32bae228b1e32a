package spc

import "fmt"

// Chart is the kind of attribute control chart.
type Chart string

// The attribute charts.
const (
	ChartP  Chart = "p"  // fraction nonconforming per lot
	ChartNP Chart = "np" // number nonconforming per lot (constant n)
	ChartU  Chart = "u"  // defects per unit inspected
	ChartC  Chart = "c"  // defects per lot (constant area of opportunity)
)

// ParseChart returns the chart named by s ("p", "np", "u" or "c").
func ParseChart(s string) (Chart, error) {
	switch c := Chart(s); c {
	case ChartP, ChartNP, ChartU, ChartC:
		return c, nil
	}
	return "", fmt.Errorf("unknown chart %q (want p, np, u or c)", s)
}

// CountsUnits reports whether the chart counts nonconforming units
// (p, np) rather than defects (u, c). A unit count can never exceed the
// number inspected; a defect count can.
func (c Chart) CountsUnits() bool { return c == ChartP || c == ChartNP }

// Method is how the control limits are computed.
type Method string

// The limit methods.
const (
	MethodSigma Method = "sigma" // centre ± k·σᵢ (normal approximation)
	MethodExact Method = "exact" // binomial or Poisson quantiles per lot
	MethodLaney Method = "laney" // Laney p′/u′: centre ± k·σᵢ·σ_z
)

// ParseMethod returns the limit method named by s.
func ParseMethod(s string) (Method, error) {
	switch m := Method(s); m {
	case MethodSigma, MethodExact, MethodLaney:
		return m, nil
	}
	return "", fmt.Errorf("unknown limits method %q (want sigma, exact or laney)", s)
}

// Lot is one inspected subgroup: Inspected units were examined and Count
// nonconforming units (p, np) or defects (u, c) were found.
type Lot struct {
	Code      string // the lot code
	Inspected int64
	Count     int64
}

// MaxInspected is the largest number of units (or inspection units) one
// lot may have, and the largest count: 10⁷, ten million, beyond any lot
// that is inspected unit by unit. It bounds what is logged (CheckLot);
// subgroups pooled from several lots may be larger (MaxPooled).
const MaxInspected = 10_000_000

// MaxPooled is the largest number of units of a subgroup that pools
// several lots (a day's or a shift's, Σn), and the largest count: 10¹²,
// a hundred thousand lots of MaxInspected. Analyze takes such subgroups;
// its tail probabilities are sums of binomial or Poisson terms and stay
// accurate at any size (see countDist.sumUp).
const MaxPooled = 1_000_000_000_000

// CheckLot reports what is wrong with a lot's numbers for the chart, or
// nil. It is the one validation rule for counts shared by the command
// line, the store, the form and the API. The returned error names the
// field ("inspected", "defective" or "defects").
func CheckLot(chart Chart, inspected, count int64) error {
	return checkCounts(chart, inspected, count, MaxInspected, "one lot")
}

// checkCounts is CheckLot with the bound of the sizes and counts, and the
// words naming what may have that many ("one lot", "a pooled subgroup").
func checkCounts(chart Chart, inspected, count, bound int64, what string) error {
	countField := "defects"
	if chart.CountsUnits() {
		countField = "defective"
	}
	switch {
	case inspected <= 0:
		return &FieldError{Field: "inspected", Value: fmt.Sprint(inspected), Reason: "must be a whole number greater than 0"}
	case inspected > bound:
		return &FieldError{Field: "inspected", Value: fmt.Sprint(inspected), Reason: fmt.Sprintf("is more than %d, the most %s may have", bound, what)}
	case count > bound:
		return &FieldError{Field: countField, Value: fmt.Sprint(count), Reason: fmt.Sprintf("is more than %d, the most %s may have", bound, what)}
	case count < 0:
		return &FieldError{Field: countField, Value: fmt.Sprint(count), Reason: "must not be negative"}
	case chart.CountsUnits() && count > inspected:
		return &FieldError{Field: countField, Value: fmt.Sprint(count), Reason: fmt.Sprintf("is more than the %d units inspected", inspected)}
	}
	return nil
}

// FieldError is a problem with one field of one lot.
type FieldError struct {
	Field  string
	Value  string
	Reason string
}

func (e *FieldError) Error() string {
	return fmt.Sprintf("%s %q %s", e.Field, e.Value, e.Reason)
}

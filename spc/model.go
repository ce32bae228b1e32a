package spc

// model is one attribute chart at a given centre rate: what it plots for
// a lot, the centre line and σᵢ of that statistic for a lot of n units
// inspected, and the distribution of the lot's count at the centre. Each
// chart is one file: chart_p.go, chart_np.go, chart_u.go, chart_c.go.
type model interface {
	// value is the plotted statistic of a lot of n inspected with count c.
	value(n, c float64) float64
	// center and sigma are the centre line and σᵢ of the statistic for a
	// lot of n inspected.
	center(n float64) float64
	sigma(n float64) float64
	// top is the largest value the statistic can take (+Inf for defects).
	top(n float64) float64
	// perUnit reports that the statistic is the count divided by n.
	perUnit() bool
	// count is the distribution of the count of a lot of n inspected.
	count(n int64) countDist
	// small reports expected counts too small for the normal approximation
	// behind sigma limits: below minExpected (common practice, no source).
	small(n float64) bool
}

// newModel returns the model of chart ch with centre rate: p̄ for p and
// np, ū for u, c̄ for c.
func newModel(ch Chart, rate float64) model {
	switch ch {
	case ChartP:
		return pChart{p: rate}
	case ChartNP:
		return npChart{p: rate}
	case ChartU:
		return uChart{u: rate}
	}
	return cChart{c: rate}
}

// zOf returns diff/sigma bounded by ±ZLimit, with the zero-spread
// convention of ZLimit.
func zOf(diff, sigma float64) float64 {
	if sigma > 0 {
		return max(-ZLimit, min(ZLimit, diff/sigma))
	}
	switch {
	case diff > 0:
		return ZLimit
	case diff < 0:
		return -ZLimit
	}
	return 0
}

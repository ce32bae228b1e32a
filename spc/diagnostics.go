package spc

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"gonum.org/v1/gonum/stat/distuv"
)

// Dispersion is the check of whether the lots' rates differ by more (or
// less) than binomial or Poisson sampling explains.
//
// ChiSquare is Pearson's statistic for homogeneity of the baseline lots,
// Σ(dᵢ − nᵢp̄)²/(nᵢp̄(1−p̄)) for p and np, Σ(cᵢ − nᵢū)²/(nᵢū) for u and
// Σ(cᵢ − c̄)²/c̄ for c — the sum of the squared sigma-method zᵢ — with
// DF = m − 1 degrees of freedom (m when a standard gives the centre).
// PValue is its chi-square upper tail, Ratio = ChiSquare/DF.
type Dispersion struct {
	ChiSquare     float64
	DF            int
	Ratio         float64
	PValue        float64
	SigmaZ        float64
	Overdispersed bool
	// Advice says in plain words what the check means for the limits.
	Advice string
}

// Thresholds of the dispersion advice (common practice, no source).
const (
	overdispersionP     = 0.01
	overdispersionRatio = 1.5
	minExpected         = 5  // nᵢp̄ and nᵢ(1−p̄), or nᵢū, below this: normal approximation poor
	minBaselineLots     = 20 // trial limits are usually set from 20–25 lots
)

func unknownExclusions(lots []Lot, exclude map[string]bool) []Warning {
	have := make(map[string]bool, len(exclude))
	for i := range lots {
		if exclude[lots[i].Code] {
			have[lots[i].Code] = true
		}
	}
	var missing []string
	for id, on := range exclude {
		if on && !have[id] {
			missing = append(missing, strconv.Quote(id))
		}
	}
	if len(missing) == 0 {
		return nil
	}
	sort.Strings(missing)
	return []Warning{{Code: "exclude-unknown", Message: "These lots were to be left out of the estimate but are not in the series: " + strings.Join(missing, ", ") + "."}}
}

func plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return strconv.Itoa(n) + " " + many
}

// diagnose adds the warnings and the dispersion check. sigmaZ is the σ_z
// in use for Laney limits (0 otherwise).
func diagnose(a *Analysis, cfg Config, minN, maxN int64, sigmaZ float64, cnt pointCounts) {
	ch, r, k := cfg.Chart, a.Rate, cfg.K
	if minN != maxN {
		switch ch {
		case ChartNP:
			a.Warnings = append(a.Warnings, Warning{Code: "np-varying-n", Message: fmt.Sprintf(
				"The number inspected varies from %d to %d, but an np chart assumes the same number in every lot; each lot gets its own limits, and a p chart shows lots of different sizes more clearly.", minN, maxN)})
		case ChartC:
			a.Warnings = append(a.Warnings, Warning{Code: "c-varying-n", Message: fmt.Sprintf(
				"The number inspected varies from %d to %d, but a c chart assumes the same amount inspected in every lot; a u chart (defects per unit) allows for lots of different sizes.", minN, maxN)})
		}
	}
	zeroSpread := r == 0 || (ch.CountsUnits() && r == 1) || (cfg.Method == MethodLaney && sigmaZ == 0)
	if zeroSpread {
		what := "the centre rate is " + strconv.FormatFloat(r, 'g', -1, 64)
		if r != 0 && !(ch.CountsUnits() && r == 1) {
			what = "σ_z is 0 (every lot has the same z)"
		}
		a.Warnings = append(a.Warnings, Warning{Code: "zero-spread", Message: fmt.Sprintf(
			"The lots cannot be standardized because %s: a lot on the centre line gets z = 0 and any other lot z = ±%g, and the limits collapse onto the centre line.", what, ZLimit)})
	}
	if cfg.Standard == nil && a.Baseline < minBaselineLots {
		a.Warnings = append(a.Warnings, Warning{Code: "few-lots", Message: fmt.Sprintf(
			"Only %s in the baseline; trial limits are usually set from 20 to 25 lots, so these limits are rough (common practice, no source).", plural(a.Baseline, "lot", "lots"))})
	}

	small, lclZero := cnt.small, cnt.lclZero
	if small > 0 && cfg.Method != MethodExact && !zeroSpread {
		rule := "n·p̄ or n·(1−p̄) below 5"
		switch ch {
		case ChartU:
			rule = "n·ū below 5"
		case ChartC:
			rule = "c̄ below 5"
		}
		a.Warnings = append(a.Warnings, Warning{Code: "small-expected", Message: fmt.Sprintf(
			"%s of %d expect so few counts (%s) that the normal approximation behind these limits is poor; exact limits suit them better (common practice, no source).",
			plural(small, "lot", "lots"), len(a.Points), rule)})
	}
	if lclZero > 0 && !zeroSpread {
		msg := fmt.Sprintf("%s of %d have a lower control limit of 0, so an improvement cannot show as a lot below the limit.", plural(lclZero, "lot", "lots"), len(a.Points))
		if need := positiveLCLSize(ch, cfg.Method, r, k, sigmaZ, a.Alpha/2); need != "" {
			msg += " " + need
		}
		a.Warnings = append(a.Warnings, Warning{Code: "lcl-zero", Message: msg})
	}
	dispersion(a, cfg, sigmaZ, zeroSpread)
}

// positiveLCLSize says how large a lot must be for a positive lower limit.
//
// Sigma limits: p̄ − k√(p̄(1−p̄)/n) > 0 ⇔ n > k²(1−p̄)/p̄ (p, np); ū − k√(ū/n)
// > 0 ⇔ n > k²/ū (u); c̄ > k² (c). Laney multiplies k by σ_z. Exact
// limits: lcl ≥ 1 ⇔ P(X = 0) ≤ α/2, i.e. (1−p̄)ⁿ ≤ α/2 ⇔ n ≥ ln(α/2)/ln(1−p̄)
// (binomial) and e^(−nū) ≤ α/2 ⇔ n ≥ −ln(α/2)/ū (Poisson).
func positiveLCLSize(ch Chart, m Method, r, k, sigmaZ, alpha2 float64) string {
	if m == MethodLaney {
		k *= sigmaZ
	}
	var bound float64
	strict := true
	switch {
	case r <= 0:
		return ""
	case m == MethodExact && ch.CountsUnits():
		if r >= 1 {
			return ""
		}
		bound, strict = math.Log(alpha2)/math.Log1p(-r), false
	case m == MethodExact && ch == ChartU:
		bound, strict = -math.Log(alpha2)/r, false
	case m == MethodExact:
		return fmt.Sprintf("A c chart has a positive lower limit only when c̄ is at least %.3g.", -math.Log(alpha2))
	case ch.CountsUnits():
		bound = k * k * (1 - r) / r
	case ch == ChartU:
		bound = k * k / r
	default:
		return fmt.Sprintf("A c chart has a positive lower limit only when c̄ is above k² = %.3g.", k*k)
	}
	if bound > 1e15 {
		return ""
	}
	n := int64(math.Ceil(bound))
	if strict && float64(n) == bound {
		n++
	}
	if n < 1 {
		n = 1
	}
	return fmt.Sprintf("Lots of at least %d units inspected would have a positive lower limit.", n)
}

func dispersion(a *Analysis, cfg Config, sigmaZ float64, zeroSpread bool) {
	d := &a.Dispersion
	d.SigmaZ = a.SigmaZ
	model := "binomial"
	if !cfg.Chart.CountsUnits() {
		model = "Poisson"
	}
	switch {
	case zeroSpread && (a.Rate == 0 || (cfg.Chart.CountsUnits() && a.Rate == 1)):
		d.ChiSquare, d.Ratio, d.PValue = 0, 0, 1
		d.Advice = "The spread of the lots cannot be checked while the centre rate is " + strconv.FormatFloat(a.Rate, 'g', -1, 64) + "."
		return
	case d.DF <= 0:
		d.Ratio, d.PValue = 0, 1
		d.Advice = "The spread of the lots needs at least 2 lots in the baseline to be checked."
		return
	}
	d.Ratio = d.ChiSquare / float64(d.DF)
	chi := distuv.ChiSquared{K: float64(d.DF)}
	d.PValue = chi.Survival(d.ChiSquare)
	low := chi.CDF(d.ChiSquare)
	d.Overdispersed = d.PValue < overdispersionP && d.Ratio > overdispersionRatio
	test := fmt.Sprintf("chi-square %.4g on %d degrees of freedom, p = %.3g, ratio %.3g, σ_z = %.3g", d.ChiSquare, d.DF, d.PValue, d.Ratio, d.SigmaZ)
	switch {
	case d.Overdispersed && cfg.Method == MethodLaney:
		d.Advice = fmt.Sprintf("The lots vary more than %s sampling alone explains (%s); the Laney limits in use allow for this.", model, test)
	case d.Overdispersed:
		d.Advice = fmt.Sprintf("The lots vary more than %s sampling alone explains (%s). Limits from %s sampling will flag many ordinary lots; Laney limits, which widen them by σ_z, suit this process better (common practice: switch when p < 0.01 and the ratio is above 1.5).", model, test, model)
		a.Warnings = append(a.Warnings, Warning{Code: "overdispersion", Message: d.Advice})
	case d.PValue < 0.05:
		d.Advice = fmt.Sprintf("The lots vary somewhat more than %s sampling alone explains (%s), but the excess is small, so limits from %s sampling still serve (common practice: widen with Laney limits when p < 0.01 and the ratio is above 1.5).", model, test, model)
	case low < overdispersionP:
		d.Advice = fmt.Sprintf("The lots vary less than %s sampling would predict (%s); check that the counts are independent and were not adjusted.", model, test)
	default:
		d.Advice = fmt.Sprintf("The spread of the lots is within what %s sampling alone produces (%s).", model, test)
	}
}

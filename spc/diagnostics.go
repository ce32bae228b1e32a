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
//
// The lots a chart exists to find, those with an assignable cause, inflate
// that statistic: one lot at z = 20 adds 400 to it. So when it finds extra
// spread the check is run again two ways that such lots cannot drive:
// without the baseline lots beyond the k-sigma binomial or Poisson limits
// (Beyond of them), the centre estimated again from the rest (Trimmed*),
// and on the median moving range of the z of consecutive baseline lots
// (RobustSigmaZ), which a single wild lot or a step in the rate hardly
// moves. Overdispersed, and the advice to use Laney limits, need all three
// to find the extra spread.
type Dispersion struct {
	ChiSquare     float64
	DF            int
	Ratio         float64
	PValue        float64
	SigmaZ        float64
	Overdispersed bool
	// Beyond counts the baseline lots beyond the sigma limits left out of
	// the trimmed check. TrimmedDF is 0 when the trimmed check was not
	// run (the whole-baseline check found no extra spread).
	Beyond           int
	TrimmedChiSquare float64
	TrimmedDF        int
	TrimmedRatio     float64
	TrimmedPValue    float64
	// RobustSigmaZ is the median moving range of the baseline lots' z,
	// divided by 0.954 (see robustSigmaZ); 0 when not computed.
	RobustSigmaZ float64
	// Advice says in plain words what the check means for the limits, and
	// why.
	Advice string
}

// Thresholds of the dispersion advice (common practice, no source). The
// robust σ_z must exceed √1.5, the σ_z that the ratio threshold stands for
// (the ratio estimates σ_z²).
const (
	overdispersionP     = 0.01
	overdispersionRatio = 1.5
	medianMRConstant    = 0.9539 // median of |Z₁ − Z₂| for independent standard normals: √2·Φ⁻¹(0.75)
	minExpected         = 5      // nᵢp̄ and nᵢ(1−p̄), or nᵢū, below this: normal approximation poor
	minBaselineLots     = 20     // trial limits are usually set from 20–25 lots
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
	// The messages carry no "(common practice, no source)": that marks the
	// rules of thumb in the code (see minBaselineLots, minExpected), not
	// a phrase for the people reading the chart.
	if cfg.Standard == nil && a.Baseline < minBaselineLots {
		a.Warnings = append(a.Warnings, Warning{Code: "few-lots", Message: fmt.Sprintf(
			"Only %s in the baseline; trial limits are usually set from 20 to 25 lots, so these limits are rough.", plural(a.Baseline, "lot", "lots"))})
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
			"%s of %d expect so few counts (%s) that the normal approximation behind these limits is poor; exact limits suit them better.",
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
	whole := d.PValue < overdispersionP && d.Ratio > overdispersionRatio
	test := fmt.Sprintf("chi-square %.4g on %d degrees of freedom, p = %.3g, ratio %.3g, σ_z = %.3g", d.ChiSquare, d.DF, d.PValue, d.Ratio, d.SigmaZ)
	if cfg.Standard != nil {
		// Lots judged against a given centre are being monitored, not
		// used to set limits: their spread about that centre mixes any
		// shift with the lot-to-lot spread, and lots beyond the limits
		// are signals to explain. The advice on the limits belongs to the
		// baseline they were set from.
		d.Advice = fmt.Sprintf("These lots are judged against a given centre (a frozen limit set), so their spread about it (%s) does not decide the limit method: the spread is checked on the baseline that limits are set from, and lots beyond these limits are signals to explain.", test)
		return
	}
	rule := "p < 0.01 and a ratio above 1.5"
	if !whole {
		switch {
		case d.PValue < 0.05:
			d.Advice = fmt.Sprintf("The lots vary somewhat more than %s sampling alone explains (%s), but the excess is small, so limits from %s sampling still serve (Laney limits are advised only at %s).", model, test, model, rule)
		case low < overdispersionP:
			d.Advice = fmt.Sprintf("The lots vary less than %s sampling would predict (%s); check that the counts are independent and were not adjusted.", model, test)
		default:
			d.Advice = fmt.Sprintf("The spread of the lots is within what %s sampling alone produces (%s).", model, test)
		}
		return
	}
	robustSpread(a, cfg)
	trimmed := d.TrimmedDF > 0 && d.TrimmedPValue < overdispersionP && d.TrimmedRatio > overdispersionRatio
	steady := d.RobustSigmaZ > math.Sqrt(overdispersionRatio)
	d.Overdispersed = trimmed && steady
	without := fmt.Sprintf("without the %s beyond the %g-sigma %s limits: chi-square %.4g on %d degrees of freedom, p = %.3g, ratio %.3g",
		plural(d.Beyond, "lot", "lots"), a.K, model, d.TrimmedChiSquare, d.TrimmedDF, d.TrimmedPValue, d.TrimmedRatio)
	if d.Beyond == 0 {
		without = fmt.Sprintf("no lot is beyond the %g-sigma %s limits", a.K, model)
	}
	moving := fmt.Sprintf("σ_z from the median moving range %.3g", d.RobustSigmaZ)
	switch {
	case d.Overdispersed && cfg.Method == MethodLaney:
		d.Advice = fmt.Sprintf("The lots vary more than %s sampling alone explains (%s), and the excess persists (%s; %s); the Laney limits in use allow for this.", model, test, without, moving)
	case d.Overdispersed:
		d.Advice = fmt.Sprintf("The lots vary more than %s sampling alone explains (%s), and the excess persists (%s; %s). Limits from %s sampling will flag many ordinary lots; Laney limits, which widen them by σ_z, suit this process better (advised at %s, on the whole baseline, without the lots beyond the limits and lot to lot).", model, test, without, moving, model, rule)
		a.Warnings = append(a.Warnings, Warning{Code: "overdispersion", Message: d.Advice})
	case !trimmed:
		it, those := "it", "that lot"
		if d.Beyond != 1 {
			it, those = "them", "those lots"
		}
		d.Advice = fmt.Sprintf("The lots vary more than %s sampling alone explains (%s) only because of the %s beyond the %g-sigma %s limits: without %s (chi-square %.4g on %d degrees of freedom, p = %.3g, ratio %.3g) the spread is within what %s sampling produces. Look for the assignable causes of %s rather than widening the limits with Laney.",
			model, test, plural(d.Beyond, "lot", "lots"), a.K, model, it, d.TrimmedChiSquare, d.TrimmedDF, d.TrimmedPValue, d.TrimmedRatio, model, those)
	default:
		d.Advice = fmt.Sprintf("The lots vary more than %s sampling alone explains (%s; %s), but from one lot to the next they vary no more than sampling explains (%s): the rate moved between groups of lots, a shift or a drift, rather than spreading lot by lot. Look for when and why it moved rather than widening the limits with Laney.", model, test, without, moving)
	}
}

// robustSpread runs the dispersion check again without the baseline lots
// beyond the k-sigma limits of the binomial or Poisson model, the centre
// estimated again from the lots kept (or the standard's, when one is
// given), and computes robustSigmaZ of the baseline lots against that
// centre. It fills the Beyond, Trimmed* and RobustSigmaZ fields.
func robustSpread(a *Analysis, cfg Config) {
	d := &a.Dispersion
	var base []Lot
	for _, pt := range a.Points {
		if !pt.Excluded {
			base = append(base, pt.Lot)
		}
	}
	rate := a.Rate
	var kept []Lot
	for _, l := range base {
		if math.Abs(lotZ(newModel(cfg.Chart, rate), l)) > a.K {
			d.Beyond++
			continue
		}
		kept = append(kept, l)
	}
	if cfg.Standard == nil && len(kept) > 0 {
		var sc, sn float64
		for _, l := range kept {
			sc += float64(l.Count)
			sn += float64(l.Inspected)
		}
		if cfg.Chart == ChartC {
			sn = float64(len(kept))
		}
		rate = sc / sn
	}
	m := newModel(cfg.Chart, rate)
	z := func(l Lot) float64 { return lotZ(m, l) }
	var chi float64
	for _, l := range kept {
		chi += z(l) * z(l)
	}
	d.TrimmedDF = len(kept)
	if cfg.Standard == nil {
		d.TrimmedDF--
	}
	if d.TrimmedDF > 0 {
		d.TrimmedChiSquare = chi
		d.TrimmedRatio = chi / float64(d.TrimmedDF)
		d.TrimmedPValue = distuv.ChiSquared{K: float64(d.TrimmedDF)}.Survival(chi)
	}
	zs := make([]float64, len(base))
	for i, l := range base {
		zs[i] = z(l)
	}
	d.RobustSigmaZ = robustSigmaZ(zs)
}

// lotZ is the standardized distance of lot l from the centre of model m.
func lotZ(m model, l Lot) float64 {
	n := float64(l.Inspected)
	return zOf(m.value(n, float64(l.Count))-m.center(n), m.sigma(n))
}

// robustSigmaZ estimates the spread of z from its median moving range:
// for independent normal z with standard deviation σ, |zᵢ − zᵢ₋₁| has
// median σ·√2·Φ⁻¹(0.75) = 0.9539σ (the median moving range estimator;
// Montgomery, Introduction to Statistical Quality Control, 6th ed., §6.4,
// from memory). One wild lot changes two moving ranges, which barely moves
// their median, and a step in the rate changes one. 0 with fewer than 2
// values.
func robustSigmaZ(z []float64) float64 {
	if len(z) < 2 {
		return 0
	}
	mr := make([]float64, len(z)-1)
	for i := 1; i < len(z); i++ {
		mr[i-1] = math.Abs(z[i] - z[i-1])
	}
	sort.Float64s(mr)
	m := len(mr)
	med := mr[m/2]
	if m%2 == 0 {
		med = (mr[m/2-1] + mr[m/2]) / 2
	}
	return med / medianMRConstant
}

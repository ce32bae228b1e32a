package spc

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// ZLimit bounds every z value. A lot whose statistic has zero spread
// (centre p̄ = 0 or 1, or ū = 0, or a Laney σ_z of 0) cannot be
// standardized: its z is 0 when it sits on the centre line and ±ZLimit
// when it does not, and Analyze adds a "zero-spread" warning. Finite
// values keep the results representable in JSON.
const ZLimit = 1e6

// Config chooses the chart, the limits and the rules of an analysis.
type Config struct {
	Chart        Chart
	Method       Method          // "" means MethodSigma
	K            float64         // limit width in σ; 0 means 3
	Rules        RuleSet         // run rules to apply; 0 applies none
	Standard     *Standard       // phase II "standard given": known centre, nothing estimated
	Exclude      map[string]bool // lot IDs left out of the centre (and σ_z) estimate but still plotted and judged
	Standardized bool            // plot z with limits in z units
}

// Standard is a known (frozen or specified) centre for phase II.
// Center is p for p and np charts, defects per unit for u, defects per
// lot for c. SigmaZ is the Laney σ_z to use; 0 estimates it from the lots.
type Standard struct {
	Center float64
	SigmaZ float64
}

// Analysis is the result of judging a sequence of lots.
type Analysis struct {
	Chart  Chart
	Method Method
	K      float64
	// Alpha is the two-sided false-alarm probability matched to K,
	// 2(1 − Φ(K)) (0.0027 for K = 3); exact limits leave at most Alpha/2
	// in each tail.
	Alpha float64
	// Rate is p̄ = Σd/Σn (never the mean of the fractions) for p and np,
	// ū = Σc/Σn for u, c̄ = Σc/m for c: from the lots not excluded, or
	// the standard.
	Rate float64
	// Center is the centre of the plotted statistic in the chart's units:
	// p̄ (p), n̄·p̄ (np, n̄ the mean lot size), ū (u), c̄ (c). It stays in
	// these units when Standardized is set.
	Center float64
	// SigmaZ is Laney's σ_z: the mean moving range of the sigma-method z
	// over the baseline lots divided by 1.128. It is computed for every
	// method; for MethodLaney it is the σ_z the limits use, the
	// standard's when it gives one (Dispersion.SigmaZ keeps the lots' own).
	SigmaZ float64
	// Baseline is the number of lots the centre was estimated from (0 when
	// a standard gives it).
	Baseline   int
	Points     []Point
	Signals    []Signal
	Warnings   []Warning
	Dispersion Dispersion
	// Phases describes each run of lots of AnalyzePhases; nil for Analyze.
	Phases []PhaseResult
	// Shift is what the CUSUM and EWMA found (WatchShifts); nil when none
	// was watched.
	Shift *ShiftWatch
}

// Point is one judged lot.
type Point struct {
	Lot Lot
	// Value is the plotted statistic: the fraction nonconforming (p), the
	// count (np, c) or defects per unit (u); z when Standardized.
	Value float64
	// Center, UCL and LCL are the lot's centre line and control limits in
	// the units of Value.
	Center, UCL, LCL float64
	// Sigma is σᵢ of the plotted statistic (σᵢ·σ_z for Laney; 1 when
	// Standardized).
	Sigma float64
	// Z is (value − centre)/σᵢ in the chart's units (σᵢ·σ_z for Laney),
	// bounded by ±ZLimit.
	Z float64
	// TailP is the exact one-sided probability, under the centre line, of
	// a count at least as far from the expected count as this lot's in the
	// direction observed: P(X ≥ count) when the count is at or above the
	// expected count, P(X ≤ count) below it. X is binomial(nᵢ, p̄) for p
	// and np, Poisson(nᵢ·ū) for u and Poisson(c̄) for c.
	TailP float64
	// Rules holds the rules whose signals this lot takes part in.
	Rules RuleSet
	// Above and Below report a lot beyond the UCL or below the LCL.
	Above, Below bool
	// Excluded reports a lot left out of the estimate.
	Excluded bool
}

// OutOfLimits reports whether the lot is beyond a control limit.
func (p Point) OutOfLimits() bool { return p.Above || p.Below }

// Signal is one run-rule finding over the lots Points[First..Last].
type Signal struct {
	Rule        Rule
	First, Last int // indices into Points
	// Start is the index of the lot at which the signal was first
	// detected (the lot that completed the pattern); the lots after it up
	// to Last extend it.
	Start       int
	Lots        []string // IDs of the lots First..Last
	Side        int8     // +1 above the centre (or increasing), −1 below (or decreasing), 0 either
	Description string   // plain words, e.g. "9 lots in a row above the centre line"
	hits        int
	k           float64
}

// Warning is a diagnostic in plain words. Code is a stable key for
// programs; Message is for people.
type Warning struct {
	Code    string
	Message string
}

// PhaseResult describes one run of lots judged against one limit set.
type PhaseResult struct {
	Start, End int // Points[Start:End]
	Method     Method
	K          float64
	Rate       float64
	Center     float64
	SigmaZ     float64
}

// AlphaForK returns the two-sided normal tail probability 2(1 − Φ(k)).
func AlphaForK(k float64) float64 {
	return 2 * distuv.UnitNormal.Survival(k)
}

func (cfg *Config) normalize() error {
	if _, err := ParseChart(string(cfg.Chart)); err != nil {
		return err
	}
	if cfg.Method == "" {
		cfg.Method = MethodSigma
	}
	if _, err := ParseMethod(string(cfg.Method)); err != nil {
		return err
	}
	if cfg.K == 0 {
		cfg.K = 3
	}
	if !(cfg.K > 0) || math.IsInf(cfg.K, 0) {
		return fmt.Errorf("limit width k %v must be a number greater than 0", cfg.K)
	}
	if st := cfg.Standard; st != nil {
		switch {
		case math.IsNaN(st.Center) || math.IsInf(st.Center, 0) || st.Center < 0:
			return fmt.Errorf("standard centre %v must be a number not below 0", st.Center)
		case cfg.Chart.CountsUnits() && st.Center > 1:
			return fmt.Errorf("standard centre %v is a fraction nonconforming and must not exceed 1", st.Center)
		case math.IsNaN(st.SigmaZ) || math.IsInf(st.SigmaZ, 0) || st.SigmaZ < 0:
			return fmt.Errorf("standard σ_z %v must be a number not below 0", st.SigmaZ)
		}
	}
	return nil
}

// Analyze judges lots on the chart cfg.Chart.
//
// Limits (Montgomery, Introduction to Statistical Quality Control, ch. 7;
// one file per chart: chart_p.go, chart_np.go, chart_u.go, chart_c.go):
//
//	p:  p̄ ± k·√(p̄(1−p̄)/nᵢ), clamped to [0, 1]
//	np: nᵢp̄ ± k·√(nᵢp̄(1−p̄)), clamped to [0, nᵢ]
//	u:  ū ± k·√(ū/nᵢ), LCL clamped at 0
//	c:  c̄ ± k·√c̄, LCL clamped at 0
//
// with p̄ = Σd/Σn, ū = Σc/Σn and c̄ = Σc/m over the lots not excluded, or
// the centre of cfg.Standard. zᵢ = (valueᵢ − centreᵢ)/σᵢ.
//
// MethodExact replaces the limits by binomial(nᵢ, p̄) or Poisson(nᵢū, c̄)
// quantiles; see exactLimits. Rule 1 (beyond limits) then uses these
// exact limits, which may be asymmetric, while the zone and run rules use
// the normal-theory zᵢ with zones at K/3 and 2K/3.
//
// MethodLaney (Laney 2002, Quality Engineering 14(4), 531–537) widens σᵢ
// by σ_z, the mean moving range of the sigma-method zᵢ over the baseline
// lots (in order, excluded lots skipped) divided by 1.128: limits are
// centre ± k·σᵢ·σ_z and z is reported relative to σᵢ·σ_z. It applies to
// all four charts (p′, np′, u′, c′).
//
// Run rules (cfg.Rules) are applied to every lot, excluded or not, in
// order; see Rule for the zones and applyRules for how signals start and
// extend: a pattern that keeps going, or repeats while overlapping or
// touching the previous finding of the same rule on the same side,
// extends one Signal instead of adding one per lot.
//
// A lot here may be a subgroup of lots pooled together (Σd over Σn), so
// lot sizes are bounded by MaxPooled, not by the MaxInspected of a
// single lot.
func Analyze(lots []Lot, cfg Config) (*Analysis, error) {
	a, err := analyze(lots, cfg, 0)
	if err != nil {
		return nil, err
	}
	a.Signals = applyRules(a.Points, cfg.Rules, func(int) float64 { return a.K })
	return a, nil
}

// analyze computes the points and diagnostics of Analyze, without the run
// rules. offset numbers lots in errors.
func analyze(lots []Lot, cfg Config, offset int) (*Analysis, error) {
	if err := cfg.normalize(); err != nil {
		return nil, err
	}
	if len(lots) == 0 {
		return nil, errors.New("no lots to analyze")
	}
	a := &Analysis{Chart: cfg.Chart, Method: cfg.Method, K: cfg.K, Alpha: AlphaForK(cfg.K)}
	b, err := baselineOf(lots, cfg, offset)
	if err != nil {
		return nil, err
	}
	if len(cfg.Exclude) > 0 {
		a.Warnings = append(a.Warnings, unknownExclusions(lots, cfg.Exclude)...)
	}
	if err := a.setCentre(b, cfg, len(lots)); err != nil {
		return nil, err
	}
	mod := newModel(cfg.Chart, a.Rate)

	// Laney limits need σ_z before any lot is judged.
	laney := cfg.Method == MethodLaney
	var sp spread
	sigmaZ := 1.0
	if laney {
		sp = baselineSpread(lots, mod, b.excluded)
		a.SigmaZ = sp.sigmaZ()
		sigmaZ = a.SigmaZ
		if cfg.Standard != nil && cfg.Standard.SigmaZ > 0 {
			sigmaZ = cfg.Standard.SigmaZ
		} else if sp.nmr == 0 {
			return nil, errors.New("Laney limits need at least 2 lots in the baseline to estimate σ_z")
		}
	}

	// Each lot against the limits of its size.
	a.Points = make([]Point, len(lots))
	sizes := map[int64]*lotLimits{}
	var cnt pointCounts
	for i, l := range lots {
		lim := sizes[l.Inspected]
		if lim == nil {
			lim = newLotLimits(mod, cfg.Method, cfg.K, sigmaZ, l.Inspected)
			sizes[l.Inspected] = lim
		}
		p := &a.Points[i]
		judgePoint(p, l, mod, lim, cfg)
		p.Excluded = b.excluded != nil && b.excluded[i]
		if !laney && !p.Excluded {
			sp.add(p.Z) // the sigma-method z
		}
		cnt.add(lim)
	}
	if !laney {
		a.SigmaZ = sp.sigmaZ()
		sigmaZ = 0
	}
	a.Dispersion.ChiSquare, a.Dispersion.DF = sp.chi, sp.df(cfg.Standard != nil)
	diagnose(a, cfg, b.minN, b.maxN, sigmaZ, cnt)
	if laney {
		// The σ_z the limits use, which a standard may give; the
		// dispersion check keeps the lots' own.
		a.SigmaZ = sigmaZ
	}
	return a, nil
}

// baseline sums the lots that estimate the centre line: those not excluded.
type baseline struct {
	sumN, sumC float64 // over the baseline lots
	allN       float64 // over every lot (an np chart's centre under a standard)
	m          int     // baseline lots
	minN, maxN int64   // lot sizes over every lot
	excluded   []bool  // nil when no lot is excluded
}

// baselineOf checks every lot's counts and sums the baseline.
func baselineOf(lots []Lot, cfg Config, offset int) (baseline, error) {
	b := baseline{minN: lots[0].Inspected, maxN: lots[0].Inspected}
	for i, l := range lots {
		if err := checkCounts(cfg.Chart, l.Inspected, l.Count, MaxPooled, "a pooled subgroup"); err != nil {
			return b, fmt.Errorf("lot %d (%q): %w", offset+i+1, l.Code, err)
		}
		b.minN = min(b.minN, l.Inspected)
		b.maxN = max(b.maxN, l.Inspected)
		b.allN += float64(l.Inspected)
		if cfg.Exclude[l.Code] {
			if b.excluded == nil {
				b.excluded = make([]bool, len(lots))
			}
			b.excluded[i] = true
			continue
		}
		b.sumN += float64(l.Inspected)
		b.sumC += float64(l.Count)
		b.m++
	}
	return b, nil
}

// setCentre sets the rate (p̄, ū or c̄) and the centre line in the chart's
// units from the baseline, or from the standard when one is given.
func (a *Analysis) setCentre(b baseline, cfg Config, lots int) error {
	var rate float64
	switch {
	case cfg.Standard != nil:
		rate = cfg.Standard.Center
	case b.m == 0:
		return errors.New("every lot is excluded: at least one lot must remain to estimate the centre line")
	case cfg.Chart == ChartC:
		rate = b.sumC / float64(b.m)
	default:
		rate = b.sumC / b.sumN
	}
	a.Rate = rate
	a.Center = rate
	if cfg.Chart == ChartNP {
		if cfg.Standard != nil {
			a.Center = rate * b.allN / float64(lots)
		} else {
			a.Center = rate * b.sumN / float64(b.m)
		}
	}
	if cfg.Standard == nil {
		a.Baseline = b.m
	}
	return nil
}

// judgePoint places lot l against the limits of its size: its z, tail
// probability, side beyond the limits, and the values the chart draws.
func judgePoint(p *Point, l Lot, mod model, lim *lotLimits, cfg Config) {
	v := mod.value(float64(l.Inspected), float64(l.Count))
	z := zOf(v-lim.center, lim.sigma)
	p.Lot = l
	p.Z = z
	p.TailP = lim.tail(l.Count)
	if cfg.Method == MethodExact {
		p.Above, p.Below = l.Count > lim.uclN, l.Count < lim.lclN
	} else {
		p.Above, p.Below = v > lim.ucl, v < lim.lcl
	}
	switch {
	case !cfg.Standardized:
		p.Value, p.Center, p.UCL, p.LCL, p.Sigma = v, lim.center, lim.ucl, lim.lcl, lim.sigma
	case cfg.Method == MethodExact:
		p.Value, p.Center, p.UCL, p.LCL, p.Sigma = z, 0, zOf(lim.ucl-lim.center, lim.sigma), zOf(lim.lcl-lim.center, lim.sigma), 1
	default:
		p.Value, p.Center, p.UCL, p.LCL, p.Sigma = z, 0, cfg.K, -cfg.K, 1
	}
}

// pointCounts are the per-lot diagnostics gathered while finishing points.
type pointCounts struct {
	lclZero int // lower limit 0 in the chart's units
	small   int // expected counts too small for the normal approximation
}

// add counts the diagnostics of one lot's limits.
func (c *pointCounts) add(lim *lotLimits) {
	if lim.small {
		c.small++
	}
	if lim.lcl <= 0 {
		c.lclZero++
	}
}

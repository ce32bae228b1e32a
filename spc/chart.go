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

// laneyD2 is d₂ for moving ranges of two, the constant Laney (2002) uses
// to turn the mean moving range of z into σ_z.
const laneyD2 = 1.128

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
	// method and used by MethodLaney (unless the standard gives one).
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
	First, Last int      // indices into Points
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
// Limits (Montgomery, Introduction to Statistical Quality Control, ch. 7):
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
// order; see Rule for the zones and ruleEngine for how signals start and
// extend: a pattern that keeps going, or repeats while overlapping or
// touching the previous finding of the same rule on the same side,
// extends one Signal instead of adding one per lot.
func Analyze(lots []Lot, cfg Config) (*Analysis, error) {
	var e ruleEngine
	e.reset(cfg.Rules)
	a, err := analyze(lots, cfg, 0, &e)
	if err != nil {
		return nil, err
	}
	a.Signals = e.finish(a.Points)
	return a, nil
}

// analyze computes points and diagnostics; when e is not nil it steps
// the rule engine over the points as they are finished. offset numbers
// lots in errors.
func analyze(lots []Lot, cfg Config, offset int, e *ruleEngine) (*Analysis, error) {
	if err := cfg.normalize(); err != nil {
		return nil, err
	}
	if len(lots) == 0 {
		return nil, errors.New("no lots to analyze")
	}
	a := &Analysis{Chart: cfg.Chart, Method: cfg.Method, K: cfg.K, Alpha: AlphaForK(cfg.K)}
	pts := make([]Point, len(lots))
	a.Points = pts

	// Pass 1: check, mark exclusions, sum the baseline.
	var sumN, sumC, allN float64
	minN, maxN := lots[0].Inspected, lots[0].Inspected
	m := 0
	excluding := len(cfg.Exclude) > 0
	var excluded []bool // nil when no lot is excluded
	units := cfg.Chart.CountsUnits()
	whole := false
	if !excluding {
		var lo, hi int64
		var n, c float64
		if lo, hi, n, c, whole = sumWhole(lots, units); whole {
			minN, maxN, allN, sumN, sumC, m = lo, hi, n, n, c, len(lots)
		}
	}
	for i := range lots {
		if whole {
			break
		}
		l := &lots[i]
		// The conditions of CheckLot, tested inline; CheckLot words the error.
		if l.Inspected <= 0 || l.Inspected > MaxInspected || l.Count < 0 || l.Count > MaxInspected || (units && l.Count > l.Inspected) {
			if err := CheckLot(cfg.Chart, l.Inspected, l.Count); err != nil {
				return nil, fmt.Errorf("lot %d (%q): %w", offset+i+1, l.Code, err)
			}
		}
		minN = min(minN, l.Inspected)
		maxN = max(maxN, l.Inspected)
		allN += float64(l.Inspected)
		if excluding && cfg.Exclude[l.Code] {
			if excluded == nil {
				excluded = make([]bool, len(lots))
			}
			excluded[i] = true
			continue
		}
		sumN += float64(l.Inspected)
		sumC += float64(l.Count)
		m++
	}
	if excluding {
		a.Warnings = append(a.Warnings, unknownExclusions(lots, cfg.Exclude)...)
	}

	// The centre.
	var rate float64
	switch {
	case cfg.Standard != nil:
		rate = cfg.Standard.Center
	case m == 0:
		return nil, errors.New("every lot is excluded: at least one lot must remain to estimate the centre line")
	case cfg.Chart == ChartC:
		rate = sumC / float64(m)
	default:
		rate = sumC / sumN
	}
	a.Rate = rate
	a.Center = rate
	if cfg.Chart == ChartNP {
		if cfg.Standard != nil {
			a.Center = rate * allN / float64(len(lots))
		} else {
			a.Center = rate * sumN / float64(m)
		}
	}
	if cfg.Standard == nil {
		a.Baseline = m
	}

	// Laney needs σ_z before any limit; the other methods finish each
	// point in one pass.
	laney := cfg.Method == MethodLaney
	var sigmaZ float64
	var cnt pointCounts
	if laney {
		var st stats
		for i := range lots {
			n := float64(lots[i].Inspected)
			v, ctr, sig := model(cfg.Chart, rate, n, float64(lots[i].Count))
			st.add(zOf(v-ctr, sig), excluded == nil || !excluded[i])
		}
		a.SigmaZ = st.sigmaZ()
		a.Dispersion.ChiSquare, a.Dispersion.DF = st.chi, st.df(cfg.Standard != nil)
		sigmaZ = a.SigmaZ
		if cfg.Standard != nil && cfg.Standard.SigmaZ > 0 {
			sigmaZ = cfg.Standard.SigmaZ
		} else if st.nmr == 0 {
			return nil, errors.New("Laney limits need at least 2 lots in the baseline to estimate σ_z")
		}
		cnt = finishPoints(a, lots, excluded, maxN, cfg, rate, sigmaZ, e, nil)
	} else {
		var st stats
		cnt = finishPoints(a, lots, excluded, maxN, cfg, rate, 1, e, &st)
		a.SigmaZ = st.sigmaZ()
		a.Dispersion.ChiSquare, a.Dispersion.DF = st.chi, st.df(cfg.Standard != nil)
	}
	diagnose(a, cfg, minN, maxN, sigmaZ, cnt)
	return a, nil
}

// sumWhole returns the smallest and largest lot size and the sums of the
// sizes and counts of lots with none excluded, summed in integers. ok is
// false when a lot fails the checks of CheckLot or when a running sum in
// floating point might not be exact (the largest term times the number of
// lots reaches 2⁵³), so that only then are the lots summed one by one as
// floating-point numbers, which gives the same sums.
func sumWhole(lots []Lot, units bool) (minN, maxN int64, sumN, sumC float64, ok bool) {
	minN, maxN = lots[0].Inspected, lots[0].Inspected
	minC, maxC := lots[0].Count, lots[0].Count
	over := lots[0].Count - lots[0].Inspected
	var n, c int64
	// The checks of CheckLot are made on the extremes after the loop,
	// which then has no branch: a lot that fails one puts its size or
	// count, or its count less its size, out of range. (The difference
	// cannot overflow for a lot whose size and count are in range.)
	for i := range lots {
		l := &lots[i]
		minN = min(minN, l.Inspected)
		maxN = max(maxN, l.Inspected)
		minC = min(minC, l.Count)
		maxC = max(maxC, l.Count)
		over = max(over, l.Count-l.Inspected)
		n += l.Inspected
		c += l.Count
	}
	bad := minN <= 0 || maxN > MaxInspected || minC < 0 || maxC > MaxInspected || (units && over > 0)
	const exact = 1 << 53
	m := float64(len(lots))
	if bad || float64(maxN)*m >= exact || float64(maxC)*m >= exact {
		return 0, 0, 0, 0, false
	}
	return minN, maxN, float64(n), float64(c), true
}

// model returns the plotted value, centre and σᵢ of a lot with n
// inspected and count c on chart ch with centre rate.
func model(ch Chart, rate, n, c float64) (v, ctr, sig float64) {
	switch ch {
	case ChartP:
		return c / n, rate, math.Sqrt(rate * (1 - rate) / n)
	case ChartNP:
		return c, n * rate, math.Sqrt(n * rate * (1 - rate))
	case ChartU:
		return c / n, rate, math.Sqrt(rate / n)
	default:
		return c, rate, math.Sqrt(rate)
	}
}

// zOf returns diff/sigma bounded by ±ZLimit, with the zero-spread
// convention of ZLimit.
func zOf(diff, sigma float64) float64 {
	if sigma > 0 {
		z := diff / sigma
		if z > ZLimit {
			return ZLimit
		}
		if z < -ZLimit {
			return -ZLimit
		}
		return z
	}
	switch {
	case diff > 0:
		return ZLimit
	case diff < 0:
		return -ZLimit
	}
	return 0
}

// stats accumulates, over the baseline lots in order, the Pearson
// chi-square (Σ z² of the sigma-method z) and the moving ranges of z.
type stats struct {
	chi      float64
	m        int
	mr       float64
	nmr      int
	prev     float64
	havePrev bool
}

func (s *stats) add(z float64, baseline bool) {
	if !baseline {
		return
	}
	s.m++
	s.chi += z * z
	if s.havePrev {
		s.mr += math.Abs(z - s.prev)
		s.nmr++
	}
	s.prev, s.havePrev = z, true
}

func (s *stats) sigmaZ() float64 {
	if s.nmr == 0 {
		return 0
	}
	return s.mr / float64(s.nmr) / laneyD2
}

func (s *stats) df(standard bool) int {
	if standard {
		return s.m
	}
	return s.m - 1
}

// finishPoints computes each point's limits, z, judgement and tail
// probability, and steps the rule engine. sz scales σᵢ (Laney's σ_z, or
// 1). When st is not nil the sigma-method z of the baseline lots are
// accumulated into it. It returns the number of lots whose lower limit
// is 0 in the chart's units.
//
// Everything of a point but its lot, its index and its exclusion depends
// on its lot size and count alone, so it is computed once per distinct
// pair (see pointTable) and a lot costs two look-ups, the writes of its
// point and a step of the rule engine.
func finishPoints(a *Analysis, lots []Lot, excluded []bool, maxN int64, cfg Config, rate, sz float64, e *ruleEngine, st *stats) (cnt pointCounts) {
	pts := a.Points
	k := cfg.K
	stepping := e != nil && e.set != 0
	// Without the Nelson trend rules the engine's per-lot state fits in
	// registers: the loop advances it from the zone bits of the lot's
	// record and calls the engine only when a rule may be met.
	fast := stepping && !e.nelson
	t := newPointTable(cfg, rate, sz, a.Alpha/2, maxN, len(lots), e)
	if stepping {
		e.pts = pts
	}
	// The baseline statistics are accumulated in rs whether they are
	// wanted (st not nil) or not, so that the paths below need not ask.
	var rs runState
	if st != nil {
		rs.stats = *st
	}
	if fast {
		rs.regs = e.regs
	}
	_ = pts[:len(lots)]
	if fast || !stepping {
		// The common case runs in runPoints, which makes no call and so
		// keeps its state in registers; it stops before a lot that needs
		// the table filled in and after a lot at which a rule may be met.
		// Excluded lots are finished one by one, so that runPoints never
		// looks at exclusions. Without rules no record carries a bit that
		// makes a rule fire, so e is then never called.
		nextEx := -1 // the first excluded lot at or after i, once found
		for i := 0; i < len(lots); {
			end := min(len(lots), i+maxRun)
			if excluded != nil {
				if nextEx < i {
					nextEx = i
					for nextEx < len(lots) && !excluded[nextEx] {
						nextEx++
					}
				}
				end = min(end, nextEx)
			}
			var fire bool
			i, fire = t.runPoints(lots[:end], pts, i, &rs)
			if fire {
				e.regs = rs.regs
				e.fire(i-1, &pts[i-1], k)
				continue
			}
			if i < len(lots) {
				// One lot the slow way, like the loop below.
				rs.regs, fire = t.onePoint(lots, pts, excluded, i, &rs, fast)
				if fire {
					e.regs = rs.regs
					e.fire(i, &pts[i], k)
				}
				i++
			}
		}
		if fast {
			e.regs = rs.regs
		}
	} else {
		for i := range lots {
			t.onePoint(lots, pts, excluded, i, &rs, false)
			e.step(i, &pts[i], k)
		}
	}
	if st != nil {
		*st = rs.stats
	}
	// The diagnostics count lots, and whether a lot counts depends on its
	// size alone.
	for s, en := range t.sizes {
		d := t.dists[s]
		cnt.small += int(en.lots) * d.smallLot
		cnt.lclZero += int(en.lots) * d.lclZeroLot
	}
	return cnt
}

// runState is the state finishPoints carries from lot to lot: the
// baseline statistics and the registers of the rule engine.
type runState struct {
	stats
	regs ruleRegs
}

// runPoints finishes lots from i on whose records are already filled in,
// stopping before a lot whose record is not (or not in the table), and
// after a lot at which a rule may be met (fire). It returns the index of
// the next lot to finish. It takes every lot as a baseline lot, not
// excluded, and accumulates its z into the baseline statistics, which the
// caller keeps only when they are wanted; it finishes none while there is
// no previous z yet, so that every lot it finishes adds a moving range. It
// finishes at most maxRun lots, and none while a same-side run is as long.
//
// The loop keeps its state in registers, so it holds no more than it
// must: the two same-side runs share one word, and the lots of each size
// are counted in its entry rather than in a register.
func (t *pointTable) runPoints(lots []Lot, pts []Point, i int, rs *runState) (next int, fire bool) {
	if !rs.havePrev || rs.regs.runAbove >= maxRun || rs.regs.runBelow >= maxRun {
		return i, false
	}
	runs := uint64(rs.regs.runAbove)<<32 | uint64(rs.regs.runBelow)
	next, fire, chi, mr, prev, zones, runs := runLoop(lots, pts, t.dense, i, rs.chi, rs.mr, rs.prev, rs.regs.zones, runs)
	done := next - i
	rs.m += done
	rs.nmr += done
	rs.chi, rs.mr, rs.prev = chi, mr, prev
	rs.regs = ruleRegs{zones: zones, runAbove: int(runs >> 32), runBelow: int(runs & (1<<32 - 1))}
	return next, fire
}

// runLoop is the loop of runPoints. It holds no pointer but its slices,
// and takes and returns its state as plain values, so that the state
// stays in registers: the baseline statistics, the zone registers and the
// same-side runs (above the centre in the high half, below in the low
// half).
func runLoop(lots []Lot, pts []Point, dense []sizeEntry, i int, chi, mr, prev float64, zones uint32, runs uint64) (next int, fire bool, _, _, _ float64, _ uint32, _ uint64) {
	pts = pts[:len(lots)]
	for ; i < len(lots); i++ {
		l := &lots[i]
		n := uint64(l.Inspected)
		if n >= uint64(len(dense)) {
			break
		}
		// A size not seen yet has no records.
		en := &dense[n]
		j := uint64(l.Count - int64(en.lo))
		if j >= uint64(len(en.recs)) || en.recs[j].flags&recReady == 0 {
			break
		}
		r := &en.recs[j]
		en.lots++
		// Write each field of the fresh point once and never read it
		// back before: the slice is new memory, so Excluded and Rules
		// are already false and empty.
		q := &pts[i]
		q.Lot = *l
		f := r.flags
		q.Value, q.Center, q.UCL, q.LCL, q.Sigma, q.Z, q.TailP = r.value, en.ctr, en.ucl, en.lcl, en.sig, r.z, r.tail
		q.Above, q.Below = f&recAbove != 0, f&recBelow != 0
		z := r.z
		chi += z * z
		mr += math.Abs(z - prev)
		prev = z
		// ruleRegs.advanceBits, written out for the packed runs: it is
		// too large to be inlined, and a call would put this loop's
		// state in memory.
		zones = zones<<1&0xfefefefe | r.zones
		may := twoOfThree[zones>>hi2Shift&7] | twoOfThree[zones>>lo2Shift&7] |
			fourOfFive[zones>>hi1Shift&31] | fourOfFive[zones>>lo1Shift&31]
		runs = (runs + (1<<32 | 1)) & runKeep[f>>recPosBit&3]
		if uint64(may|f&recFire)|runs&runEight != 0 {
			fire = true
			i++
			break
		}
	}
	return i, fire, chi, mr, prev, zones, runs
}

// runKeep, indexed by a record's recPos and recNeg bits, keeps the half
// of runPoints' packed runs that the lot extends and clears the other.
var runKeep = [4]uint64{0, 0xffffffff << 32, 0xffffffff, 0xffffffff<<32 | 0xffffffff}

// runEight has the bits of runPoints' packed runs that are set when a
// run is at least 8 lots long (the runs stay below 2³¹, see maxRun).
const runEight = 0x7ffffff8<<32 | 0x7ffffff8

// maxRun bounds the lots of one call of runPoints, whose same-side runs
// are held in halves of 32 bits.
const maxRun = 1 << 31

// onePoint finishes lot i, filling in the table as needed, and steps rs
// as runPoints does (accumulating the baseline statistics unless the lot
// is excluded), reporting, when fast, whether a rule may be met.
func (t *pointTable) onePoint(lots []Lot, pts []Point, excluded []bool, i int, rs *runState, fast bool) (ruleRegs, bool) {
	l := &lots[i]
	s := t.slot(l.Inspected)
	en := t.sizes[s]
	var r *pointRec
	if j := uint64(l.Count - int64(en.lo)); j < uint64(len(en.recs)) && en.recs[j].flags&recReady != 0 {
		r = &en.recs[j]
	} else {
		r = t.record(s, l.Count)
	}
	q := &pts[i]
	q.Lot = *l
	ex := excluded != nil && excluded[i]
	q.Excluded = ex
	f := r.flags
	q.Value, q.Center, q.UCL, q.LCL, q.Sigma, q.Z, q.TailP = r.value, en.ctr, en.ucl, en.lcl, en.sig, r.z, r.tail
	q.Above, q.Below = f&recAbove != 0, f&recBelow != 0
	en.lots++
	rs.add(r.z, !ex)
	if !fast {
		return rs.regs, false
	}
	regs, may := rs.regs.advanceBits(r.zones, f)
	return regs, may|f&recFire != 0
}

// pointRec is what a point of one lot size and count gets: its Value, Z
// and TailP, its bits of ruleRegs.zones and its flags. Z is also the
// sigma-method z of the baseline statistics, which are accumulated only
// with σ_z = 1.
type pointRec struct {
	value, z, tail float64
	zones          uint32
	flags          uint8
}

// The bits of pointRec.flags.
const (
	recReadyBit = iota // the record is filled in
	recAboveBit        // beyond the UCL
	recBelowBit        // below the LCL
	recPosBit          // z > 0, when a same-side rule is selected
	recNegBit          // z < 0, likewise
	recFireBit         // beyond a limit, when rule 1 is selected

	recReady = 1 << recReadyBit
	recAbove = 1 << recAboveBit
	recBelow = 1 << recBelowBit
	recPos   = 1 << recPosBit
	recNeg   = 1 << recNegBit
	recFire  = 1 << recFireBit
)

// sizeEntry is the part of pointTable for one lot size: the records of
// the counts lo … lo+len(recs)−1, the Center, UCL, LCL and Sigma of its
// points and the number of lots finished. It is 64 bytes, one cache line
// in dense. (lo is at most MaxInspected; lots of one size cannot reach
// 2³² in memory.)
type sizeEntry struct {
	recs               []pointRec
	lo                 int32
	lots               uint32
	ctr, ucl, lcl, sig float64
}

// pointTable holds, per distinct lot size, a sizeEntry and the count
// distribution, and fills each record the first time its count is seen.
// When the largest lot size is small next to the number of lots, the
// entries are held in dense, indexed by lot size, so that a lot's record
// is found with one load for its entry rather than two.
type pointTable struct {
	cfg                   Config
	rate, sz              float64
	exact, perUnit, laney bool
	zones, sides          bool
	beyond                uint8 // 1 when rule 1 is selected
	z1, z2                float64
	dc                    *distCache
	dense                 []sizeEntry // by lot size; no records until seen
	many                  bool        // many lots per lot size are expected
	byN                   map[int64]int32
	lastKey               int64
	lastSlot              int32
	sizes                 []*sizeEntry // by slot, into dense when there
	dists                 []*countDist
	ns                    []float64
	scratch               pointRec // the record of a count outside the window
}

func newPointTable(cfg Config, rate, sz, alpha2 float64, maxN int64, lots int, e *ruleEngine) *pointTable {
	t := &pointTable{
		cfg: cfg, rate: rate, sz: sz,
		exact:   cfg.Method == MethodExact,
		perUnit: cfg.Chart == ChartP || cfg.Chart == ChartU,
		laney:   sz != 1,
		dc:      newDistCache(cfg.Chart, rate, alpha2, 0),
		byN:     make(map[int64]int32),
		lastKey: -1,
	}
	if e != nil && e.set != 0 && !e.nelson {
		t.zones, t.sides, t.beyond = e.zones, e.sides, e.beyond
		t.z1, t.z2 = cfg.K/3, 2*cfg.K/3
	}
	// dense costs 64 bytes per lot size up to the largest, so it is
	// made only when that is small next to the 96 bytes of each point.
	if cfg.Chart != ChartC && maxN < denseSizes && maxN < int64(lots/2)+1024 {
		t.dense = make([]sizeEntry, maxN+1)
		// With at least 4 lots for every size up to the largest, a size
		// is worth its tail table and its records at once.
		t.many = int64(lots) >= 4*(maxN+1)
	}
	return t
}

// slot returns the index in t.sizes of lots of n inspected, adding it
// the first time.
func (t *pointTable) slot(n int64) int32 {
	key := n
	if t.cfg.Chart == ChartC {
		key = 0 // the same points whatever the lot size
	}
	if key == t.lastKey {
		return t.lastSlot
	}
	s, ok := t.byN[key]
	if !ok {
		d := t.dc.get(n)
		d.many = t.many
		if !d.ready {
			d.prepare(t.cfg, t.rate, t.sz, float64(n), t.exact, t.perUnit)
		}
		s = int32(len(t.sizes))
		var en *sizeEntry
		if key < int64(len(t.dense)) {
			en = &t.dense[key]
		} else {
			en = new(sizeEntry)
		}
		*en = sizeEntry{ctr: d.outCtr, ucl: d.outUCL, lcl: d.outLCL, sig: d.outSig}
		if lo, size, ok := d.window(); ok {
			en.lo, en.recs = int32(lo), make([]pointRec, size)
		}
		t.sizes = append(t.sizes, en)
		t.dists = append(t.dists, d)
		t.ns = append(t.ns, float64(n))
		t.byN[key] = s
		if d.many && en.recs != nil {
			// Many lots of this size are to come: fill in at once the
			// records whose tails come from the table, a few steps each,
			// so that the lots find them ready.
			d.buildTable()
			if lo, hi, ok := d.tableCounts(); ok {
				for c := max(lo, int64(en.lo)); c <= min(hi, int64(en.lo)+int64(len(en.recs))-1); c++ {
					t.record(s, c)
				}
			}
		}
	}
	t.lastKey, t.lastSlot = key, s
	return s
}

// record returns the record of count in slot s, filling it in.
func (t *pointTable) record(s int32, count int64) *pointRec {
	d := t.dists[s]
	v := float64(count)
	if t.perUnit {
		v /= t.ns[s]
	}
	var r pointRec
	r.z = zOf(v-d.ctr, d.sig)
	if t.laney {
		r.z = zOf(v-d.ctr, d.sigS)
	}
	var above, below bool
	if t.exact {
		above, below = count > d.ucl, count < d.lcl
	} else {
		above, below = v > d.uclV, v < d.lclV
	}
	r.tail = d.tailDirect(count)
	if t.cfg.Standardized {
		v = r.z
	}
	r.value = v
	z := r.z
	if t.zones {
		r.zones = uint32(b2u(z > t.z2))<<hi2Shift | uint32(b2u(z < -t.z2))<<lo2Shift |
			uint32(b2u(z > t.z1))<<hi1Shift | uint32(b2u(z < -t.z1))<<lo1Shift
	}
	r.flags = recReady | b2u(above)<<recAboveBit | b2u(below)<<recBelowBit |
		t.beyond&(b2u(above)|b2u(below))<<recFireBit
	if t.sides {
		r.flags |= b2u(z > 0)<<recPosBit | b2u(z < 0)<<recNegBit
	}
	en := t.sizes[s]
	if j := uint64(count - int64(en.lo)); j < uint64(len(en.recs)) {
		en.recs[j] = r
		return &en.recs[j]
	}
	t.scratch = r
	return &t.scratch
}

// prepare computes, once per lot size, everything of a point that does
// not depend on the count: centre, σᵢ (and σᵢ scaled by sz), the limits
// in plotted units and the values written to the point's Center, UCL,
// LCL and Sigma.
func (d *countDist) prepare(cfg Config, rate, sz, n float64, exact, perUnit bool) {
	k := cfg.K
	_, d.ctr, d.sig = model(cfg.Chart, rate, n, 0)
	d.sigS = d.sig
	if sz != 1 {
		d.sigS = d.sig * sz
	}
	if smallExpected(cfg.Chart, n, rate) {
		d.smallLot = 1
	}
	if exact {
		d.limits()
		d.uclV, d.lclV = float64(d.ucl), float64(d.lcl)
		if perUnit {
			d.uclV /= n
			d.lclV /= n
		}
	} else {
		s := d.sig * sz
		d.uclV = d.ctr + k*s
		d.lclV = max(0, d.ctr-k*s)
		if cfg.Chart.CountsUnits() {
			top := 1.0
			if cfg.Chart == ChartNP {
				top = n
			}
			d.uclV = min(d.uclV, top)
		}
	}
	if d.lclV <= 0 {
		d.lclZeroLot = 1
	}
	switch {
	case !cfg.Standardized:
		d.outCtr, d.outUCL, d.outLCL, d.outSig = d.ctr, d.uclV, d.lclV, d.sigS
	case exact:
		d.outCtr, d.outUCL, d.outLCL, d.outSig = 0, zOf(d.uclV-d.ctr, d.sigS), zOf(d.lclV-d.ctr, d.sigS), 1
	default:
		d.outCtr, d.outUCL, d.outLCL, d.outSig = 0, k, -k, 1
	}
	d.ready = true
}

// pointCounts are the per-lot diagnostics gathered while finishing points.
type pointCounts struct {
	lclZero int // lower limit 0 in the chart's units
	small   int // expected counts too small for the normal approximation
}

// smallExpected reports nᵢp̄ < 5 or nᵢ(1−p̄) < 5 (p, np), nᵢū < 5 (u),
// c̄ < 5 (c): common practice, no source.
func smallExpected(ch Chart, n, r float64) bool {
	switch ch {
	case ChartP, ChartNP:
		return n*r < minExpected || n*(1-r) < minExpected
	case ChartU:
		return n*r < minExpected
	}
	return r < minExpected
}

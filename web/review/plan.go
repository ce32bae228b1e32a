package review

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// Centre is a process's current fraction nonconforming, the P0 of a plan.
type Centre struct {
	Process store.Process
	P0      float64
	// LimitSet is the Number of the frozen set P0 comes from, 0 when it
	// is the trial centre of the lots.
	LimitSet int
	// Lots is the number of lots the trial centre was estimated from (0
	// for a frozen set).
	Lots int
	// Source says where P0 comes from, in plain words.
	Source string
}

// ErrNoCentre is returned (wrapped) by CurrentCentre when the process has
// neither a frozen limit set nor lots.
var ErrNoCentre = errors.New("no centre to plan from")

// CurrentCentre returns the centre of process p for planning: the centre
// of its latest frozen limit set (latest EffectiveFrom, then highest
// Number), else the trial centre p̄ = Σd/Σn of all its lots (Montgomery,
// Introduction to Statistical Quality Control, ch. 7). Planning covers p
// and np charts only: the plan is binomial.
func CurrentCentre(ctx context.Context, src Source, p store.Process) (Centre, error) {
	c := Centre{Process: p}
	if !p.Chart.CountsUnits() {
		return c, fmt.Errorf("process %q has a %s chart; lot-size planning covers p and np charts (nonconforming units)", p.Name, p.Chart)
	}
	sets, err := src.LimitSets(ctx, p.ID)
	if err != nil {
		return c, fmt.Errorf("reading limit sets of %q: %w", p.Name, err)
	}
	if len(sets) > 0 {
		sort.SliceStable(sets, func(i, j int) bool {
			if !sets[i].EffectiveFrom.Equal(sets[j].EffectiveFrom) {
				return sets[i].EffectiveFrom.Before(sets[j].EffectiveFrom)
			}
			return sets[i].Number < sets[j].Number
		})
		ls := sets[len(sets)-1]
		// The frozen centre is p̄ for p and np charts, as spc.Standard
		// takes it.
		c.P0, c.LimitSet = ls.Center, ls.Number
		c.Source = fmt.Sprintf("centre of limit set %d, in force from %s", ls.Number, ls.EffectiveFrom.In(p.Location()).Format("2006-01-02"))
		return c, nil
	}
	lots, err := src.LotCounts(ctx, p.ID, time.Time{}, time.Time{})
	if err != nil {
		return c, fmt.Errorf("reading lots of %q: %w", p.Name, err)
	}
	var n, d int64
	for _, l := range lots {
		n += l.Inspected
		d += l.Count
	}
	if n == 0 {
		return c, fmt.Errorf("%w: process %q has no frozen limit set and no lots", ErrNoCentre, p.Name)
	}
	c.P0, c.Lots = float64(d)/float64(n), len(lots)
	c.Source = fmt.Sprintf("trial centre of all %d lots (no limit set frozen yet)", len(lots))
	return c, nil
}

// PlanRequest is what the planning page asks.
type PlanRequest struct {
	N          int64   // lot size to evaluate; 0 for none
	P1         float64 // shifted fraction nonconforming to detect
	TargetARL1 float64 // wanted ARL1 for the search; 0 for no search
	K          float64 // limit width; 0 means the process's K, or 3
	MaxN       int64   // search bound; 0 means 100000
	CurveNs    []int64 // lot sizes of the ARL1 curve; nil chooses them
	// MinARL0 is the floor on ARL0 of the search; 0 means
	// spc.DefaultMinARL0. A floor below the default gives a warning.
	MinARL0 float64
}

// PlanResult answers a PlanRequest.
type PlanResult struct {
	Centre Centre
	K, P1  float64
	// Plan is the plan for the requested N (nil without N).
	Plan *spc.Plan
	// Smallest is the smallest lot size meeting TargetARL1 (0 when not
	// searched or none up to MaxN; SmallestNote then says why).
	Smallest     int64
	SmallestPlan *spc.Plan
	SmallestNote string
	// Curve is ARL1 against lot size (spc.ARLCurve).
	Curve []spc.Plan
	// MinARL0 is the floor on ARL0 that the search kept to.
	MinARL0 float64
	// Monitors are, for the requested N, the CUSUM and the EWMA for the
	// same shift with no more false alarms than the chart (none without
	// N); Sooner says in words which of the chart and the CUSUM catches
	// the shift sooner on average, EWMASays puts the EWMA beside them.
	Monitors
	Sooner   string
	EWMASays string
	// Warnings say in plain words where the plan falls short: a floor
	// lowered below the default, a lot size asked whose ARL0 is below it.
	Warnings []string
}

// PlanFor evaluates the request against the centre.
func PlanFor(c Centre, req PlanRequest) (*PlanResult, error) {
	k := req.K
	if k == 0 {
		k = c.Process.K
	}
	if k == 0 {
		k = 3
	}
	if err := spc.CheckPlanInput(c.P0, 1, k); err != nil {
		return nil, fmt.Errorf("cannot plan from %s: %w", c.Source, err)
	}
	switch {
	case !(req.P1 > 0 && req.P1 < 1):
		return nil, &OptionError{"p1", strconv.FormatFloat(req.P1, 'g', -1, 64), "must be a fraction between 0 and 1, exclusive"}
	case req.P1 == c.P0:
		return nil, &OptionError{"p1", strconv.FormatFloat(req.P1, 'g', -1, 64), "must differ from the current centre"}
	case req.N < 0:
		return nil, &OptionError{"n", strconv.FormatInt(req.N, 10), "must be a whole number greater than 0"}
	case req.TargetARL1 != 0 && !(req.TargetARL1 >= 1):
		return nil, &OptionError{"arl1", strconv.FormatFloat(req.TargetARL1, 'g', -1, 64), "must be a number of lots, 1 or more"}
	case req.MinARL0 < 0 || math.IsNaN(req.MinARL0) || math.IsInf(req.MinARL0, 1):
		return nil, &OptionError{"min_arl0", strconv.FormatFloat(req.MinARL0, 'g', -1, 64), "must be a number of lots, 1 or more"}
	}
	maxN := req.MaxN
	if maxN == 0 {
		maxN = 100000
	}
	floor := req.MinARL0
	if floor == 0 {
		floor = spc.DefaultMinARL0
	}
	res := &PlanResult{Centre: c, K: k, P1: req.P1, MinARL0: floor}
	lots := func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) }
	if floor < spc.DefaultMinARL0 {
		res.Warnings = append(res.Warnings, fmt.Sprintf("The floor on false alarms is lowered to one in %s lots on average, below the default of %d: the lot size found may raise false alarms often enough that people stop trusting the chart.",
			strconv.FormatFloat(floor, 'g', -1, 64), spc.DefaultMinARL0))
	}
	if req.N > 0 {
		pl := spc.PlanLimits(c.P0, req.N, k).WithShift(req.P1)
		res.Plan = &pl
		res.Monitors = MonitorsFor(c.P0, req.P1, req.N, pl)
		res.Sooner, res.EWMASays = compareCUSUM(res.CUSUM, pl), compareEWMA(res.Monitors, pl)
		if bar := math.Max(floor, spc.DefaultMinARL0); pl.ARL0 < bar {
			res.Warnings = append(res.Warnings, fmt.Sprintf("At %d units per lot an in-control process raises a false alarm once every %s lots on average, more often than once in %s lots.",
				req.N, lots(pl.ARL0), strconv.FormatFloat(bar, 'g', -1, 64)))
		}
	}
	if req.TargetARL1 > 0 {
		n, err := spc.SmallestNWithARL0(c.P0, req.P1, k, req.TargetARL1, floor, maxN)
		switch {
		case errors.Is(err, spc.ErrNoPlan):
			res.SmallestNote = fmt.Sprintf("no lot size up to %d detects a shift to %s within %s lots on average while keeping false alarms to at most one in %s lots", maxN,
				Percent(req.P1)+"%", strconv.FormatFloat(req.TargetARL1, 'g', -1, 64), strconv.FormatFloat(floor, 'g', -1, 64))
		case err != nil:
			return nil, err
		default:
			pl := spc.PlanLimits(c.P0, n, k).WithShift(req.P1)
			res.Smallest, res.SmallestPlan = n, &pl
		}
	}
	ns := req.CurveNs
	if ns == nil {
		hi := max(int64(200), 3*req.N, 3*res.Smallest, 2*spc.MinNPositiveLCL(c.P0, k))
		ns = CurveSizes(min(hi, maxN), 48)
	}
	res.Curve = spc.ARLCurve(c.P0, req.P1, k, ns)
	return res, nil
}

// CurveSizes returns about count lot sizes from 1 to hi, evenly spaced on
// a log scale, each once, in increasing order, hi included.
func CurveSizes(hi int64, count int) []int64 {
	if hi < 1 {
		hi = 1
	}
	var out []int64
	last := int64(0)
	for i := 0; i < count; i++ {
		n := int64(math.Round(math.Pow(float64(hi), float64(i)/float64(count-1))))
		if n > last {
			out = append(out, n)
			last = n
		}
	}
	if last < hi {
		out = append(out, hi)
	}
	return out
}

// Monitors are the CUSUM and the EWMA set beside a chart for a shift,
// each with no more false alarms than the chart (nil when none can be
// designed), and the EWMA's ARL at the shift.
type Monitors struct {
	CUSUM    *spc.CUSUM
	EWMA     *spc.EWMA
	EWMAARL1 float64
}

// MonitorsFor designs the monitors for a shift from p0 to p1 in lots of
// n units beside the chart pl: the CUSUM by spc.DesignCUSUM, the EWMA by
// spc.BestEWMA, each for an in-control ARL no shorter than the chart's
// (370 when the chart cannot signal). The planning page and `lotwatch
// plan` both set them so.
func MonitorsFor(p0, p1 float64, n int64, pl spc.Plan) Monitors {
	arl0 := pl.ARL0
	if math.IsInf(arl0, 1) || !(arl0 >= 1) {
		arl0 = spc.DefaultARL0
	}
	var m Monitors
	if c, err := spc.DesignCUSUM(spc.ChartP, p0, p1, []int64{n}, arl0, 0); err == nil {
		m.CUSUM = c
	}
	if e, arl1, err := spc.BestEWMA(spc.ChartP, p0, p1, []int64{n}, arl0); err == nil {
		m.EWMA, m.EWMAARL1 = e, arl1
	}
	return m
}

// Soonest reports whether the EWMA catches the shift sooner, by more than
// 1 %, than both the chart (its ARL at the shift, chartARL1) and the
// CUSUM (when there is one).
func (m Monitors) Soonest(chartARL1 float64) bool {
	return m.EWMA != nil && m.EWMAARL1 < 0.99*chartARL1 && (m.CUSUM == nil || m.EWMAARL1 < 0.99*m.CUSUM.ARL1)
}

// compareEWMA puts the EWMA of m beside the chart pl in words, naming it
// the soonest when it is ("" without an EWMA).
func compareEWMA(m Monitors, pl spc.Plan) string {
	e := m.EWMA
	if e == nil {
		return ""
	}
	lots := func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) }
	says := fmt.Sprintf("An EWMA of the rates (weight %g, limits at %.2f standard deviations, a false alarm once every %s lots) signals this shift after %s lots on average", e.Lambda, e.L, lots(e.ARL0), lots(m.EWMAARL1))
	if m.Soonest(pl.ARL1) {
		return says + ": the soonest of them."
	}
	return says + "."
}

// compareCUSUM says which of the chart pl and the CUSUM c catches the
// shift sooner ("" without a CUSUM).
func compareCUSUM(c *spc.CUSUM, pl spc.Plan) string {
	if c == nil {
		return ""
	}
	lots := func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) }
	chart := "never"
	if !math.IsInf(pl.ARL1, 1) {
		chart = lots(pl.ARL1) + " lots"
	}
	switch {
	case c.ARL1 < 0.99*pl.ARL1:
		return fmt.Sprintf("A CUSUM (h = %.2f, a false alarm once every %s lots) catches this shift sooner: after %s lots on average, against %s for the chart.", c.H, lots(c.ARL0), lots(c.ARL1), chart)
	case pl.ARL1 < 0.99*c.ARL1:
		return fmt.Sprintf("The chart catches this shift sooner: after %s on average, against %s lots for a CUSUM (h = %.2f, a false alarm once every %s lots).", chart, lots(c.ARL1), c.H, lots(c.ARL0))
	}
	return fmt.Sprintf("The chart and a CUSUM (h = %.2f) catch this shift equally soon, after about %s lots.", c.H, lots(c.ARL1))
}

package review

import (
	"context"
	"errors"
	"fmt"
	"html"
	"html/template"
	"math"
	"sort"
	"strconv"
	"strings"
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
		c.Source = fmt.Sprintf("centre of limit set %d, in force from %s", ls.Number, ls.EffectiveFrom.In(p.Location()).Format(dateOnly))
		return c, nil
	}
	lots, err := src.Lots(ctx, p.ID, time.Time{}, time.Time{})
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
	}
	maxN := req.MaxN
	if maxN == 0 {
		maxN = 100000
	}
	res := &PlanResult{Centre: c, K: k, P1: req.P1}
	if req.N > 0 {
		pl := spc.PlanLimits(c.P0, req.N, k).WithShift(req.P1)
		res.Plan = &pl
	}
	if req.TargetARL1 > 0 {
		n, err := spc.SmallestN(c.P0, req.P1, k, req.TargetARL1, maxN)
		switch {
		case errors.Is(err, spc.ErrNoPlan):
			res.SmallestNote = fmt.Sprintf("no lot size up to %d detects a shift to %s within %s lots on average", maxN,
				percent(req.P1)+"%", strconv.FormatFloat(req.TargetARL1, 'g', -1, 64))
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

// PlanSVG draws ARL1 (the average number of lots until a shift to P1
// signals) against lot size, both on log scales, as inline SVG with a
// dashed line at target (0 for none) and a mark at lot size mark (0 for
// none). Lot sizes at which no lot can signal are left out of the line.
// Like the review's charts it has no scripts, styles or references.
func PlanSVG(curve []spc.Plan, target float64, mark int64) template.HTML {
	const w, h = 640, 300
	const left, right, top, bottom = 60.0, 20.0, 30.0, 45.0
	var s svgWriter
	title := "Average run length after the shift (ARL1) against lot size"
	s.open(w, h, title)
	s.text(w/2, 18, "middle", "13", colourAxis, title, "")
	pw, ph := w-left-right, h-top-bottom
	var pts []spc.Plan
	maxARL, maxN := 1.0, int64(1)
	for _, pl := range curve {
		maxN = max(maxN, pl.N)
		if !math.IsInf(pl.ARL1, 0) && !math.IsNaN(pl.ARL1) && pl.ARL1 >= 1 {
			pts = append(pts, pl)
			maxARL = math.Max(maxARL, pl.ARL1)
		}
	}
	if target >= 1 {
		maxARL = math.Max(maxARL, target)
	}
	decY := math.Max(1, math.Ceil(math.Log10(maxARL)))
	decX := math.Max(1, math.Ceil(math.Log10(float64(maxN))))
	x := func(n float64) float64 { return left + pw*math.Log10(math.Max(1, n))/decX }
	y := func(a float64) float64 { return top + ph - ph*math.Log10(math.Max(1, a))/decY }
	for i := 0.0; i <= decY; i++ {
		v := math.Pow(10, i)
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, y(v), left+pw, y(v), colourGrid)
		s.text(left-6, y(v)+4, "end", "10", colourAxis, tick(v), "")
	}
	for i := 0.0; i <= decX; i++ {
		v := math.Pow(10, i)
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, x(v), top, x(v), top+ph, colourGrid)
		s.text(x(v), top+ph+14, "middle", "10", colourAxis, tick(v), "")
	}
	s.text(left+pw/2, h-8, "middle", "10", colourAxis, "units per lot (log scale)", "")
	s.text(14, top+ph/2, "middle", "10", colourAxis, "ARL1, lots (log scale)", fmt.Sprintf(` transform="rotate(-90 14 %.1f)"`, top+ph/2))
	if target >= 1 {
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s" stroke-dasharray="6 4"/>`, left, y(target), left+pw, y(target), colourLine)
		s.text(left+pw-4, y(target)-4, "end", "10", colourLine, "target "+strconv.FormatFloat(target, 'g', -1, 64)+" lots", "")
	}
	if mark > 0 {
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s" stroke-dasharray="2 3"/>`, x(float64(mark)), top, x(float64(mark)), top+ph, colourCurrent)
		s.text(x(float64(mark))+4, top+12, "start", "10", colourCurrent, "n = "+strconv.FormatInt(mark, 10), "")
	}
	var line []string
	for _, pl := range pts {
		line = append(line, fmt.Sprintf("%.1f,%.1f", x(float64(pl.N)), y(pl.ARL1)))
	}
	if len(line) > 1 {
		s.f(`<polyline points="%s" fill="none" stroke="%s" stroke-width="1.5"/>`, strings.Join(line, " "), colourBar)
	}
	for _, pl := range pts {
		s.f(`<circle cx="%.1f" cy="%.1f" r="2.5" fill="%s"><title>n = %d: ARL1 %s lots</title></circle>`, x(float64(pl.N)), y(pl.ARL1), colourBar,
			pl.N, html.EscapeString(strconv.FormatFloat(pl.ARL1, 'f', 2, 64)))
	}
	if len(pts) == 0 {
		s.text(w/2, h/2, "middle", "12", colourAxis, "No lot size in the range can signal.", "")
	}
	s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, top+ph, left+pw, top+ph, colourAxis)
	s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, top, left, top+ph, colourAxis)
	return s.close()
}

package web

import (
	"fmt"
	"math"
	"net/url"
	"sort"
	"strings"
	"time"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
	"lotwatch/store"
)

// Subgroupings of the chart page: each lot on its own, or the lots of a
// shift or of a day pooled into one subgroup (Σd over Σn).
const (
	byLot   = "lot"
	byShift = "shift"
	byDay   = "day"
)

// shiftSpan is the longest a run of lots of one shift name may last and
// still count as one shift (a night shift crosses midnight).
const shiftSpan = 12 * time.Hour

// viewPoint is one plotted subgroup (one lot, or the lots of a shift or a
// day) with everything the tooltip and the table show.
type viewPoint struct {
	Label     string
	LotID     int64 // the lot, when a point is one lot
	Time      time.Time
	Shift     string
	Lots      int
	Inspected int64
	Count     int64
	Value     float64
	Center    float64
	UCL, LCL  float64
	Z, TailP  float64
	Above     bool
	Below     bool
	Rules     []string
	Limits    string // "trial limits" or "limit set N"
	Notes     []string
	Excluded  bool
	Stretch   *stretch // on a thinned chart, what the drawn point stands for
	// Monitor holds the CUSUM and EWMA after this point, when the process
	// watches them.
	Monitor *shiftPoint
}

// shiftPoint is the CUSUM's S and the EWMA with its limits after one
// point; HasCUSUM and HasEWMA say which the process watches.
type shiftPoint struct {
	HasCUSUM, HasEWMA bool
	S                 float64
	Z, UCL, LCL       float64
	// CUSUMSignal and EWMASignal: the monitor signals at this point.
	CUSUMSignal, EWMASignal bool
}

// Out reports a point beyond a limit.
func (v viewPoint) Out() bool { return v.Above || v.Below }

// Verdict says the point's state in words.
func (v viewPoint) Verdict() string {
	switch {
	case v.Above && len(v.Rules) > 0:
		return "above the UCL; " + strings.Join(v.Rules, ", ")
	case v.Above:
		return "above the UCL"
	case v.Below:
		return "below the LCL"
	case len(v.Rules) > 0:
		return "within limits; in signal " + strings.Join(v.Rules, ", ")
	}
	return "within limits"
}

// viewSignal is a signal (run rule, CUSUM or EWMA) as the page lists it.
type viewSignal struct {
	Rule        string
	Description string
	First, Last string // labels
	LastLotID   int64
	Causes      []store.Annotation
}

// setMark is where a limit set starts within the shown points.
type setMark struct {
	Index int
	Label string
}

// chartView is one process's chart for a period and a subgrouping.
type chartView struct {
	Proc        store.Process
	Period      string
	PeriodWords string
	From, To    string
	Subgroup    string
	Unit        string // "lot" or "subgroup"
	Points      []viewPoint
	Signals     []viewSignal
	Marks       []setMark
	Notes       []string
	// NotesScope says, when the period is narrower than the record, that
	// the notes are about the limits worked out on the whole record.
	NotesScope  string
	Limits      string
	Trial       bool
	OutCount    int
	SignalCount int // signals of the run rules and of the CUSUM and EWMA
	ShiftCount  int // those of the CUSUM and EWMA
	Method      string
	K           float64
	Rate        float64
	// Shift is what the process's CUSUM and EWMA found, nil when it
	// watches neither.
	Shift *spc.ShiftWatch
}

// periodOf reads the period of the chart page: today, the latest shift,
// the last 7 or 30 days, all, or custom from/to dates. The default is 30
// days, long enough for the run rules to mean something.
func periodOf(q url.Values, pc *processChart, now time.Time) (window, string, string, error) {
	loc := pc.proc.Location()
	period := q.Get("period")
	if period == "" && (q.Get("from") != "" || q.Get("to") != "") {
		period = "custom"
	}
	if period == "" {
		period = "30d"
	}
	now = now.In(loc)
	midnight := time.Date(now.Year(), now.Month(), now.Day(), 0, 0, 0, 0, loc)
	switch period {
	case "today":
		return window{from: midnight}, period, "today, " + midnight.Format("Monday 2 January 2006"), nil
	case "shift":
		if len(pc.lots) == 0 {
			return window{from: midnight}, period, "the latest shift (no lots yet)", nil
		}
		i := shiftStart(pc.lots, len(pc.lots)-1)
		first, last := pc.lots[i], pc.lots[len(pc.lots)-1]
		name := last.Shift
		if name == "" {
			name = "without a shift name"
		}
		return window{from: first.Time}, period, fmt.Sprintf("the latest shift (%s, since %s)", name, fmtWhen(first.Time.In(loc))), nil
	case "7d":
		return window{from: now.AddDate(0, 0, -7)}, period, "the last 7 days", nil
	case "30d":
		return window{from: now.AddDate(0, 0, -30)}, period, "the last 30 days", nil
	case "all":
		return window{}, period, "the whole record", nil
	case "custom":
		w, err := parseWindow(q, loc)
		if err != nil {
			return w, period, "", err
		}
		words := "from " + orDash(q.Get("from"), "the first lot") + " to " + orDash(q.Get("to"), "the latest lot")
		return w, period, words, nil
	}
	return window{}, period, "", &paramError{"period", period, "is not one of today, shift, 7d, 30d, all or custom"}
}

func orDash(s, empty string) string {
	if s == "" {
		return empty
	}
	return s
}

// shiftStart returns the index of the first lot of the shift run that
// holds lot i: the lots before it with the same shift name, back to at
// most shiftSpan before lot i.
func shiftStart(lots []store.Lot, i int) int {
	j := i
	for j > 0 && lots[j-1].Shift == lots[i].Shift && lots[i].Time.Sub(lots[j-1].Time) <= shiftSpan {
		j--
	}
	return j
}

// groups splits the lots into subgroups: per lot, per shift run or per
// day in the process's zone. Each group is a range [start, end).
func groups(lots []store.Lot, by string, loc *time.Location) [][2]int {
	var out [][2]int
	for i := 0; i < len(lots); {
		j := i + 1
		switch by {
		case byShift:
			for j < len(lots) && lots[j].Shift == lots[i].Shift && lots[j].Time.Sub(lots[i].Time) <= shiftSpan {
				j++
			}
		case byDay:
			y, m, d := lots[i].Time.In(loc).Date()
			for j < len(lots) {
				y2, m2, d2 := lots[j].Time.In(loc).Date()
				if y2 != y || m2 != m || d2 != d {
					break
				}
				j++
			}
		}
		out = append(out, [2]int{i, j})
		i = j
	}
	return out
}

// buildView judges the subgroups and keeps those in the window. Lots are
// judged on the whole record (pc); pooled subgroups are judged again,
// each against the limit set in force at its first lot, with trial limits
// estimated from the pooled subgroups before the first set.
func buildView(pc *processChart, win window, by string, anns []store.Annotation) (*chartView, error) {
	p := pc.proc
	v := &chartView{Proc: p, Subgroup: by, Unit: "lot", Method: string(p.Method), K: p.K}
	if len(pc.lots) == 0 || pc.a == nil {
		v.Limits = "no lots yet"
		return v, nil
	}
	byLotID := map[int64][]store.Annotation{}
	for _, a := range anns {
		byLotID[a.LotID] = append(byLotID[a.LotID], a)
	}
	gs := groups(pc.lots, by, p.Location())
	a, setOf := pc.a, pc.setOf
	if by != byLot {
		v.Unit = "subgroup"
		pg, err := judgePooled(pc, gs, by)
		if err != nil {
			return nil, err
		}
		a, setOf = pg.a, pg.setOf
	}
	v.Method, v.K, v.Rate = string(a.Method), a.K, a.Rate
	v.Shift = a.Shift
	lo := sort.Search(len(gs), func(k int) bool { return win.from.IsZero() || !pc.lots[gs[k][0]].Time.Before(win.from) })
	hi := sort.Search(len(gs), func(k int) bool { return !win.to.IsZero() && pc.lots[gs[k][0]].Time.After(win.to) })
	if hi < lo {
		hi = lo
	}
	v.addPoints(pc, gs, a, setOf, lo, hi, byLotID)
	v.addSignals(pc, gs, a, lo, hi, byLotID)
	v.addRecordNotes(a)
	v.describeLimits(pc, setOf, lo, hi, a)
	return v, nil
}

// judgePooled judges the subgroups gs (the lots of a day or a shift
// pooled: Σd over Σn) against the process's limit sets.
func judgePooled(pc *processChart, gs [][2]int, by string) (*processChart, error) {
	loc := pc.proc.Location()
	pooled := make([]store.Lot, len(gs))
	for k, g := range gs {
		first := pc.lots[g[0]]
		var n, c int64
		for i := g[0]; i < g[1]; i++ {
			n += pc.lots[i].Inspected
			c += pc.lots[i].Count
		}
		label := first.Time.In(loc).Format("2006-01-02")
		if by == byShift {
			label += " " + orDash(first.Shift, "(no shift)")
		}
		pooled[k] = store.Lot{ID: int64(k), LotInput: store.LotInput{Lot: label, Time: first.Time, Shift: first.Shift, Inspected: n, Count: c}}
	}
	return judge(pc.proc, pooled, pc.sets)
}

// addPoints adds the points lo ≤ k < hi of the judged groups, with their
// monitor values, recorded causes and the limit set judging each.
func (v *chartView) addPoints(pc *processChart, gs [][2]int, a *spc.Analysis, setOf []int, lo, hi int, byLotID map[int64][]store.Annotation) {
	loc := pc.proc.Location()
	v.Points = make([]viewPoint, 0, hi-lo)
	prevSet := -1
	if lo > 0 {
		prevSet = setOf[lo-1]
	}
	for k := lo; k < hi; k++ {
		g, pt := gs[k], a.Points[k]
		first := pc.lots[g[0]]
		vp := viewPoint{Label: pt.Lot.Code, Time: first.Time.In(loc), Shift: first.Shift, Lots: g[1] - g[0],
			Inspected: pt.Lot.Inspected, Count: pt.Lot.Count, Value: pt.Value, Center: pt.Center, UCL: pt.UCL, LCL: pt.LCL,
			Z: pt.Z, TailP: pt.TailP, Above: pt.Above, Below: pt.Below, Rules: chartjson.RuleNames(pt.Rules), Excluded: pt.Excluded}
		if v.Subgroup == byLot {
			vp.LotID = first.ID
		}
		vp.Monitor = monitorPoint(a.Shift, k)
		for i := g[0]; i < g[1]; i++ {
			vp.Notes = append(vp.Notes, causeNotes(pc.lots[i], byLotID[pc.lots[i].ID], v.Subgroup != byLot)...)
		}
		n := setOf[k]
		if n > 0 {
			vp.Limits = fmt.Sprintf("limit set %d", n)
		} else {
			vp.Limits = "trial limits"
			v.Trial = true
		}
		if n != prevSet && n > 0 {
			v.Marks = append(v.Marks, setMark{Index: k - lo, Label: fmt.Sprintf("limit set %d from %s", n, setFrom(pc.sets, n, loc))})
		}
		prevSet = n
		if vp.Out() {
			v.OutCount++
		}
		v.Points = append(v.Points, vp)
	}
}

// monitorPoint is point k of the CUSUM and EWMA, nil without a monitor.
func monitorPoint(sw *spc.ShiftWatch, k int) *shiftPoint {
	if sw == nil {
		return nil
	}
	sp := &shiftPoint{HasCUSUM: sw.CUSUM != nil, HasEWMA: sw.EWMA != nil}
	if sp.HasCUSUM {
		sp.S, sp.CUSUMSignal = sw.CUSUMPoints[k].S, sw.CUSUMPoints[k].Signal
	}
	if sp.HasEWMA {
		e := sw.EWMAPoints[k]
		sp.Z, sp.UCL, sp.LCL, sp.EWMASignal = e.Z, e.UCL, e.LCL, e.Signal
	}
	return sp
}

// causeNotes are the recorded causes of a lot as a point's notes; in a
// pooled subgroup each names its lot.
func causeNotes(l store.Lot, anns []store.Annotation, pooled bool) []string {
	var notes []string
	for _, an := range anns {
		state := "open"
		if an.Closed {
			state = "closed"
		}
		note := "cause (" + state + "): " + an.Cause
		if an.NoCauseFound {
			note = "no assignable cause found: " + an.Reason
		}
		if pooled {
			note = l.Lot + " " + note
		}
		notes = append(notes, note)
	}
	return notes
}

// SignalWords counts the period's signals in words, the small shifts
// (CUSUM, EWMA) apart from the run rules' patterns.
func (v *chartView) SignalWords() string {
	run := v.SignalCount - v.ShiftCount
	switch {
	case v.SignalCount == 0:
		return "no signal"
	case v.ShiftCount == 0:
		return plural(run, "run-rule signal", "run-rule signals")
	case run == 0:
		return plural(v.ShiftCount, "small-shift signal", "small-shift signals")
	}
	return plural(run, "run-rule signal", "run-rule signals") + " and " + plural(v.ShiftCount, "small-shift signal", "small-shift signals")
}

// addSignals adds the signals (run rules, CUSUM, EWMA) that touch the points lo ≤ k < hi,
// each with the causes recorded for its lots.
func (v *chartView) addSignals(pc *processChart, gs [][2]int, a *spc.Analysis, lo, hi int, byLotID map[int64][]store.Annotation) {
	for _, sg := range a.Signals {
		if sg.Last < lo || sg.First >= hi {
			continue
		}
		vs := viewSignal{Rule: sg.Rule.String(), Description: sg.Description,
			First: a.Points[sg.First].Lot.Code, Last: a.Points[sg.Last].Lot.Code}
		lastGroup := gs[sg.Last]
		vs.LastLotID = pc.lots[lastGroup[1]-1].ID
		for i := gs[sg.First][0]; i < lastGroup[1]; i++ {
			for _, an := range byLotID[pc.lots[i].ID] {
				if an.Rule == "" || an.Rule == vs.Rule {
					vs.Causes = append(vs.Causes, an)
				}
			}
		}
		v.Signals = append(v.Signals, vs)
	}
	v.SignalCount = len(v.Signals)
	for _, sg := range a.Signals {
		if sg.Rule.Kind() == "shift" && sg.Last >= lo && sg.First < hi {
			v.ShiftCount++
		}
	}
}

// addRecordNotes adds the notes about the limits the lots are judged
// against, worked out on the whole record: none when the period has no
// lot, and a period narrower than the record says so.
func (v *chartView) addRecordNotes(a *spc.Analysis) {
	seenNote := map[string]bool{}
	for _, w := range a.Warnings {
		if len(v.Points) > 0 && !seenNote[w.Message] {
			seenNote[w.Message] = true
			v.Notes = append(v.Notes, w.Message)
		}
	}
	if d := a.Dispersion; len(v.Points) > 0 && d.Overdispersed && d.Advice != "" && !seenNote[d.Advice] {
		v.Notes = append(v.Notes, d.Advice)
	}
	if len(v.Notes) > 0 && len(v.Points) < len(a.Points) {
		v.NotesScope = fmt.Sprintf("worked out on the whole record of %s, on which the lots of this period are judged", plural(len(a.Points), v.Unit, v.Unit+"s"))
	}
}

// describeLimits names the limits the page's badge and summary speak of,
// from one source so that they agree: the limit set judging the last lot
// of the period (or, for a period with no lot, the last lot of the
// record), with that set's own method, k and centre; trial limits when
// that lot is on trial limits, or when no set is frozen.
func (v *chartView) describeLimits(pc *processChart, setOf []int, lo, hi int, a *spc.Analysis) {
	loc := pc.proc.Location()
	n := 0
	switch {
	case hi > lo:
		n = setOf[hi-1]
	case len(setOf) > 0:
		n = setOf[len(setOf)-1]
	}
	var set *store.LimitSet
	for i := range pc.sets {
		if pc.sets[i].Number == n {
			set = &pc.sets[i]
		}
	}
	if set == nil {
		v.Trial = true
		v.Method, v.K, v.Rate = string(a.Method), a.K, a.Rate
		if len(pc.sets) == 0 {
			v.Limits = "estimated from the lots themselves; an engineer freezes a limit set once a clean baseline is found"
		} else {
			v.Limits = "estimated from the lots before the first limit set"
		}
	} else {
		v.Method, v.K, v.Rate = string(set.Method), set.K, set.Center
		v.Limits = fmt.Sprintf("limit set %d, in force from %s (%s, k = %s)", set.Number,
			fmtWhen(set.EffectiveFrom.In(loc)), set.Method, fmtFloat(set.K))
		if v.Trial {
			v.Limits += "; lots of this period before the first set are on trial limits — not frozen"
		}
	}
	if len(pc.lots) > 0 {
		last := pc.lots[len(pc.lots)-1].Time
		for _, ls := range pc.sets {
			if ls.EffectiveFrom.After(last) {
				v.Limits += fmt.Sprintf("; limit set %d comes into force from %s", ls.Number, fmtWhen(ls.EffectiveFrom.In(loc)))
			}
		}
	}
}

func setFrom(sets []store.LimitSet, n int, loc *time.Location) string {
	for _, s := range sets {
		if s.Number == n {
			return s.EffectiveFrom.In(loc).Format("2006-01-02")
		}
	}
	return "?"
}

// maxDrawn is the most points drawn on a chart, however long the record
// and its signals; above it a browser's canvas chart becomes slow to pan
// and hover (common practice, no source).
const maxDrawn = 2000

// stretch is a run of consecutive points that a thinned chart draws as
// at most four: what the drawn ones stand for, said in their tooltips.
type stretch struct {
	First, Last string // labels of its first and last point
	Points      int
	Out         int // points outside their limits
	Signal      int // points in a run-rule signal
}

// thin chooses the points to draw: all when there are at most maxDrawn;
// else the points are cut into maxDrawn/4 stretches of consecutive
// points, and of each stretch are drawn the lowest and the highest, the
// one furthest outside its limits (by |z|) and the first in a signal.
// Every drawn point of a thinned stretch carries the stretch, whose
// counts its tooltip gives, so that a point outside its limits is drawn
// or counted by a drawn one that is outside its limits too.
func thin(ps []viewPoint) (idx []int, thinned bool) {
	if len(ps) <= maxDrawn {
		idx = make([]int, len(ps))
		for i := range idx {
			idx[i] = i
		}
		return idx, false
	}
	buckets := maxDrawn / 4
	size := (len(ps) + buckets - 1) / buckets
	for b := 0; b < len(ps); b += size {
		e := min(b+size, len(ps))
		st := &stretch{First: ps[b].Label, Last: ps[e-1].Label, Points: e - b}
		lo, hi, worst, sig := b, b, -1, -1
		for i := b; i < e; i++ {
			p := &ps[i]
			if p.Value < ps[lo].Value {
				lo = i
			}
			if p.Value > ps[hi].Value {
				hi = i
			}
			if p.Out() {
				st.Out++
				if worst < 0 || math.Abs(p.Z) > math.Abs(ps[worst].Z) {
					worst = i
				}
			}
			if len(p.Rules) > 0 {
				st.Signal++
				if sig < 0 {
					sig = i
				}
			}
		}
		keep := []int{lo, hi, worst, sig}
		sort.Ints(keep)
		for k, i := range keep {
			if i >= 0 && (k == 0 || i != keep[k-1]) {
				ps[i].Stretch = st
				idx = append(idx, i)
			}
		}
	}
	return idx, true
}

// words says what a thinned stretch holds.
func (st *stretch) words() string {
	w := fmt.Sprintf("drawn for %s points, %s … %s", thousands(int64(st.Points)), st.First, st.Last)
	if st.Out > 0 {
		w += "; " + thousands(int64(st.Out)) + " outside their limits"
	}
	if st.Signal > 0 {
		w += "; " + thousands(int64(st.Signal)) + " in a signal"
	}
	return w
}

// tooltip is the lines a point's tooltip shows, in plain words.
func (v *chartView) tooltip(p viewPoint) []string {
	lines := []string{p.Label + " · " + fmtWhen(p.Time)}
	if v.Subgroup != byLot {
		lines = append(lines, plural(p.Lots, "lot", "lots")+" pooled")
	}
	lines = append(lines,
		fmt.Sprintf("n = %s, count = %s, %s = %s", thousands(p.Inspected), thousands(p.Count), valueShort(string(v.Proc.Chart)), fmtFloat(p.Value)),
		fmt.Sprintf("limits %s … %s (centre %s, %s)", fmtFloat(p.LCL), fmtFloat(p.UCL), fmtFloat(p.Center), p.Limits),
		fmt.Sprintf("z = %s; %s", fmtFloat(p.Z), p.Verdict()))
	unit := "lots"
	if v.Subgroup != byLot {
		unit = "subgroups of this size"
	}
	if w := tailWords(p.TailP, p.Value >= p.Center, unit); w != "" {
		lines = append(lines, w)
	}
	lines = append(lines, p.Notes...)
	if p.Stretch != nil {
		lines = append(lines, p.Stretch.words())
	}
	return lines
}

func valueShort(chart string) string {
	switch chart {
	case "p":
		return "fraction"
	case "np":
		return "count"
	case "u":
		return "per unit"
	}
	return "count"
}

// finite is f, or NaN turned into "-" by chartValue later.
func finite(f float64) Num {
	if math.IsInf(f, 0) {
		return Num(math.NaN())
	}
	return Num(f)
}

// chartKind names the chart with its statistic.
func chartKind(c spc.Chart) string {
	switch c {
	case spc.ChartP:
		return "p chart (fraction nonconforming)"
	case spc.ChartNP:
		return "np chart (nonconforming units)"
	case spc.ChartU:
		return "u chart (defects per unit)"
	case spc.ChartC:
		return "c chart (defects per lot)"
	}
	return string(c) + " chart"
}

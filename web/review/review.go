// Package review computes the figures of the weekly review of inspected
// lots: for one ISO week and each process, the rate with its confidence
// interval beside the previous week's, the change between them with its
// interval, test and verdict, the week's out-of-limit lots and signals
// with their recorded causes, a Pareto of the defect categories, a trend
// of the weekly rate and the dispersion check of the week's lots; and the
// figures of planning a lot size. It judges a process's record against
// its limit sets (Judge).
//
// It reads lots through Source (which *store.DB satisfies); it neither
// renders nor serves: package report writes a review as text, CSV, JSON
// and HTML.
package review

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"lotwatch/spc"
	"lotwatch/spc/judge"
	"lotwatch/store"
	"lotwatch/web/attention"
)

// Source is what the review reads from the store.
type Source interface {
	Processes(ctx context.Context, includeRetired bool) ([]store.Process, error)
	// LotCounts: the review reads no inspector, note or record of who logged a lot.
	LotCounts(ctx context.Context, processID int64, from, to time.Time) ([]store.Lot, error)
	LimitSets(ctx context.Context, processID int64) ([]store.LimitSet, error)
	Annotations(ctx context.Context, processID int64) ([]store.Annotation, error)
}

var _ Source = (*store.DB)(nil)

// DefaultTrendWeeks is the length of the trend in weeks.
const DefaultTrendWeeks = 12

// maxTrendWeeks bounds Options.TrendWeeks (two years).
const maxTrendWeeks = 104

// Options chooses what the review covers.
type Options struct {
	// Week is the ISO 8601 week, "2026-W48" (or "2026W48"). "" means the
	// last week that is complete, as of Now, in every chosen process's
	// time zone.
	Week string
	// Now is the current time, for the default week; zero means time.Now().
	Now time.Time
	// Judged, when set, gives each process's judged record from a store
	// of judged records the caller keeps (see JudgedFunc); nil judges
	// each process's whole record here.
	Judged JudgedFunc
	// Processes names the processes to review; none means every active
	// process. A named process is reviewed even when retired.
	Processes []string
	// Method is the interval method for p and np processes (one of
	// spc.ProportionMethods); "" means Wilson. The rates of u and c
	// processes always get the exact Poisson interval.
	Method spc.IntervalMethod
	// Level is the confidence level of every interval; 0 means 0.95.
	Level float64
	// TrendWeeks is the number of weeks, ending with the reviewed one, of
	// the trend; 0 means DefaultTrendWeeks. At least 2, at most 104. (The
	// lots are judged on the whole record whatever the trend's length.)
	TrendWeeks int
	// FDR judges each change on its p-value adjusted for the false
	// discovery rate across the processes of the review (Benjamini &
	// Hochberg 1995) rather than on its own p-value. The adjusted values
	// are computed and shown either way.
	FDR bool
}

// OptionError is a bad option of the review, naming it and its value.
type OptionError struct {
	Option, Value, Reason string
}

func (e *OptionError) Error() string {
	return fmt.Sprintf("%s %q %s", e.Option, e.Value, e.Reason)
}

// Review is the weekly review of a set of processes.
type Review struct {
	Week       string    // "2026-W48"
	Year, Num  int       // ISO year and week number
	FirstDay   time.Time // Monday of the week (a date; midnight UTC)
	LastDay    time.Time // Sunday of the week
	Method     spc.IntervalMethod
	Level      float64
	TrendWeeks int
	Generated  time.Time
	Processes  []*ProcessReview
	// FDR is true when the verdicts were judged on adjusted p-values.
	FDR bool
	// Chance counts the changes of the review and what chance alone
	// would give (see Multiplicity).
	Chance Multiplicity
}

// Multiplicity sums the verdicts of one review. Each comparison run at
// significance Alpha states a change from sampling alone with probability
// up to Alpha when nothing changed, so across Compared processes about
// Compared·Alpha such verdicts are expected from chance alone.
type Multiplicity struct {
	Compared int     // processes whose two weeks were compared
	Alpha    float64 // 1 − level
	Expected float64 // Compared·Alpha
	// Stated counts the verdicts, on each process's own p-value, of a
	// change unlikely from sampling alone; AfterFDR those still stated
	// when each p-value is adjusted for the false discovery rate.
	Stated, AfterFDR int
}

// Sentence says the multiplicity in plain words, for every rendering.
func (m Multiplicity) Sentence(fdr bool) string {
	if m.Compared < 2 {
		return ""
	}
	verb := func(n int, one, many string) string {
		if n == 1 {
			return "1 " + one
		}
		return strconv.Itoa(n) + " " + many
	}
	s := fmt.Sprintf("%s compared: %s a change unlikely from sampling alone on its own p-value; chance alone would give about %s such verdicts across %d processes at the %s level even if no process changed.",
		Plural(m.Compared, "process", "processes"), verb(m.Stated, "shows", "show"), strconv.FormatFloat(m.Expected, 'f', 1, 64), m.Compared, LevelPercent(m.Alpha))
	s += fmt.Sprintf(" With p-values adjusted for the false discovery rate across the review (Benjamini–Hochberg), %s", verb(m.AfterFDR, "remains", "remain"))
	if fdr {
		return s + "; the verdicts below use the adjusted p-values."
	}
	return s + "; the verdicts below use each process's own p-value."
}

// ProcessReview is the review of one process.
type ProcessReview struct {
	Process store.Process
	// Method is the interval method used for this process's rates.
	Method spc.IntervalMethod
	// Current and Previous are the reviewed week and the one before.
	Current, Previous WeekStat
	Change            Change
	// Signals are the run-rule signals that touch the week.
	Signals []Signal
	// OutOfLimits are the week's lots beyond a control limit.
	OutOfLimits []OutOfLimit
	// Pareto is the week's defect categories, largest first.
	Pareto []spc.ParetoBar
	// Uncategorized is the part of the week's count not split into
	// categories (the lots' category counts may cover less than Count).
	Uncategorized int64
	// Trend is the weekly rate over TrendWeeks weeks, oldest first,
	// ending with the reviewed week.
	Trend []WeekStat
	// Dispersion is the check of the week's lots against binomial or
	// Poisson sampling; nil when it could not be run (see Notes).
	Dispersion *spc.Dispersion
	// Warnings are the engine's diagnostics of the week's lots.
	Warnings []spc.Warning
	// Notes are problems met while reviewing, in plain words.
	Notes []string
	// NeedAttention counts the lots of the whole record, of any age, that
	// need attention: flagged and not yet explained (package attention).
	NeedAttention int
}

// WeekStat sums the lots of one ISO week of a process.
type WeekStat struct {
	Week      string
	Start     time.Time // Monday 00:00 local
	End       time.Time // the next Monday 00:00 local (exclusive)
	Lots      int
	Inspected int64
	Count     int64
	// Rate is Count/Inspected: a fraction nonconforming (p, np) or defects
	// per unit (u, c). Rate, Lower and Upper are NaN when Lots is 0.
	Rate, Lower, Upper float64
}

// HasLots reports whether any lot was inspected in the week.
func (w WeekStat) HasLots() bool { return w.Lots > 0 && w.Inspected > 0 }

// Change compares the reviewed week with the previous one (current minus
// previous).
type Change struct {
	// Compared is false when either week has no lots; the numbers are
	// then NaN.
	Compared                            bool
	Difference, Lower, Upper, PValue, Z float64
	// AdjustedP is PValue adjusted for the false discovery rate across
	// the processes compared in the review (Benjamini–Hochberg); NaN when
	// not compared.
	AdjustedP float64
	// Interval and Test name the methods used.
	Interval, Test string
	// Verdict says in plain words what the change means; Detail adds the
	// reason when there is too little data.
	Verdict, Detail string
}

// Signal is a run-rule or small-shift signal touching the reviewed week.
type Signal struct {
	Rule string // e.g. "we1", "nelson2", "cusum"
	// Kind is what kind of evidence the signal is, in the words of the
	// API: "run_rule" (a pattern of lots, or a lot beyond a limit) or
	// "shift" (a CUSUM or EWMA signal: a small shift that lasts).
	Kind        attention.Kind
	Description string
	Side        int8
	Lots        []string // lot codes, in time order
	First, Last time.Time
	// Annotations are the recorded causes on the signal's lots (those
	// naming this rule or no rule).
	Annotations []store.Annotation
}

// OutOfLimit is a lot of the week beyond a control limit.
type OutOfLimit struct {
	Lot             store.Lot
	Value, UCL, LCL float64
	Above           bool
	Limits          string // "trial limits" or "limit set 2"
	Annotations     []store.Annotation
}

// CauseStatus says whether causes are recorded and closed: "no cause
// recorded", "cause open" (any annotation still open) or "cause closed".
func CauseStatus(as []store.Annotation) string {
	if len(as) == 0 {
		return "no cause recorded"
	}
	found := false
	for _, a := range as {
		if !a.Closed {
			return "cause open"
		}
		found = found || !a.NoCauseFound
	}
	if !found {
		return "no assignable cause found"
	}
	return "cause closed"
}

// Build assembles the review from src.
func Build(ctx context.Context, src Source, opt Options) (*Review, error) {
	method := opt.Method
	if method == "" {
		method = spc.IntervalWilson
	}
	if m, err := spc.ParseIntervalMethod(string(method)); err != nil || m == spc.IntervalPoissonExact {
		return nil, &OptionError{"method", string(method), "is not a method for a proportion (want wilson, clopper-pearson, agresti-coull, jeffreys or wald; u and c processes always get the exact Poisson interval)"}
	}
	level := opt.Level
	if level == 0 {
		level = 0.95
	}
	if !(level > 0 && level < 1) {
		return nil, &OptionError{"level", strconv.FormatFloat(level, 'g', -1, 64), "must be a number between 0 and 1, such as 0.95"}
	}
	weeks := opt.TrendWeeks
	if weeks == 0 {
		weeks = DefaultTrendWeeks
	}
	if weeks < 2 || weeks > maxTrendWeeks {
		return nil, &OptionError{"trend weeks", strconv.Itoa(weeks), fmt.Sprintf("must be from 2 to %d", maxTrendWeeks)}
	}
	now := opt.Now
	if now.IsZero() {
		now = time.Now()
	}

	all, err := src.Processes(ctx, len(opt.Processes) > 0)
	if err != nil {
		return nil, fmt.Errorf("review: reading processes: %w", err)
	}
	procs, err := choose(all, opt.Processes)
	if err != nil {
		return nil, err
	}

	var year, week int
	if opt.Week == "" {
		year, week = LastCompleteWeek(now, procs)
	} else if year, week, err = spc.ParseISOWeek(opt.Week); err != nil {
		return nil, &OptionError{"week", opt.Week, strings.TrimPrefix(err.Error(), fmt.Sprintf("week %q ", opt.Week))}
	}
	first, _ := spc.ISOWeekRange(year, week, time.UTC)
	r := &Review{
		Week: spc.FormatISOWeek(year, week), Year: year, Num: week,
		FirstDay: first, LastDay: first.AddDate(0, 0, 6),
		Method: method, Level: level, TrendWeeks: weeks, Generated: now,
	}
	// The processes are reviewed side by side, one worker per processor:
	// each reads and judges its own record.
	r.Processes = make([]*ProcessReview, len(procs))
	errs := make([]error, len(procs))
	next := make(chan int)
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), len(procs)) {
		wg.Go(func() {
			for i := range next {
				r.Processes[i], errs[i] = buildProcess(ctx, src, procs[i], year, week, method, level, weeks, opt.Judged)
			}
		})
	}
	for i := range procs {
		next <- i
	}
	close(next)
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			return nil, fmt.Errorf("review of process %q: %w", procs[i].Name, err)
		}
	}
	r.adjust(opt.FDR)
	return r, nil
}

// adjust adjusts the p-values of the changes for the false discovery rate
// across the processes compared, counts the verdicts, and when fdr is set
// judges each change on its adjusted p-value.
func (r *Review) adjust(fdr bool) {
	alpha := 1 - r.Level
	ps := make([]float64, len(r.Processes))
	for i, pr := range r.Processes {
		ps[i] = math.NaN()
		if pr.Change.Compared {
			ps[i] = pr.Change.PValue
		}
	}
	adj := spc.BenjaminiHochberg(ps)
	r.FDR = fdr
	r.Chance = Multiplicity{Alpha: alpha}
	for i, pr := range r.Processes {
		c := &pr.Change
		if !c.Compared {
			continue
		}
		c.AdjustedP = adj[i]
		r.Chance.Compared++
		if c.StatesChange() {
			r.Chance.Stated++
		}
		onAdjusted := Verdict(c.Difference, c.Lower, c.Upper, c.AdjustedP, alpha)
		if strings.Contains(onAdjusted, "unlikely from sampling alone") {
			r.Chance.AfterFDR++
		}
		if fdr {
			c.Verdict = strings.Replace(onAdjusted, FormatP(c.AdjustedP), FormatP(c.PValue)+", adjusted "+strings.TrimPrefix(FormatP(c.AdjustedP), "p "), 1)
		}
	}
	r.Chance.Expected = float64(r.Chance.Compared) * alpha
}

// choose picks the named processes (any, retired or not) in the order
// named, or every active one, by name.
func choose(all []store.Process, names []string) ([]store.Process, error) {
	if len(names) == 0 {
		var out []store.Process
		for _, p := range all {
			if p.Active {
				out = append(out, p)
			}
		}
		sort.Slice(out, func(i, j int) bool { return out[i].Name < out[j].Name })
		return out, nil
	}
	byName := make(map[string]store.Process, len(all))
	for _, p := range all {
		byName[p.Name] = p
	}
	var out []store.Process
	seen := map[string]bool{}
	for _, n := range names {
		p, ok := byName[n]
		if !ok {
			known := make([]string, 0, len(all))
			for _, p := range all {
				known = append(known, p.Name)
			}
			sort.Strings(known)
			why := "is not a process"
			if len(known) > 0 {
				why += " (known: " + strings.Join(known, ", ") + ")"
			}
			return nil, &OptionError{"process", n, why}
		}
		if !seen[n] {
			seen[n] = true
			out = append(out, p)
		}
	}
	return out, nil
}

// LastCompleteWeek returns the latest ISO week that has ended, as of now,
// on the clocks of every process given (UTC when none): the week before
// the current one in the zone that is furthest behind.
func LastCompleteWeek(now time.Time, procs []store.Process) (year, week int) {
	locs := []*time.Location{time.UTC}
	if len(procs) > 0 {
		locs = locs[:0]
		for _, p := range procs {
			locs = append(locs, p.Location())
		}
	}
	for i, loc := range locs {
		y, w := spc.PreviousISOWeek(spc.ISOWeekOf(now, loc))
		if i == 0 || y < year || (y == year && w < week) {
			year, week = y, w
		}
	}
	return year, week
}

// buildProcess reviews one process: the trend and the week are summed
// from their own lots; the verdicts on the week's lots come from the
// whole record judged (judged, or here).
func buildProcess(ctx context.Context, src Source, p store.Process, year, week int, method spc.IntervalMethod, level float64, nweeks int, judged JudgedFunc) (*ProcessReview, error) {
	pr := &ProcessReview{Process: p, Method: method}
	if !p.Chart.CountsUnits() {
		pr.Method = spc.IntervalPoissonExact
	}
	pr.Trend = trendWeeks(year, week, nweeks, p.Location())
	lots, flagged, err := readJudged(ctx, src, p, pr.Trend[0].Start, pr.Trend[nweeks-1].End, judged)
	if err != nil {
		return nil, err
	}
	notes, err := src.Annotations(ctx, p.ID)
	if err != nil {
		return nil, fmt.Errorf("reading annotations: %w", err)
	}

	weekLots, categories := pr.sumWeeks(lots)
	for i := range pr.Trend {
		if err := pr.Trend[i].estimate(p.Chart, pr.Method, level); err != nil {
			return nil, fmt.Errorf("week %s: %w", pr.Trend[i].Week, err)
		}
	}
	pr.Current, pr.Previous = pr.Trend[nweeks-1], pr.Trend[nweeks-2]
	pr.Change = compare(p.Chart, pr.Current, pr.Previous, level)

	if pr.Pareto, err = spc.Pareto(categories); err != nil {
		return nil, fmt.Errorf("defect categories of %s: %w", pr.Current.Week, err)
	}
	var categorized int64
	for _, n := range categories {
		categorized += n
	}
	pr.Uncategorized = max(0, pr.Current.Count-categorized)

	pr.Notes = append(pr.Notes, flagged.notes...)
	if flagged.f != nil {
		pr.NeedAttention = len(flagged.f.Unexplained(p, notes))
	}
	if len(weekLots) > 0 {
		if flagged.err != nil {
			pr.Notes = append(pr.Notes, "The lots could not be judged against their limits: "+flagged.err.Error()+".")
		} else {
			pr.week(flagged.f, weekLots, notes)
		}
		pr.checkWeek(weekLots)
	}
	return pr, nil
}

// trendWeeks are the n ISO weeks ending with the reviewed one, oldest
// first, each bounded on the process's clocks.
func trendWeeks(year, week, n int, loc *time.Location) []WeekStat {
	trend := make([]WeekStat, n)
	for i := n - 1; i >= 0; i-- {
		st := &trend[i]
		st.Week = spc.FormatISOWeek(year, week)
		st.Start, st.End = spc.ISOWeekRange(year, week, loc)
		year, week = spc.PreviousISOWeek(year, week)
	}
	return trend
}

// sumWeeks sums the lots (in time order) into the trend's weeks, the week
// of a lot read on the plant's clocks, and returns the reviewed week's
// lots and their counts by defect category.
func (pr *ProcessReview) sumWeeks(lots []store.Lot) (weekLots []store.Lot, categories map[string]int64) {
	loc := pr.Process.Location()
	index := make(map[[2]int]int, len(pr.Trend)) // (ISO year, week) → position
	for i, st := range pr.Trend {
		y, w := spc.ISOWeekOf(st.Start, loc)
		index[[2]int{y, w}] = i
	}
	last := len(pr.Trend) - 1
	lo, hi := -1, -1 // the reviewed week's lots are lots[lo:hi]
	categories = map[string]int64{}
	for i, l := range lots {
		y, w := spc.ISOWeekOf(l.Time, loc)
		j, ok := index[[2]int{y, w}]
		if !ok {
			continue // outside the trend's weeks
		}
		st := &pr.Trend[j]
		st.Lots++
		st.Inspected += l.Inspected
		st.Count += l.Count
		if j == last {
			if lo < 0 {
				lo = i
			}
			hi = i + 1
			for c, n := range l.Categories {
				categories[c] += n
			}
		}
	}
	if lo < 0 {
		return nil, categories
	}
	return lots[lo:hi], categories
}

// JudgedFunc gives what a process's whole record, judged against its
// limit sets (Judge), flags: its lots out of limits and its signals, each
// with its judged point (attention.Flag). A caller that keeps these for
// the status board (keyed by the store's change counter) hands them to
// Build, which then reads only the lots of the trend's weeks; the figures
// are the same as when Build judges the record itself.
type JudgedFunc func(ctx context.Context, p store.Process) (*attention.Flagged, error)

// judgedRecord is what judging a record gave: the flags, notes on how it
// was judged, or why it could not be.
type judgedRecord struct {
	f     *attention.Flagged
	notes []string
	err   error
}

// readJudged reads the process's lots from from to to (in time order)
// and what its whole record flags: from judged when given, or else by
// reading and judging every lot of the record here.
func readJudged(ctx context.Context, src Source, p store.Process, from, to time.Time, judged JudgedFunc) ([]store.Lot, judgedRecord, error) {
	byTime := func(lots []store.Lot) {
		sort.SliceStable(lots, func(i, j int) bool { return lots[i].Time.Before(lots[j].Time) })
	}
	if judged != nil {
		var jr judgedRecord
		jr.f, jr.err = judged(ctx, p)
		lots, err := src.LotCounts(ctx, p.ID, from, to)
		if err != nil {
			return nil, jr, fmt.Errorf("reading lots: %w", err)
		}
		byTime(lots)
		return lots, jr, nil
	}
	// Every lot of the record is read: the lots are judged on the whole
	// record, as on the chart page (trial limits from all lots before the
	// first frozen set), so that a lot's verdict is the same wherever it
	// is shown.
	all, err := src.LotCounts(ctx, p.ID, time.Time{}, time.Time{})
	if err != nil {
		return nil, judgedRecord{}, fmt.Errorf("reading lots: %w", err)
	}
	byTime(all)
	sets, err := src.LimitSets(ctx, p.ID)
	if err != nil {
		return nil, judgedRecord{}, fmt.Errorf("reading limit sets: %w", err)
	}
	jr := judgeRecord(p, all, sets)
	lo := sort.Search(len(all), func(i int) bool { return !all[i].Time.Before(from) })
	hi := sort.Search(len(all), func(i int) bool { return !all[i].Time.Before(to) })
	return all[lo:hi], jr, nil
}

// judgeRecord judges a process's whole record (in time order) against its
// limit sets and collects what it flags. Run rules that cannot be read
// are left out, with a note.
func judgeRecord(p store.Process, lots []store.Lot, sets []store.LimitSet) judgedRecord {
	var jr judgedRecord
	if len(lots) == 0 {
		jr.f = &attention.Flagged{}
		return jr
	}
	rules := spc.RulesNone
	if p.Rules != "" {
		var err error
		if rules, err = spc.ParseRules(p.Rules); err != nil {
			jr.notes = append(jr.notes, fmt.Sprintf("The run rules %q of the process cannot be read (%v); only the limits were judged.", p.Rules, err))
			rules = spc.RulesNone
		}
	}
	a, setOf, err := Judge(p, lots, sets, rules)
	if err != nil {
		jr.err = err
		return jr
	}
	jr.f = attention.Flag(lots, a, setOf)
	return jr
}

// estimate sets the rate and its interval.
func (st *WeekStat) estimate(ch spc.Chart, m spc.IntervalMethod, level float64) error {
	st.Rate, st.Lower, st.Upper = math.NaN(), math.NaN(), math.NaN()
	if !st.HasLots() {
		return nil
	}
	var iv spc.Interval
	var err error
	if ch.CountsUnits() {
		iv, err = spc.ProportionInterval(st.Count, st.Inspected, level, m)
	} else {
		iv, err = spc.PoissonInterval(st.Count, float64(st.Inspected), level)
	}
	if err != nil {
		return err
	}
	st.Rate, st.Lower, st.Upper = iv.Estimate, iv.Lower, iv.Upper
	return nil
}

// compare compares the reviewed week with the previous one.
func compare(ch spc.Chart, cur, prev WeekStat, level float64) Change {
	nan := math.NaN()
	c := Change{Difference: nan, Lower: nan, Upper: nan, PValue: nan, AdjustedP: nan, Z: nan}
	if ch.CountsUnits() {
		c.Interval = "Newcombe hybrid score"
		c.Test = spc.TestPooledZ + " (" + spc.TestFisherExact + " where few are expected)"
	} else {
		c.Interval = "MOVER from Poisson score limits"
		c.Test = spc.TestConditionalPoisson
	}
	switch {
	case !cur.HasLots():
		c.Verdict = VerdictNoLots
		c.Detail = fmt.Sprintf("too little data: no lots inspected in %s", cur.Week)
		return c
	case !prev.HasLots():
		c.Verdict = VerdictNoLots
		c.Detail = fmt.Sprintf("too little data to compare: no lots inspected in %s", prev.Week)
		return c
	}
	var d spc.Difference
	var err error
	if ch.CountsUnits() {
		d, err = spc.CompareProportions(cur.Count, cur.Inspected, prev.Count, prev.Inspected, level)
	} else {
		d, err = spc.ComparePoissonRates(cur.Count, float64(cur.Inspected), prev.Count, float64(prev.Inspected), level)
	}
	if err != nil {
		c.Verdict = VerdictNoLots
		c.Detail = "too little data: " + err.Error()
		return c
	}
	c.Compared = true
	c.Difference, c.Lower, c.Upper, c.PValue, c.Z = d.Difference, d.Lower, d.Upper, d.PValue, d.Z
	c.Test = d.Test
	c.Verdict = Verdict(d.Difference, d.Lower, d.Upper, d.PValue, 1-level)
	return c
}

// VerdictNoLots is the verdict when a week has no lots to compare.
const VerdictNoLots = "no lots inspected"

// Verdict says in plain words what a change of diff, with confidence
// interval (lower, upper) at level 1 − alpha and two-sided p-value p,
// means. It states a change only when the test and the interval agree
// that sampling alone is unlikely to explain it: p below alpha and an
// interval that leaves out 0. When they disagree (which a test and an
// interval built by different methods can do near the boundary) it says
// so rather than pick one. It never says the process got better or worse
// (the test cannot tell a real change from a change in how lots were
// sampled or inspected) nor that nothing changed (a large p-value only
// says the data cannot tell).
func Verdict(diff, lower, upper, p, alpha float64) string {
	excludes0 := lower > 0 || upper < 0
	switch {
	case p < alpha && excludes0 && diff > 0:
		return "a rise unlikely from sampling alone (" + FormatP(p) + ")"
	case p < alpha && excludes0 && diff < 0:
		return "a fall unlikely from sampling alone (" + FormatP(p) + ")"
	case p < alpha:
		return "too close to call (" + FormatP(p) + ", but the interval includes no change)"
	case excludes0:
		return "too close to call (the interval leaves out no change, but " + FormatP(p) + ")"
	}
	return "within what sampling alone produces (" + FormatP(p) + ")"
}

// StatesChange reports whether the verdict states a rise or a fall.
func (c Change) StatesChange() bool {
	return c.Compared && strings.Contains(c.Verdict, "unlikely from sampling alone")
}

// FormatP formats a p-value for reading: "p = 0.003", "p = 0.41",
// "p < 0.001".
func FormatP(p float64) string {
	switch {
	case math.IsNaN(p):
		return "p not available"
	case p < 0.001:
		return "p < 0.001"
	case p >= 0.995:
		return "p = 1"
	}
	return "p = " + strconv.FormatFloat(p, 'g', 2, 64)
}

// week keeps what the judged record flags among the reviewed week's lots
// (weekLots, in time order): the lots beyond a limit, and the signals with
// a lot in the week, each with the causes recorded on its lots.
func (pr *ProcessReview) week(f *attention.Flagged, weekLots []store.Lot, notes []store.Annotation) {
	start, end := weekLots[0].Time, weekLots[len(weekLots)-1].Time
	inWeek := make(map[int64]store.Lot, len(weekLots))
	for _, l := range weekLots {
		inWeek[l.ID] = l
	}
	byLot := map[int64][]store.Annotation{}
	for _, n := range notes {
		if n.LotID != 0 {
			byLot[n.LotID] = append(byLot[n.LotID], n)
		}
	}
	for _, fl := range f.Lots {
		l, ok := inWeek[fl.LotID]
		if !fl.Out || !ok {
			continue
		}
		lim := "trial limits"
		if fl.Set > 0 {
			lim = "limit set " + strconv.Itoa(fl.Set)
		}
		pr.OutOfLimits = append(pr.OutOfLimits, OutOfLimit{Lot: l, Value: fl.Value, UCL: fl.UCL, LCL: fl.LCL,
			Above: fl.Above, Limits: lim, Annotations: byLot[l.ID]})
	}
	for _, sg := range f.Signals {
		first, last := f.At(sg.First), f.At(sg.Last)
		if first == nil || last == nil || last.Time.Before(start) || first.Time.After(end) {
			continue
		}
		s := Signal{Rule: sg.Rule.String(), Kind: signalKind(sg.Rule), Description: sg.Description, Side: sg.Side,
			First: first.Time, Last: last.Time}
		for i := sg.First; i <= sg.Last; i++ {
			if fl := f.At(i); fl != nil {
				s.Lots = append(s.Lots, fl.Lot)
			}
		}
		for _, id := range sg.LotIDs {
			for _, n := range byLot[id] {
				if n.Rule == "" || n.Rule == s.Rule {
					s.Annotations = append(s.Annotations, n)
				}
			}
		}
		pr.Signals = append(pr.Signals, s)
	}
}

// signalKind is "shift" for the CUSUM and EWMA, "run_rule" for every
// other signal (a lot beyond a limit is listed among the run rules, as
// Western Electric rule 1 and Nelson test 1 are).
func signalKind(r spc.Rule) attention.Kind {
	if attention.SignalKind(r) == attention.Shift {
		return attention.Shift
	}
	return attention.RunRule
}

// ShiftMeaning says in plain words what a small-shift signal (CUSUM or
// EWMA) means, for every rendering of the review.
const ShiftMeaning = "A sustained small shift: weighing many lots together, the monitor finds that the rate has moved " +
	"from its centre and stayed moved, often by too little in any one lot for the control limits to catch. " +
	"Like any signal it calls for its cause to be found and recorded (or the finding that none was found)."

// Meaning is the plain-words reading of the signal's kind: ShiftMeaning
// for a small shift, "" for a run rule (its description says it all).
func (s Signal) Meaning() string {
	if s.Kind == attention.Shift {
		return ShiftMeaning
	}
	return ""
}

// Shifts counts the small-shift signals touching the week.
func (pr *ProcessReview) Shifts() int {
	n := 0
	for _, s := range pr.Signals {
		if s.Kind == attention.Shift {
			n++
		}
	}
	return n
}

// Judge judges lots (in time order) of process p against its limit sets
// with judge.Judge: trial limits before the first set, each set from its
// EffectiveFrom on. setOf gives for each lot the Number of the set
// judging it, 0 for trial limits.
func Judge(p store.Process, lots []store.Lot, sets []store.LimitSet, rules spc.RuleSet) (a *spc.Analysis, setOf []int, err error) {
	if len(lots) == 0 {
		return nil, nil, errors.New("no lots")
	}
	times := make([]time.Time, len(lots))
	for i, l := range lots {
		times[i] = l.Time
	}
	sets = SortLimitSets(sets)
	js := make([]judge.Set, len(sets))
	for i, ls := range sets {
		js[i] = judge.Set{Number: ls.Number, EffectiveFrom: ls.EffectiveFrom, Method: ls.Method, K: ls.K, Center: ls.Center, SigmaZ: ls.SigmaZ}
	}
	in := spcLots(lots)
	a, setOf, err = judge.Judge(in, times, spc.Config{Chart: p.Chart, Method: p.Method, K: p.K}, js, rules)
	// The monitors of the limit set in force at the last lot, frozen with
	// its centre, or else the process's own.
	mon := p.Monitors
	var inForce *store.LimitSet
	for i := range sets {
		if !sets[i].EffectiveFrom.After(lots[len(lots)-1].Time) {
			inForce = &sets[i]
		}
	}
	if inForce != nil && inForce.Monitors.On() {
		mon = inForce.Monitors
	}
	if err == nil && mon.On() {
		watchShifts(a, in, mon)
	}
	return a, setOf, err
}

// watchShifts adds the signals of the process's CUSUM and EWMA (kind
// "shift") to its judged chart, watched from the centre in force, the
// CUSUM's run lengths over the sizes of the lots. A monitor that cannot
// run (a centre of 0 leaves no shift to weigh) becomes a warning.
func watchShifts(a *spc.Analysis, in []spc.Lot, m spc.Monitors) {
	sizes := make([]int64, len(in))
	for i, l := range in {
		sizes[i] = l.Inspected
	}
	if _, err := spc.WatchShifts(a, in, m, sizes); err != nil {
		a.Warnings = append(a.Warnings, spc.Warning{Code: "shift-monitor", Message: "The shift monitors cannot run: " + err.Error() + "."})
	}
}

// SortLimitSets returns a copy of the limit sets in the order they come
// into force (EffectiveFrom, then Number).
func SortLimitSets(sets []store.LimitSet) []store.LimitSet {
	sets = append([]store.LimitSet(nil), sets...)
	sort.SliceStable(sets, func(i, j int) bool {
		if !sets[i].EffectiveFrom.Equal(sets[j].EffectiveFrom) {
			return sets[i].EffectiveFrom.Before(sets[j].EffectiveFrom)
		}
		return sets[i].Number < sets[j].Number
	})
	return sets
}

func spcLots(lots []store.Lot) []spc.Lot {
	in := make([]spc.Lot, len(lots))
	for i, l := range lots {
		in[i] = spc.Lot{Code: l.Lot, Inspected: l.Inspected, Count: l.Count}
	}
	return in
}

// checkWeek runs the engine on the week's lots alone, centre estimated
// from them, for the dispersion check and the diagnostics of the week.
func (pr *ProcessReview) checkWeek(lots []store.Lot) {
	p := pr.Process
	cfg := spc.Config{Chart: p.Chart, Method: p.Method, K: p.K}
	if cfg.Method == spc.MethodLaney && len(lots) < 2 {
		cfg.Method = spc.MethodSigma // σ_z needs two lots; the check itself does not
	}
	a, err := spc.Analyze(spcLots(lots), cfg)
	if err != nil {
		pr.Notes = append(pr.Notes, "The spread of the week's lots could not be checked: "+err.Error()+".")
		return
	}
	d := a.Dispersion
	pr.Dispersion = &d
	for _, w := range a.Warnings {
		// The week's centre is estimated here only to check the spread;
		// the advice on how many lots trial limits need does not apply,
		// and the overdispersion advice is already in Dispersion.
		if w.Code == "few-lots" || w.Code == "overdispersion" {
			continue
		}
		pr.Warnings = append(pr.Warnings, w)
	}
}

// Caution is carried by every rendering of the review.
const Caution = "The intervals describe sampling variation only: they do not allow for bias " +
	"from how lots were sampled or inspected. A stable rate is no proof that the product " +
	"meets its specification. This review does not replace the plant's release or acceptance " +
	"procedure; defer to the quality system, customer requirements and local regulations."

// Unexplained counts the week's lots outside their limits and run-rule
// signals with no cause recorded.
func (pr *ProcessReview) Unexplained() int { return pr.UnexplainedOut() + pr.UnexplainedSignals() }

// concern ranks how much a process's review asks for attention, larger
// first: a stated rise, then lots outside their limits or signals with no
// cause recorded, then a rise too close to call, then a stated fall.
func (pr *ProcessReview) concern() int {
	c := pr.Change
	rank := 0
	if c.StatesChange() && c.Difference > 0 {
		rank += 8
	}
	if pr.Unexplained() > 0 || pr.NeedAttention > 0 {
		rank += 4
	}
	if c.Compared && !c.StatesChange() && c.Difference > 0 && strings.HasPrefix(c.Verdict, "too close") {
		rank += 2
	}
	if c.StatesChange() && c.Difference < 0 {
		rank++
	}
	return rank
}

// Glance counts the processes of a review by what they ask for: the first
// lines a reader of a plant-wide review sees, before the table of every
// process.
type Glance struct {
	Processes int
	// Rises and Falls count the changes stated (unlikely from sampling
	// alone, on the p-values the verdicts use); NotCompared the processes
	// without lots in one of the two weeks.
	Rises, Falls, NotCompared int
	// Unexplained counts the processes with lots of the week beyond their
	// limits or signals with no cause recorded; Shifts those with a
	// sustained small shift (CUSUM or EWMA) touching the week.
	Unexplained, Shifts int
	// NeedProcesses counts the processes with lots of the record, of any
	// age, needing attention, and NeedLots those lots.
	NeedProcesses, NeedLots int
}

// Glance counts the review's processes by what they ask for.
func (r *Review) Glance() Glance {
	g := Glance{Processes: len(r.Processes)}
	for _, pr := range r.Processes {
		c := pr.Change
		switch {
		case !c.Compared:
			g.NotCompared++
		case c.StatesChange() && c.Difference > 0:
			g.Rises++
		case c.StatesChange() && c.Difference < 0:
			g.Falls++
		}
		if pr.Unexplained() > 0 {
			g.Unexplained++
		}
		if pr.Shifts() > 0 {
			g.Shifts++
		}
		if pr.NeedAttention > 0 {
			g.NeedProcesses++
			g.NeedLots += pr.NeedAttention
		}
	}
	return g
}

// Sentence says the counts in plain words.
func (g Glance) Sentence() string {
	of := func(n int, what string) string {
		if n == 1 {
			return "1 " + what
		}
		return strconv.Itoa(n) + " " + what
	}
	parts := []string{
		of(g.Rises, "with a rise unlikely from sampling alone"),
		of(g.Falls, "with a fall unlikely from sampling alone"),
		of(g.Unexplained, "with lots beyond their limits or signals this week and no cause recorded"),
		of(g.Shifts, "with a sustained small shift this week"),
		fmt.Sprintf("%s of the record needing attention (%s)", of(g.NeedProcesses, "with lots"), Plural(g.NeedLots, "lot", "lots")),
	}
	s := "At a glance, of " + Plural(g.Processes, "process", "processes") + ": " + strings.Join(parts, "; ") + "."
	if g.NotCompared > 0 {
		s += " " + of(g.NotCompared, "could not be compared (no lots in one of the two weeks).")
	}
	return s
}

// ByConcern returns the processes of the review, those asking most for
// attention first (a stated rise, unexplained lots outside their limits or
// signals or lots needing attention, a rise too close to call, a stated
// fall), then by the number of lots needing attention, of the week's
// unexplained lots and signals, the p-value of the change, and the name.
func (r *Review) ByConcern() []*ProcessReview {
	out := append([]*ProcessReview(nil), r.Processes...)
	p := func(pr *ProcessReview) float64 {
		if !pr.Change.Compared {
			return 2
		}
		return pr.Change.PValue
	}
	sort.SliceStable(out, func(i, j int) bool {
		a, b := out[i], out[j]
		if ca, cb := a.concern(), b.concern(); ca != cb {
			return ca > cb
		}
		if ua, ub := a.NeedAttention, b.NeedAttention; ua != ub {
			return ua > ub
		}
		if ua, ub := a.Unexplained(), b.Unexplained(); ua != ub {
			return ua > ub
		}
		if pa, pb := p(a), p(b); pa != pb {
			return pa < pb
		}
		return a.Process.Name < b.Process.Name
	})
	return out
}

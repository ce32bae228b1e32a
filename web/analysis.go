package web

import (
	"context"
	"fmt"
	"net/url"
	"sort"
	"strconv"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/review"
)

// processChart is one process's lots judged against its limit sets: the
// lots before the first set (all of them when there is none) against trial
// limits estimated from themselves, the lots from each set's EffectiveFrom
// on against that frozen set, with the run rules running across the joins.
type processChart struct {
	proc  store.Process
	lots  []store.Lot // not voided, in time order
	sets  []store.LimitSet
	setOf []int // per lot: the number of the limit set judging it, 0 for trial limits
	a     *spc.Analysis
}

// analyzeProcess loads and judges every lot of the process. Lots are
// judged on the whole record, whatever window is shown afterwards, so that
// a lot's verdict does not depend on what else is on the screen.
func (s *Server) analyzeProcess(ctx context.Context, p store.Process) (*processChart, error) {
	lots, err := s.db.Lots(ctx, p.ID, time.Time{}, time.Time{})
	if err != nil {
		return nil, err
	}
	sets, err := s.db.LimitSets(ctx, p.ID)
	if err != nil {
		return nil, err
	}
	return judge(p, lots, sets)
}

// judge judges the lots against the process's limit sets (review.Judge:
// trial limits before the first set, each set from its EffectiveFrom on).
func judge(p store.Process, lots []store.Lot, sets []store.LimitSet) (*processChart, error) {
	rules, err := parseProcessRules(p.Rules)
	if err != nil {
		return nil, fmt.Errorf("process %q: rules: %w", p.Name, err)
	}
	pc := &processChart{proc: p, lots: lots, sets: review.SortLimitSets(sets), setOf: make([]int, len(lots))}
	if len(lots) == 0 {
		return pc, nil
	}
	a, setOf, err := review.Judge(p, lots, pc.sets, rules)
	if err != nil {
		return nil, fmt.Errorf("process %q: %w", p.Name, err)
	}
	pc.a, pc.setOf = a, setOf
	return pc, nil
}

// window is the part of the record to show; zero ends are open.
type window struct{ from, to time.Time }

// contains reports whether t falls in the window (both ends inclusive;
// a date-only "to" was moved to the last instant of that day).
func (w window) contains(t time.Time) bool {
	return (w.from.IsZero() || !t.Before(w.from)) && (w.to.IsZero() || !t.After(w.to))
}

// paramError is a bad query parameter.
type paramError struct{ name, value, reason string }

func (e *paramError) Error() string {
	return fmt.Sprintf("parameter %q: %q %s", e.name, e.value, e.reason)
}

// parseWindow reads from= and to=, each an RFC 3339 time or a date
// YYYY-MM-DD in the process's time zone ("to" meaning the end of that day).
func parseWindow(q url.Values, loc *time.Location) (window, error) {
	var w window
	var err error
	if w.from, err = parseWhen("from", q.Get("from"), loc, false); err != nil {
		return w, err
	}
	if w.to, err = parseWhen("to", q.Get("to"), loc, true); err != nil {
		return w, err
	}
	if !w.from.IsZero() && !w.to.IsZero() && w.to.Before(w.from) {
		return w, &paramError{"to", q.Get("to"), "is before \"from\""}
	}
	return w, nil
}

func parseWhen(name, v string, loc *time.Location, endOfDay bool) (time.Time, error) {
	if v == "" {
		return time.Time{}, nil
	}
	if t, err := time.Parse(time.RFC3339Nano, v); err == nil {
		return t, nil
	}
	if d, err := time.ParseInLocation(time.DateOnly, v, loc); err == nil {
		if endOfDay {
			d = d.AddDate(0, 0, 1).Add(-time.Nanosecond)
		}
		return d, nil
	}
	return time.Time{}, &paramError{name, v, "is not a date (YYYY-MM-DD) or an RFC 3339 time (2006-01-02T15:04:05Z07:00)"}
}

// chartJSON renders the lots of the chart that fall in the window, with
// the signals that touch them.
func (pc *processChart) chartJSON(w window) *ChartJSON {
	loc := pc.proc.Location()
	if pc.a == nil {
		return &ChartJSON{Chart: string(pc.proc.Chart), Method: string(pc.proc.Method), Sigma: Num(pc.proc.K),
			Lots: []LotJSON{}, Signals: []SignalJSON{}, Warnings: []string{}}
	}
	out := AnalysisJSON(pc.a)
	lo, hi := 0, len(pc.lots)
	if !w.from.IsZero() {
		lo = sort.Search(len(pc.lots), func(i int) bool { return !pc.lots[i].Time.Before(w.from) })
	}
	if !w.to.IsZero() {
		hi = sort.Search(len(pc.lots), func(i int) bool { return pc.lots[i].Time.After(w.to) })
	}
	if hi < lo {
		hi = lo
	}
	for i := lo; i < hi; i++ {
		l := &out.Lots[i]
		l.ID = pc.lots[i].ID
		l.Time = pc.lots[i].Time.In(loc).Format(time.RFC3339)
		if n := pc.setOf[i]; n > 0 {
			l.Limits, l.LimitSet = "frozen", n
		} else {
			l.Limits = "trial"
		}
	}
	out.Lots = out.Lots[lo:hi]
	sigs := out.Signals[:0]
	for _, sg := range out.Signals {
		if sg.Last < lo || sg.First >= hi {
			continue
		}
		sg.First = max(sg.First-lo, 0)
		sg.Last = min(sg.Last-lo, hi-lo-1)
		sigs = append(sigs, sg)
	}
	out.Signals = sigs
	return out
}

// lotIndex returns the position of the lot with the store id, or -1.
func (pc *processChart) lotIndex(id int64) int {
	for i := len(pc.lots) - 1; i >= 0; i-- {
		if pc.lots[i].ID == id {
			return i
		}
	}
	return -1
}

func formatID(id int64) string { return strconv.FormatInt(id, 10) }

// parseProcessRules reads a process's rule list; an empty list applies
// no run rule (the limits are still judged).
func parseProcessRules(s string) (spc.RuleSet, error) {
	if s == "" {
		return spc.RulesNone, nil
	}
	return spc.ParseRules(s)
}

// mergeLots returns the lots of have and added (each in time order, then
// id) in that order, and the highest id of added. have is not changed: it
// may be shared with charts still in use. When grow is set and added
// comes after have, the result may use the spare capacity of have's
// array (only one caller may do so for a given have); otherwise it is a
// new slice.
func mergeLots(have, added []store.Lot, grow bool) ([]store.Lot, int64) {
	var hi int64
	for _, l := range added {
		hi = max(hi, l.ID)
	}
	if len(added) == 0 {
		return have, hi
	}
	before := func(a, b *store.Lot) bool {
		if !a.Time.Equal(b.Time) {
			return a.Time.Before(b.Time)
		}
		return a.ID < b.ID
	}
	if len(have) == 0 || before(&have[len(have)-1], &added[0]) {
		if !grow {
			have = have[:len(have):len(have)]
		}
		return append(have, added...), hi
	}
	out := make([]store.Lot, 0, len(have)+len(added))
	i, j := 0, 0
	for i < len(have) && j < len(added) {
		if before(&added[j], &have[i]) {
			out = append(out, added[j])
			j++
		} else {
			out = append(out, have[i])
			i++
		}
	}
	out = append(out, have[i:]...)
	return append(out, added[j:]...), hi
}

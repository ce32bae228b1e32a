package web

import (
	"context"
	"fmt"
	"net/url"
	"sort"
	"strconv"
	"strings"
	"time"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
	"lotwatch/store"
	"lotwatch/web/review"
)

// processChart is one process's lots judged against its limit sets: the
// lots before the first set (all of them when there is none) against trial
// limits estimated from themselves, the lots from each set's EffectiveFrom
// on against that frozen set, with the run rules running across the joins.
type processChart struct {
	proc  store.Process
	lots  []store.Lot // not voided, in time order; their counts only (store.LotCounts)
	sets  []store.LimitSet
	setOf []int // per lot: the number of the limit set judging it, 0 for trial limits
	a     *spc.Analysis
}

// analyzeProcess loads and judges every lot of the process. Lots are
// judged on the whole record, whatever window is shown afterwards, so that
// a lot's verdict does not depend on what else is on the screen.
func (s *Server) analyzeProcess(ctx context.Context, p store.Process) (*processChart, error) {
	lots, err := s.db.LotCounts(ctx, p.ID, time.Time{}, time.Time{})
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

// maxChartPage is the most lots one answer of the API's chart holds, and
// the page size when the request names none; the rest is fetched with
// the answer's "next" cursor.
const maxChartPage = 10000

// chartPage is a page of the API's chart: the lots after the cursor's
// lot (from the start of the window when there is none), at most limit.
type chartPage struct {
	after *store.Lot // the last lot of the previous page (its time and id)
	limit int
}

// parseChartPage reads limit= and cursor=.
func parseChartPage(q url.Values) (chartPage, error) {
	pg := chartPage{limit: maxChartPage}
	if v := q.Get("limit"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 1 || n > maxChartPage {
			return pg, &paramError{"limit", v, fmt.Sprintf("is not a whole number from 1 to %d", maxChartPage)}
		}
		pg.limit = n
	}
	if v := q.Get("cursor"); v != "" {
		t, id, ok := strings.Cut(v, ".")
		nanos, err1 := strconv.ParseInt(t, 10, 64)
		lotID, err2 := strconv.ParseInt(id, 10, 64)
		if !ok || err1 != nil || err2 != nil {
			return pg, &paramError{"cursor", v, "is not the \"next\" of an earlier answer"}
		}
		pg.after = &store.Lot{ID: lotID, LotInput: store.LotInput{Time: time.Unix(0, nanos)}}
	}
	return pg, nil
}

// cursor names the place after lot l for the next page.
func cursor(l store.Lot) string {
	return strconv.FormatInt(l.Time.UnixNano(), 10) + "." + strconv.FormatInt(l.ID, 10)
}

// chartJSON renders a page of the lots of the chart that fall in the
// window, with the signals that touch them (their first and last lot
// counted within the page, and their lots cut to it, so that a signal
// running through the whole record does not list it on every page).
func (pc *processChart) chartJSON(w window, pg chartPage) *chartjson.Chart {
	loc := pc.proc.Location()
	if pc.a == nil {
		return &chartjson.Chart{Chart: string(pc.proc.Chart), Method: string(pc.proc.Method), Sigma: Num(pc.proc.K),
			Lots: []chartjson.Lot{}, Signals: []chartjson.Signal{}, Warnings: []string{}}
	}
	out := chartjson.Head(pc.a)
	lo, end := 0, len(pc.lots)
	if !w.from.IsZero() {
		lo = sort.Search(len(pc.lots), func(i int) bool { return !pc.lots[i].Time.Before(w.from) })
	}
	if !w.to.IsZero() {
		end = sort.Search(len(pc.lots), func(i int) bool { return pc.lots[i].Time.After(w.to) })
	}
	end = max(end, lo)
	out.Total = end - lo
	if a := pg.after; a != nil {
		lo = max(lo, sort.Search(len(pc.lots), func(i int) bool {
			l := &pc.lots[i]
			return l.Time.After(a.Time) || (l.Time.Equal(a.Time) && l.ID > a.ID)
		}))
	}
	hi := min(end, lo+pg.limit)
	hi = max(hi, lo)
	if hi < end {
		out.Next = cursor(pc.lots[hi-1])
	}
	out.Lots = make([]chartjson.Lot, 0, hi-lo)
	for i := lo; i < hi; i++ {
		l := chartjson.PointOf(pc.a.Points[i])
		l.ID = pc.lots[i].ID
		l.Time = pc.lots[i].Time.In(loc).Format(time.RFC3339)
		if n := pc.setOf[i]; n > 0 {
			l.Limits, l.LimitSet = "frozen", n
		} else {
			l.Limits = "trial"
		}
		out.Lots = append(out.Lots, l)
	}
	for _, s := range pc.a.Signals {
		if s.Last < lo || s.First >= hi {
			continue
		}
		sg := chartjson.SignalOf(s)
		first, last := max(s.First, lo), min(s.Last, hi-1)
		if len(sg.Lots) == s.Last-s.First+1 {
			sg.Lots = sg.Lots[first-s.First : last-s.First+1]
		}
		sg.First, sg.Last = first-lo, last-lo
		out.Signals = append(out.Signals, sg)
	}
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

package web

import (
	"context"
	"net/http"
	"slices"
	"strings"
	"time"

	"lotwatch/store"
	"lotwatch/web/attention"
)

// boardRow is one process on the status board.
type boardRow struct {
	Proc   store.Process
	Kind   string
	Latest *viewPoint
	// Need are the lots needing attention, oldest first; NeedOut and
	// NeedSignal count them by kind (out of limits; run-rule or shift).
	Need       []attention.Lot
	NeedOut    int
	NeedSignal int
	Causes     attention.Causes
	Today      int // lots today, in the process's zone
	TodayOut   int
	TodaySig   int // signals touching today's lots
	Trial      bool
	State      string // "out", "signal", "ok", "none", "error"
	Words      string // what needs attention, or today's state
	Short      string // the same, shorter, for the table
	TodayWords string
	Err        string
}

// Oldest is the oldest lot needing attention, or nil.
func (r boardRow) Oldest() *attention.Lot {
	if len(r.Need) == 0 {
		return nil
	}
	return &r.Need[0]
}

// boardData is the status board: the rows shown, the plant's totals and
// the filter.
type boardData struct {
	Rows      []boardRow
	Total     int // active processes
	NeedLots  int // lots needing attention, plant-wide
	NeedProcs int // processes with such lots
	Oldest    *attention.Lot
	Errors    int
	TodayOut  int // processes with a lot out of limits today
	TodaySig  int
	Now       string
	Empty     bool
	Table     bool // the compact table view
	Q, State  string
	Area      string
	Areas     []string
	Shown     int
	// FailedAlerts counts alert messages given up after a day of failed
	// attempts (see the alerts page).
	FailedAlerts int
}

// tableFrom is the number of processes from which the board shows the
// compact table unless asked for cards.
const tableFrom = 100

// boardPage is the home page. It leads with what needs attention — the
// lots out of limits or in a signal that nobody has explained, whatever
// their age — per process, oldest first; then today's figures and the
// latest lot's verdict, whatever its day. It says that nothing needs
// attention only when no process has such a lot and every chart could be
// judged.
func (s *Server) boardPage(w http.ResponseWriter, r *http.Request) {
	ctx := r.Context()
	pps, err := s.plant(ctx)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	q := r.URL.Query()
	d := boardData{Total: len(pps), Now: fmtWhen(s.now()), Empty: len(pps) == 0,
		Q: strings.TrimSpace(q.Get("q")), State: q.Get("state"), Area: q.Get("area")}
	switch q.Get("view") {
	case "table":
		d.Table = true
	case "cards":
	default:
		d.Table = len(pps) >= tableFrom
	}
	areas := map[string]bool{}
	rows := make([]boardRow, 0, len(pps))
	for _, pp := range pps {
		row := s.boardRow(ctx, pp)
		if pp.proc.Area != "" {
			areas[pp.proc.Area] = true
		}
		switch {
		case row.State == "error":
			d.Errors++
		case len(row.Need) > 0:
			d.NeedProcs++
			d.NeedLots += len(row.Need)
			if o := row.Oldest(); d.Oldest == nil || o.Time.Before(d.Oldest.Time) {
				d.Oldest = o
			}
		}
		if row.TodayOut > 0 {
			d.TodayOut++
		} else if row.TodaySig > 0 {
			d.TodaySig++
		}
		if d.keeps(row) {
			rows = append(rows, row)
		}
	}
	for a := range areas {
		d.Areas = append(d.Areas, a)
	}
	slices.Sort(d.Areas)
	sortBoard(rows)
	d.Rows, d.Shown = rows, len(rows)
	d.FailedAlerts = s.failedAlerts(ctx)
	s.render(w, r, http.StatusOK, "board.html", "Status board", d)
}

// warmUp judges every active process's record once when the server
// starts, in the background, and keeps the summaries the status board,
// the worklist and the weekly review read: judging a plant's whole record
// takes seconds (mostly reading every lot), which the first person to
// open the board after a start would otherwise wait through. A request
// arriving meanwhile judges only the processes not yet done.
func (s *Server) warmUp(ctx context.Context) {
	t0 := time.Now()
	pps, err := s.plant(ctx)
	if err != nil {
		if ctx.Err() == nil {
			s.log.Warn("judging the plant at start", "err", err)
		}
		return
	}
	if ctx.Err() != nil {
		return // the server stopped first
	}
	failed := 0
	for _, pp := range pps {
		if pp.err != nil {
			failed++
		}
	}
	s.log.Info("judged the plant at start", "processes", len(pps), "failed", failed, "took", time.Since(t0).Round(time.Millisecond))
}

// keeps reports whether the row passes the board's filter: a part of the
// name (any case), a state ("attention" for out or signal) and an area.
func (d *boardData) keeps(row boardRow) bool {
	if d.Q != "" && !strings.Contains(strings.ToLower(row.Proc.Name), strings.ToLower(d.Q)) {
		return false
	}
	if d.Area != "" && row.Proc.Area != d.Area {
		return false
	}
	switch d.State {
	case "":
		return true
	case "attention":
		return row.State == "out" || row.State == "signal"
	default:
		return row.State == d.State
	}
}

// stateRank orders the board: what needs attention first, then charts
// that could not be judged, then the quiet ones.
var stateRank = map[string]int{"out": 0, "signal": 1, "error": 2, "ok": 3, "none": 4}

// sortBoard sorts by state, then by the age of the oldest lot needing
// attention (oldest first), then by name.
func sortBoard(rows []boardRow) {
	slices.SortStableFunc(rows, func(a, b boardRow) int {
		if d := stateRank[a.State] - stateRank[b.State]; d != 0 {
			return d
		}
		if oa, ob := a.Oldest(), b.Oldest(); oa != nil && ob != nil {
			if c := oa.Time.Compare(ob.Time); c != 0 {
				return c
			}
		}
		return strings.Compare(a.Proc.Name, b.Proc.Name)
	})
}

// boardRow states one process: what needs attention, the causes, today's
// figures and the latest lot.
func (s *Server) boardRow(ctx context.Context, pp plantProcess) boardRow {
	p := pp.proc
	row := boardRow{Proc: p, Kind: chartKind(p.Chart), Need: pp.need, Causes: pp.causes}
	if pp.err != nil {
		s.log.Error("status board", "process", p.ID, "err", pp.err)
		row.State, row.Words, row.Err = "error", "the chart could not be computed: what needs attention is not known", pp.err.Error()
		return row
	}
	sum := pp.sum
	row.Trial = sum.trial
	if sum.latest != nil {
		lp := *sum.latest
		lp.Time = lp.Time.In(p.Location())
		row.Latest = &lp
	}
	now := s.now().In(p.Location())
	midnight := time.Date(now.Year(), now.Month(), now.Day(), 0, 0, 0, 0, now.Location())
	var ok bool
	row.Today, row.TodayOut, row.TodaySig, ok = sum.today(midnight)
	if !ok {
		// Lots logged for days ahead: read today's from the chart.
		pc, err := s.freshChart(ctx, p)
		if err == nil {
			var v *chartView
			if v, err = buildView(pc, window{from: midnight}, byLot, pp.anns); err == nil {
				row.Today, row.TodayOut, row.TodaySig = len(v.Points), v.OutCount, v.SignalCount
			}
		}
		if err != nil {
			row.State, row.Words, row.Err = "error", "today's lots could not be judged", err.Error()
			return row
		}
	}
	for _, l := range row.Need {
		if l.Kind == attention.OutOfLimits {
			row.NeedOut++
		} else {
			row.NeedSignal++
		}
	}
	switch {
	case row.Today == 0:
		row.TodayWords = "no lots today"
	case row.TodayOut > 0:
		row.TodayWords = plural(row.TodayOut, "lot", "lots") + " of " + plural(row.Today, "lot", "lots") + " out of limits today"
	case row.TodaySig > 0:
		row.TodayWords = plural(row.TodaySig, "signal", "signals") + " in today's " + plural(row.Today, "lot", "lots")
	default:
		row.TodayWords = plural(row.Today, "lot", "lots") + " today, all within limits and no signal"
	}
	switch {
	case row.NeedOut > 0:
		row.State = "out"
	case row.NeedSignal > 0:
		row.State = "signal"
	case row.Today > 0:
		row.State = "ok"
	default:
		row.State = "none"
	}
	row.Words, row.Short = needWords(row)
	return row
}

// needWords says what needs attention on one process, in words, long
// and short.
func needWords(row boardRow) (long, short string) {
	if len(row.Need) == 0 {
		return "nothing needs attention", "nothing to explain"
	}
	var parts []string
	if row.NeedOut > 0 {
		parts = append(parts, plural(row.NeedOut, "out of limits", "out of limits"))
	}
	if row.NeedSignal > 0 {
		parts = append(parts, plural(row.NeedSignal, "in a signal", "in signals"))
	}
	short = strings.Join(parts, ", ")
	return plural(len(row.Need), "lot needs", "lots need") + " attention (" + short + "), oldest " + fmtWhen(row.Need[0].Time.In(row.Proc.Location())), short
}

package web

import (
	"context"
	"net/http"
	"sort"
	"sync"
	"time"

	"lotwatch/store"
)

// boardRow is one process on the status board.
type boardRow struct {
	Proc       store.Process
	Kind       string
	Latest     *viewPoint
	Today      int // lots today, in the process's zone
	TodayOut   int
	TodaySig   int // run-rule signals touching today's lots
	OpenCauses int
	Trial      bool
	State      string // "out", "signal", "ok", "none"
	Words      string
	Err        string
}

type boardData struct {
	Rows    []boardRow
	Out     int // processes with a lot out of limits today
	Signal  int
	Quiet   int
	Now     string
	Empty   bool
	Retired int
}

// boardPage is the home page: every active process with its latest lot,
// today's lots and signals and the open assignable causes, the state in
// words as well as colour.
func (s *Server) boardPage(w http.ResponseWriter, r *http.Request) {
	ctx := r.Context()
	ps, err := s.db.Processes(ctx, false)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	rows := make([]boardRow, len(ps))
	var wg sync.WaitGroup
	sem := make(chan struct{}, 4) // the analyses run side by side, a few at a time
	for i, p := range ps {
		wg.Go(func() {
			sem <- struct{}{}
			rows[i] = s.boardRow(ctx, p)
			<-sem
		})
	}
	wg.Wait()
	d := boardData{Rows: rows, Now: s.now().Format("2006-01-02 15:04 MST"), Empty: len(ps) == 0}
	for _, row := range rows {
		switch row.State {
		case "out":
			d.Out++
		case "signal":
			d.Signal++
		default:
			d.Quiet++
		}
	}
	// Out of control first, then signals, then the rest, each by name.
	rank := map[string]int{"out": 0, "signal": 1, "error": 2, "ok": 3, "none": 4}
	sort.SliceStable(d.Rows, func(i, j int) bool { return rank[d.Rows[i].State] < rank[d.Rows[j].State] })
	s.render(w, r, http.StatusOK, "board.html", "Status board", d)
}

func (s *Server) boardRow(ctx context.Context, p store.Process) boardRow {
	row := boardRow{Proc: p, Kind: chartKind(p.Chart)}
	pc, err := s.freshChart(ctx, p)
	if err != nil {
		s.log.Error("status board", "process", p.ID, "err", err)
		row.State, row.Words, row.Err = "error", "the chart could not be computed", err.Error()
		return row
	}
	anns, err := s.db.Annotations(ctx, p.ID)
	if err != nil {
		row.State, row.Words, row.Err = "error", "the causes could not be read", err.Error()
		return row
	}
	for _, a := range anns {
		if !a.Closed {
			row.OpenCauses++
		}
	}
	loc := p.Location()
	now := s.now().In(loc)
	midnight := time.Date(now.Year(), now.Month(), now.Day(), 0, 0, 0, 0, loc)
	v, err := buildView(pc, window{from: midnight}, byLot, anns)
	if err != nil {
		row.State, row.Words, row.Err = "error", "the chart could not be computed", err.Error()
		return row
	}
	row.Trial = len(pc.sets) == 0
	row.Today, row.TodayOut, row.TodaySig = len(v.Points), v.OutCount, v.SignalCount
	if n := len(pc.lots); n > 0 && pc.a != nil {
		last, _ := buildView(pc, window{from: pc.lots[n-1].Time}, byLot, anns)
		if last != nil && len(last.Points) > 0 {
			lp := last.Points[len(last.Points)-1]
			row.Latest = &lp
		}
	}
	switch {
	case row.Today == 0:
		row.State, row.Words = "none", "no lots today"
	case row.TodayOut > 0:
		row.State, row.Words = "out", plural(row.TodayOut, "lot", "lots")+" out of limits today"
		if row.TodaySig > 0 {
			row.Words += ", " + plural(row.TodaySig, "run-rule signal", "run-rule signals")
		}
	case row.TodaySig > 0:
		row.State, row.Words = "signal", plural(row.TodaySig, "run-rule signal", "run-rule signals")+" today"
	default:
		row.State, row.Words = "ok", "in control today"
	}
	return row
}

package web

import (
	"context"
	"fmt"
	"sync"
	"time"

	"lotwatch/store"
)

// judgeGroup shares chart analyses between concurrent requests for the
// same process. A request is given an analysis that began after the
// request asked for it, so that it reflects every write the request made
// before (a posted lot is judged with itself on the chart). While one
// analysis runs, the requests arriving meanwhile wait together for the
// next, which starts when the running one ends: under load, one analysis
// serves a whole batch of stations instead of one each.
type judgeGroup struct {
	mu     sync.Mutex
	byProc map[int64]*procFlights
}

type procFlights struct {
	running, next *flight
}

// flight is one analysis of one process, awaited by one or more requests.
type flight struct {
	proc store.Process
	done chan struct{}
	pc   *processChart
	err  error
}

// judgeTimeout bounds one shared analysis (it runs on behalf of several
// requests, so no single request's context may cancel it).
const judgeTimeout = 2 * time.Minute

// freshChart returns the process's chart, analysed after this call began.
func (s *Server) freshChart(ctx context.Context, p store.Process) (*processChart, error) {
	g := &s.judges
	g.mu.Lock()
	if g.byProc == nil {
		g.byProc = map[int64]*procFlights{}
	}
	pf := g.byProc[p.ID]
	if pf == nil {
		pf = &procFlights{}
		g.byProc[p.ID] = pf
	}
	var f *flight
	switch {
	case pf.running == nil:
		f = &flight{proc: p, done: make(chan struct{})}
		pf.running = f
		go s.fly(pf, f)
	case pf.next == nil:
		f = &flight{proc: p, done: make(chan struct{})}
		pf.next = f
	default:
		f = pf.next
	}
	g.mu.Unlock()
	select {
	case <-f.done:
		return f.pc, f.err
	case <-ctx.Done():
		return nil, ctx.Err()
	}
}

// fly runs flights of one process one after another until none waits.
func (s *Server) fly(pf *procFlights, f *flight) {
	for f != nil {
		ctx, cancel := context.WithTimeout(context.Background(), judgeTimeout)
		f.pc, f.err = s.safeAnalyze(ctx, f.proc)
		cancel()
		close(f.done)
		s.judges.mu.Lock()
		f = pf.next
		pf.running, pf.next = f, nil
		s.judges.mu.Unlock()
	}
}

// safeAnalyze runs analyzeProcess on the flight's own goroutine, where the
// HTTP server's recovery does not reach: a panic becomes the error of this
// analysis instead of ending the whole server.
func (s *Server) safeAnalyze(ctx context.Context, p store.Process) (pc *processChart, err error) {
	defer func() {
		if r := recover(); r != nil {
			pc, err = nil, fmt.Errorf("process %q: analysis failed: %v", p.Name, r)
		}
	}()
	return s.analyzeProcess(ctx, p)
}

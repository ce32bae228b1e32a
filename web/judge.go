package web

import (
	"context"
	"fmt"
	"sync"
	"time"

	"lotwatch/store"
)

// judgeGroup shares chart analyses between requests for the same
// process, in two ways.
//
// A cache keeps the judged chart of the most recently used processes
// together with the store's change counter (store.LotsVersion) it was
// read at. A request first reads the counter, after any write it made, and
// takes a cached chart read at that version or later: so a posted lot is
// always judged with itself on the chart, and a chart is only rebuilt when
// something it is drawn from changed — and then, when only lots were
// added, by reading just those.
//
// When the chart must be rebuilt, a request is given an analysis that
// began after the request asked for it. While one analysis runs, the
// requests arriving meanwhile wait together for the next, which starts
// when the running one ends: under load, one analysis serves a whole batch
// of stations instead of one each.
type judgeGroup struct {
	mu     sync.Mutex
	byProc map[int64]*procFlights
	cache  map[int64]*cachedChart
	tick   uint64
	// maxLots overrides chartCacheLots when set (tests).
	maxLots int
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

// cachedChart is a judged chart and the change counter it was read at.
type cachedChart struct {
	pc      *processChart
	version store.LotsVersion
	maxID   int64 // highest lot id read
	used    uint64
	// grown is set once a later chart was built by appending to the
	// spare capacity of pc.lots; a second one must copy.
	grown bool
}

// chartCacheLots bounds the judged charts kept, in lots (each lot costs
// a few hundred bytes with its judged point: some 40 MB in all), so that
// the server's memory does not grow with the record or the number of
// processes. The least recently used charts leave first; the one just
// built always stays. The status board and the attention list do not need
// the charts: they read each process's small summary (procSummary).
const chartCacheLots = 100_000

// judgeTimeout bounds one shared analysis (it runs on behalf of several
// requests, so no single request's context may cancel it).
const judgeTimeout = 2 * time.Minute

// freshChart returns the process's chart as of this call or later.
func (s *Server) freshChart(ctx context.Context, p store.Process) (*processChart, error) {
	v, err := s.db.LotsVersion(ctx, p.ID)
	if err != nil {
		return nil, err
	}
	g := &s.judges
	g.mu.Lock()
	if c := g.cache[p.ID]; c != nil && c.version.Version >= v.Version && sameSettings(c.pc.proc, p) {
		g.tick++
		c.used = g.tick
		g.mu.Unlock()
		return c.pc, nil
	}
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

// sameSettings reports whether two readings of a process judge alike
// (a change of settings also moves the change counter; this guards
// against a reading of the process older than the cached chart).
func sameSettings(a, b store.Process) bool {
	if a.ID != b.ID || a.Chart != b.Chart || a.Method != b.Method || a.K != b.K || a.Rules != b.Rules || a.TimeZone != b.TimeZone || len(a.Categories) != len(b.Categories) {
		return false
	}
	for i := range a.Categories {
		if a.Categories[i] != b.Categories[i] {
			return false
		}
	}
	return true
}

// fly runs flights of one process one after another until none waits.
func (s *Server) fly(pf *procFlights, f *flight) {
	for f != nil {
		ctx, cancel := context.WithTimeout(context.Background(), judgeTimeout)
		f.pc, f.err = s.safeChart(ctx, f.proc)
		cancel()
		close(f.done)
		s.judges.mu.Lock()
		f = pf.next
		pf.running, pf.next = f, nil
		s.judges.mu.Unlock()
	}
}

// safeChart runs chartFor on the flight's own goroutine, where the
// HTTP server's recovery does not reach: a panic becomes the error of this
// analysis instead of ending the whole server.
func (s *Server) safeChart(ctx context.Context, p store.Process) (pc *processChart, err error) {
	defer func() {
		if r := recover(); r != nil {
			pc, err = nil, fmt.Errorf("process %q: analysis failed: %v", p.Name, r)
		}
	}()
	return s.chartFor(ctx, p)
}

// chartFor reads the change counter, then the lots — all of them, or only
// those added since the cached chart when nothing else changed — judges
// them and caches the chart under the counter. The lots read are at least
// as new as the counter (they are read after it).
func (s *Server) chartFor(ctx context.Context, p store.Process) (*processChart, error) {
	v, err := s.db.LotsVersion(ctx, p.ID)
	if err != nil {
		return nil, err
	}
	g := &s.judges
	g.mu.Lock()
	c := g.cache[p.ID]
	if c != nil && c.version.Version >= v.Version && sameSettings(c.pc.proc, p) {
		g.mu.Unlock()
		return c.pc, nil
	}
	incremental := c != nil && c.version.Rewrites == v.Rewrites && sameSettings(c.pc.proc, p)
	grow := incremental && !c.grown
	if grow {
		c.grown = true
	}
	g.mu.Unlock()
	var pc *processChart
	var maxID int64
	if incremental {
		added, err := s.db.LotCountsAddedAfter(ctx, p.ID, c.maxID)
		if err != nil {
			return nil, err
		}
		lots, hi := mergeLots(c.pc.lots, added, grow)
		maxID = max(c.maxID, hi)
		if pc, err = judge(p, lots, c.pc.sets); err != nil {
			return nil, err
		}
	} else {
		if pc, err = s.analyzeProcess(ctx, p); err != nil {
			return nil, err
		}
		for _, l := range pc.lots {
			maxID = max(maxID, l.ID)
		}
	}
	g.mu.Lock()
	if g.cache == nil {
		g.cache = map[int64]*cachedChart{}
	}
	g.tick++
	if old := g.cache[p.ID]; old == nil || old.version.Version <= v.Version {
		g.cache[p.ID] = &cachedChart{pc: pc, version: v, maxID: maxID, used: g.tick}
	}
	g.evict(p.ID)
	g.mu.Unlock()
	return pc, nil
}

// evict drops the least recently used charts until the cache holds at
// most chartCacheLots lots, keeping the chart of process keep.
func (g *judgeGroup) evict(keep int64) {
	total := 0
	for _, e := range g.cache {
		total += len(e.pc.lots)
	}
	limit := chartCacheLots
	if g.maxLots > 0 {
		limit = g.maxLots
	}
	for total > limit && len(g.cache) > 1 {
		lru, oldest := int64(0), ^uint64(0)
		for id, e := range g.cache {
			if id != keep && e.used < oldest {
				lru, oldest = id, e.used
			}
		}
		total -= len(g.cache[lru].pc.lots)
		delete(g.cache, lru)
	}
}

// cachedLots is the number of lots the cached charts hold.
func (g *judgeGroup) cachedLots() (charts, lots int) {
	g.mu.Lock()
	defer g.mu.Unlock()
	for _, e := range g.cache {
		lots += len(e.pc.lots)
	}
	return len(g.cache), lots
}

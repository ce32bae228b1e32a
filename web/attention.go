package web

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/go-chi/chi/v5"

	"lotwatch/store"
	"lotwatch/web/attention"
	"lotwatch/web/storejson"
)

// procSummary is what the status board and the attention list need of
// one process's judged chart: the flagged lots and signals, the latest
// lot's verdict, and the times of the latest lots for today's figures. It
// is small whatever the length of the record, so it is kept for every
// process while the charts themselves are kept only for a few.
type procSummary struct {
	proc    store.Process
	version store.LotsVersion
	flagged *attention.Flagged
	latest  *viewPoint
	// recent holds the times of the lots from recentSpan before the
	// latest lot on; older reports lots before recent[0].
	recent []time.Time
	older  bool
	count  int // lots on the chart
	trial  bool
}

// recentSpan is how far back from its latest lot a summary keeps lot
// times: today in any zone lies within it unless lots were logged for
// days ahead, and then the board reads the chart itself.
const recentSpan = 48 * time.Hour

// summarize reduces a judged chart to its summary.
func summarize(pc *processChart, v store.LotsVersion) (*procSummary, error) {
	sum := &procSummary{proc: pc.proc, version: v, flagged: attention.Flag(pc.lots, pc.a, pc.setOf), trial: len(pc.sets) == 0}
	n := len(pc.lots)
	sum.count = n
	if n == 0 || pc.a == nil {
		return sum, nil
	}
	last, err := buildView(pc, window{from: pc.lots[n-1].Time}, byLot, nil)
	if err != nil {
		return nil, err
	}
	if k := len(last.Points); k > 0 {
		lp := last.Points[k-1]
		sum.latest = &lp
	}
	from := pc.lots[n-1].Time.Add(-recentSpan)
	i := sort.Search(n, func(i int) bool { return !pc.lots[i].Time.Before(from) })
	sum.older = i > 0
	sum.recent = make([]time.Time, 0, n-i)
	for _, l := range pc.lots[i:] {
		sum.recent = append(sum.recent, l.Time)
	}
	return sum, nil
}

// today counts the lots from midnight on, those out of limits, and the
// signals touching them; ok is false when the summary does not reach
// back to midnight.
func (sum *procSummary) today(midnight time.Time) (lots, out, signals int, ok bool) {
	i := sort.Search(len(sum.recent), func(i int) bool { return !sum.recent[i].Before(midnight) })
	if i == 0 && sum.older {
		return 0, 0, 0, false
	}
	lots = len(sum.recent) - i
	if lots == 0 {
		return 0, 0, 0, true
	}
	start := sum.count - lots // chart position of today's first lot
	for _, fl := range sum.flagged.Lots {
		if fl.Index >= start && fl.Out {
			out++
		}
	}
	for _, sg := range sum.flagged.Signals {
		if sg.Last >= start {
			signals++
		}
	}
	return lots, out, signals, true
}

// summaryCache holds one summary per process, within a size limit.
type summaryCache struct {
	mu      sync.Mutex
	sum     map[int64]*procSummary
	entries int // the entries the kept summaries hold (procSummary.size)
	// maxEntries overrides summaryCacheEntries when set (tests).
	maxEntries int
}

// summaryCacheEntries bounds the summaries kept, in entries: flagged lots,
// the lots of signals and recent lot times, some 100 bytes each, so about
// 50 MB in all whatever the length of the records. A plant of 500
// processes with two years of three lots a day holds some 200,000. The
// board and the review read every active process's summary in turn,
// which a least-recently-used cache would evict just before it is needed
// again; so a summary that does not fit serves the request that built it
// and is not kept, while the kept ones stay until newer lots replace them
// or their process is retired.
const summaryCacheEntries = 500_000

// size is the entries the summary holds, for the cache's limit.
func (sum *procSummary) size() int { return 1 + sum.flagged.Size() + len(sum.recent) }

// keep stores sum unless a newer summary of its process is kept or it
// does not fit within the limit. The caller holds c.mu.
func (c *summaryCache) keep(sum *procSummary) {
	if c.sum == nil {
		c.sum = map[int64]*procSummary{}
	}
	id := sum.proc.ID
	if old := c.sum[id]; old != nil {
		if old.version.Version > sum.version.Version {
			return
		}
		c.entries -= old.size()
		delete(c.sum, id)
	}
	limit := summaryCacheEntries
	if c.maxEntries > 0 {
		limit = c.maxEntries
	}
	if n := sum.size(); c.entries+n <= limit {
		c.sum[id] = sum
		c.entries += n
	}
}

// prune drops the summaries of processes not in active (retired or
// removed), so that they make room for the others.
func (c *summaryCache) prune(active map[int64]bool) {
	c.mu.Lock()
	defer c.mu.Unlock()
	for id, sum := range c.sum {
		if !active[id] {
			c.entries -= sum.size()
			delete(c.sum, id)
		}
	}
}

// size is the number of summaries kept and the entries they hold.
func (c *summaryCache) size() (summaries, entries int) {
	c.mu.Lock()
	defer c.mu.Unlock()
	return len(c.sum), c.entries
}

// summaryOf returns the process's summary as of version v or later.
func (s *Server) summaryOf(ctx context.Context, p store.Process, v store.LotsVersion) (*procSummary, error) {
	c := &s.summaries
	c.mu.Lock()
	sum := c.sum[p.ID]
	c.mu.Unlock()
	if sum != nil && sum.version.Version >= v.Version && sameSettings(sum.proc, p) {
		return sum, nil
	}
	pc, err := s.freshChart(ctx, p)
	if err != nil {
		return nil, err
	}
	if sum, err = summarize(pc, v); err != nil {
		return nil, err
	}
	c.mu.Lock()
	c.keep(sum)
	c.mu.Unlock()
	return sum, nil
}

// plantProcess is one active process as the plant-wide views show it.
type plantProcess struct {
	proc   store.Process
	sum    *procSummary
	anns   []store.Annotation
	need   []attention.Lot // oldest first
	causes attention.Causes
	err    error
}

// plant reads every active process's summary and annotations and finds
// the lots needing attention. A process whose chart cannot be judged
// carries its error.
func (s *Server) plant(ctx context.Context) ([]plantProcess, error) {
	ps, err := s.db.Processes(ctx, false)
	if err != nil {
		return nil, err
	}
	vs, err := s.db.AllLotsVersions(ctx)
	if err != nil {
		return nil, err
	}
	all, err := s.db.AllAnnotations(ctx)
	if err != nil {
		return nil, err
	}
	anns := map[int64][]store.Annotation{}
	for _, a := range all {
		anns[a.ProcessID] = append(anns[a.ProcessID], a)
	}
	active := make(map[int64]bool, len(ps))
	for _, p := range ps {
		active[p.ID] = true
	}
	s.summaries.prune(active)
	out := make([]plantProcess, len(ps))
	var wg sync.WaitGroup
	sem := make(chan struct{}, 4) // charts to judge are judged a few at a time
	for i, p := range ps {
		out[i] = plantProcess{proc: p, anns: anns[p.ID], causes: attention.CountCauses(anns[p.ID])}
		wg.Go(func() {
			sem <- struct{}{}
			defer func() { <-sem }()
			pp := &out[i]
			if pp.sum, pp.err = s.summaryOf(ctx, p, vs[p.ID]); pp.err == nil {
				pp.need = pp.sum.flagged.Unexplained(p, pp.anns)
			}
		})
	}
	wg.Wait()
	return out, nil
}

// Attention returns every lot of the plant's active processes that needs
// attention (attention.Find: out of limits or in a signal, and not yet
// explained by a cause or a "no assignable cause found"), oldest first.
// It fails when a process's chart cannot be judged, rather than leave
// that process's lots out.
func (s *Server) Attention(ctx context.Context) ([]attention.Lot, error) {
	pps, err := s.plant(ctx)
	if err != nil {
		return nil, err
	}
	var out []attention.Lot
	for _, pp := range pps {
		if pp.err != nil {
			return nil, pp.err
		}
		out = append(out, pp.need...)
	}
	attention.Oldest(out)
	return out, nil
}

// attentionJSON is one lot needing attention in the API.
type attentionJSON struct {
	ProcessID int64    `json:"process_id"`
	Process   string   `json:"process"`
	Area      string   `json:"area"`
	Lot       string   `json:"lot"`
	LotID     int64    `json:"lot_id"`
	Time      string   `json:"time"`
	Shift     string   `json:"shift"`
	Kind      string   `json:"kind"`
	Rules     []string `json:"rules"`
}

// apiAttention lists the lots needing attention, oldest first.
func (s *Server) apiAttention(w http.ResponseWriter, r *http.Request) {
	ls, err := s.Attention(r.Context())
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	out := make([]attentionJSON, len(ls))
	for i, l := range ls {
		out[i] = attentionJSON{ProcessID: l.ProcessID, Process: l.Process, Area: l.Area, Lot: l.Lot, LotID: l.LotID,
			Time: l.Time.Format(time.RFC3339), Shift: l.Shift, Kind: string(l.Kind), Rules: l.Rules}
	}
	writeJSON(w, http.StatusOK, out)
}

// causeFields are the fields a posted cause may have.
var causeFields = map[string]bool{"cause": true, "action": true, "no_cause_found": true, "reason": true, "rule": true}

// decodeCause reads a posted cause strictly: unknown or repeated fields
// and values of the wrong type are problems naming the field.
func decodeCause(body io.Reader) (store.Annotation, []apiProblem, error) {
	var a store.Annotation
	raw, err := io.ReadAll(body)
	if err != nil {
		return a, nil, err
	}
	raw = bytes.TrimSpace(raw)
	if len(raw) == 0 || raw[0] != '{' || !json.Valid(raw) {
		return a, []apiProblem{{Field: "body", Reason: `must be a JSON object: {"cause": …, "action": …} or {"no_cause_found": true, "reason": …}`}}, nil
	}
	var m map[string]json.RawMessage
	if err := json.Unmarshal(raw, &m); err != nil {
		return a, []apiProblem{{Field: "body", Reason: err.Error()}}, nil
	}
	var ps []apiProblem
	dec := json.NewDecoder(bytes.NewReader(raw))
	dec.Token()
	seen := map[string]bool{}
	for dec.More() {
		tok, _ := dec.Token()
		key, _ := tok.(string)
		var v json.RawMessage
		dec.Decode(&v)
		switch {
		case !causeFields[key]:
			ps = append(ps, apiProblem{Field: key, Reason: "is not a field of a cause (known: cause, action, rule, no_cause_found, reason)"})
			continue
		case seen[key]:
			ps = append(ps, apiProblem{Field: key, Reason: "is given twice"})
			continue
		}
		seen[key] = true
		if key == "no_cause_found" {
			if err := json.Unmarshal(v, &a.NoCauseFound); err != nil || string(v) == "null" {
				ps = append(ps, apiProblem{Field: key, Value: truncate(string(v)), Reason: "must be true or false"})
			}
			continue
		}
		str, ok := jsonString(v)
		if !ok {
			ps = append(ps, apiProblem{Field: key, Value: truncate(string(v)), Reason: "must be a string"})
			continue
		}
		if problem := store.JSONTextProblem(v); problem != "" {
			ps = append(ps, apiProblem{Field: key, Value: truncate(str), Reason: problem})
			continue
		}
		str = strings.TrimSpace(str)
		switch key {
		case "cause":
			a.Cause = str
		case "action":
			a.Action = str
		case "reason":
			a.Reason = str
		case "rule":
			a.Rule = str
		}
	}
	return a, ps, nil
}

// pathLotCode reads the {lot} code of the path: escaped by the caller,
// it reaches the router escaped only when it holds characters a path
// cannot carry as they are.
func pathLotCode(r *http.Request) (string, error) {
	raw := chi.URLParam(r, "lot")
	if r.URL.RawPath == "" {
		return raw, nil
	}
	return url.PathUnescape(raw)
}

// apiPostCause records an assignable cause, or that none was found, for
// the lot with the code of the path.
func (s *Server) apiPostCause(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	code, err := pathLotCode(r)
	if err != nil {
		s.fail(w, r, invalid("the lot code in the path is not a valid escaped path segment: "+err.Error()))
		return
	}
	a, ps, err := decodeCause(r.Body)
	if err != nil {
		s.fail(w, r, invalidBecause(fmt.Errorf("reading the request body: %w", err))) // 413 when too large
		return
	}
	if len(ps) > 0 {
		s.fail(w, r, &fieldProblems{problemsMessage(ps), ps})
		return
	}
	l, found, err := s.lotByCode(r.Context(), p, code)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	if !found {
		s.fail(w, r, refuse(store.ErrNotFound, "process "+strconv.Quote(p.Name)+" has no lot "+strconv.Quote(code)+" (voided lots take no cause)", ""))
		return
	}
	a.ProcessID, a.LotID = p.ID, l.ID
	stored, err := s.db.AddAnnotation(r.Context(), who(r).user.Name, a)
	var ve *store.ValidationError
	switch {
	case errors.As(err, &ve):
		for _, pr := range ve.Problems {
			ps = append(ps, apiProblem{Field: pr.Field, Value: pr.Value, Reason: pr.Reason})
		}
		s.fail(w, r, &fieldProblems{problemsMessage(ps), ps})
		return
	case err != nil:
		s.fail(w, r, err)
		return
	}
	writeJSON(w, http.StatusCreated, toCauseJSON(stored, l))
}

// toCauseJSON is a stored annotation as the API answers it, its time in
// UTC.
func toCauseJSON(a store.Annotation, l store.Lot) storejson.Annotation {
	return storejson.AnnotationOf(a, l.Lot, time.UTC)
}

// problemsMessage joins problems into one line, each naming its field.
func problemsMessage(ps []apiProblem) string {
	parts := make([]string, len(ps))
	for i, p := range ps {
		parts[i] = p.Field + " " + p.Reason
		if p.Value != "" {
			parts[i] = p.Field + " " + strconv.Quote(p.Value) + " " + p.Reason
		}
	}
	return "the cause was not recorded: " + strings.Join(parts, "; ")
}

// lotByCode finds the process's lot (not voided) with the code; the
// latest when a code was used twice.
func (s *Server) lotByCode(ctx context.Context, p store.Process, code string) (store.Lot, bool, error) {
	pc, err := s.freshChart(ctx, p)
	if err != nil {
		return store.Lot{}, false, err
	}
	for i := len(pc.lots) - 1; i >= 0; i-- {
		if pc.lots[i].Lot == code {
			return pc.lots[i], true, nil
		}
	}
	return store.Lot{}, false, nil
}

// isWorklistPath reports whether a form's "back" address is the worklist
// (the only place a cause form returns to besides the lot page).
func isWorklistPath(s string) bool {
	return s == "/attention" || strings.HasPrefix(s, "/attention?")
}

package web

import (
	"errors"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"slices"
	"strings"
	"time"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
	"lotwatch/store"
)

// baseline is the engineer's choice of baseline lots and exclusions.
type baseline struct {
	From, To    string // dates
	First, Last string // lot codes; when given they take precedence
	Excluded    map[string]string
	Order       []string // excluded codes in the order given
	// AsCause holds the excluded lots whose reason is to be recorded as
	// the lot's assignable cause when the limits are frozen.
	AsCause map[string]bool
}

func readBaseline(get func(string) string, all func(string) []string) baseline {
	b := baseline{From: strings.TrimSpace(get("from")), To: strings.TrimSpace(get("to")),
		First: strings.TrimSpace(get("first")), Last: strings.TrimSpace(get("last")), Excluded: map[string]string{}, AsCause: map[string]bool{}}
	for _, code := range all("ex") {
		if _, dup := b.Excluded[code]; dup || code == "" {
			continue
		}
		b.Excluded[code] = strings.TrimSpace(get("why:" + code))
		b.Order = append(b.Order, code)
		if get("cause:"+code) == "1" {
			b.AsCause[code] = true
		}
	}
	return b
}

// reasoned returns the exclusions that carry a reason: a lot is left out
// of a baseline only with a reason, on Recompute as on Freeze.
func (b baseline) reasoned() map[string]bool {
	ex := map[string]bool{}
	for code, why := range b.Excluded {
		if why != "" {
			ex[code] = true
		}
	}
	return ex
}

// query is the baseline as URL parameters.
func (b baseline) query() url.Values {
	q := url.Values{}
	for k, v := range map[string]string{"from": b.From, "to": b.To, "first": b.First, "last": b.Last} {
		if v != "" {
			q.Set(k, v)
		}
	}
	for _, c := range b.Order {
		q.Add("ex", c)
		q.Set("why:"+c, b.Excluded[c])
		if b.AsCause[c] {
			q.Set("cause:"+c, "1")
		}
	}
	return q
}

// pick returns the baseline lots, or a problem in words.
func (b baseline) pick(lots []store.Lot, loc *time.Location) ([]store.Lot, string) {
	if b.First != "" || b.Last != "" {
		lo, hi := 0, len(lots)-1
		if b.First != "" {
			lo = -1
			for i, l := range lots {
				if l.Lot == b.First {
					lo = i
					break
				}
			}
			if lo < 0 {
				return nil, fmt.Sprintf("first lot %q is not a lot of this process", b.First)
			}
		}
		if b.Last != "" {
			hi = -1
			for i, l := range lots {
				if l.Lot == b.Last {
					hi = i
				}
			}
			if hi < 0 {
				return nil, fmt.Sprintf("last lot %q is not a lot of this process", b.Last)
			}
		}
		if hi < lo {
			return nil, fmt.Sprintf("last lot %q comes before first lot %q", b.Last, b.First)
		}
		return lots[lo : hi+1], ""
	}
	q := url.Values{"from": {b.From}, "to": {b.To}}
	w, err := parseWindow(q, loc)
	if err != nil {
		return nil, err.Error()
	}
	var out []store.Lot
	for _, l := range lots {
		if w.contains(l.Time) {
			out = append(out, l)
		}
	}
	return out, ""
}

type limitsData struct {
	Proc      store.Process
	Base      baseline
	Query     string
	Problem   string
	Frozen    string
	Lots      int
	A         *spc.Analysis
	View      *chartView
	Options   map[string]any
	Details   [][]string
	Flagged   []flaggedLot
	Sets      []store.LimitSet
	Effective string
	Reason    string
	Problems  map[string]string
	Units     string
	// Methods compares the limits of the same baseline by each method,
	// before freezing.
	Methods []methodRow
}

// methodRow is the baseline judged by one limit method.
type methodRow struct {
	Method         spc.Method
	InUse          bool
	Centre, SigmaZ float64
	N              int64   // the lot size the limits are shown for
	LCL, UCL       float64 // at N
	Out, Signals   int
	Problem        string
}

// flaggedLot is a baseline lot that is out of limits, in a signal, or
// excluded: the candidates for leaving out.
type flaggedLot struct {
	Code, Why, What string
	Excluded        bool
	AsCause         bool
	HasCause        bool
	Problem         string
}

// limitsPage shows trial limits from a chosen baseline, with the lots an
// engineer may exclude (each with a reason), and the form that freezes
// them as a new limit set.
func (s *Server) limitsPage(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	b := readBaseline(q.Get, func(k string) []string { return q[k] })
	s.showLimits(w, r, http.StatusOK, b, "", map[string]string{}, "", q.Get("frozen"))
}

func (s *Server) showLimits(w http.ResponseWriter, r *http.Request, status int, b baseline, reason string, problems map[string]string, effective, frozen string) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	d, a, base, err := s.limitsData(r, p, b)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	_, _ = a, base
	d.Frozen, d.Reason, d.Problems = frozen, reason, problems
	d.Effective = effective
	if d.Effective == "" {
		d.Effective = s.now().In(p.Location()).Format(formTime)
	}
	for i := range d.Flagged {
		f := &d.Flagged[i]
		if _, asked := b.Excluded[f.Code]; asked && strings.TrimSpace(f.Why) == "" {
			f.Problem = "give a reason for leaving this lot out; it stays in the estimate until then"
		}
	}
	s.render(w, r, status, "limits.html", "Limits — "+p.Name, d)
}

// limitsData computes the trial limits of the baseline.
func (s *Server) limitsData(r *http.Request, p store.Process, b baseline) (*limitsData, *spc.Analysis, []store.Lot, error) {
	ctx := r.Context()
	pc, err := s.freshChart(ctx, p)
	if err != nil {
		return nil, nil, nil, err
	}
	d := &limitsData{Proc: p, Base: b, Query: b.query().Encode(), Sets: pc.sets, Units: "lots"}
	base, problem := b.pick(pc.lots, p.Location())
	d.Problem = problem
	d.Lots = len(base)
	if problem != "" || len(base) == 0 {
		if problem == "" && len(pc.lots) > 0 {
			d.Problem = "no lot falls in this baseline"
		}
		return d, nil, nil, nil
	}
	rules, err := parseProcessRules(p.Rules)
	if err != nil {
		return nil, nil, nil, err
	}
	in := make([]spc.Lot, len(base))
	known := map[string]bool{}
	for i, l := range base {
		in[i] = spc.Lot{Code: l.Lot, Inspected: l.Inspected, Count: l.Count}
		known[l.Lot] = true
	}
	ex := b.reasoned()
	for code := range b.Excluded {
		if !known[code] {
			d.Problem = joinMsg(d.Problem, fmt.Sprintf("excluded lot %q is not in the baseline", code))
			delete(ex, code)
		}
	}
	a, err := spc.Analyze(in, spc.Config{Chart: p.Chart, Method: p.Method, K: p.K, Rules: rules, Exclude: ex})
	if err != nil {
		d.Problem = joinMsg(d.Problem, err.Error())
		return d, nil, base, nil
	}
	d.A = a
	sub := &processChart{proc: p, lots: base, setOf: make([]int, len(base)), a: a}
	anns, err := s.db.Annotations(ctx, p.ID)
	if err != nil {
		return nil, nil, nil, err
	}
	v, err := buildView(sub, window{}, byLot, anns)
	if err != nil {
		return nil, nil, nil, err
	}
	d.View = v
	idx, _ := thin(v.Points)
	d.Options, d.Details = chartOptions("Baseline of "+p.Name+" — trial limits", v, idx)
	for i, pt := range a.Points {
		code := base[i].Lot
		if !pt.Excluded && !pt.OutOfLimits() && pt.Rules == 0 {
			continue
		}
		_, asked := b.Excluded[code]
		f := flaggedLot{Code: code, Excluded: pt.Excluded || asked, Why: b.Excluded[code], AsCause: b.AsCause[code]}
		switch {
		case pt.Above:
			f.What = "above the UCL"
		case pt.Below:
			f.What = "below the LCL"
		default:
			f.What = "within limits"
		}
		if names := chartjson.RuleNames(pt.Rules); len(names) > 0 {
			f.What += "; " + strings.Join(names, ", ")
		}
		for _, an := range anns {
			if an.LotID == base[i].ID {
				f.HasCause = true
				if an.NoCauseFound {
					f.What += "; no assignable cause found: " + an.Reason
				} else {
					f.What += "; cause recorded: " + an.Cause
				}
			}
		}
		d.Flagged = append(d.Flagged, f)
	}
	d.Methods = compareMethods(in, p, ex, rules)
	return d, a, base, nil
}

// compareMethods judges the baseline by each limit method, with the same
// exclusions, for the table beside the freeze form: the centre, σ_z, the
// limits at the baseline's median lot size, and how many lots fall
// outside and how many run-rule signals result.
func compareMethods(in []spc.Lot, p store.Process, ex map[string]bool, rules spc.RuleSet) []methodRow {
	sizes := make([]int64, len(in))
	for i, l := range in {
		sizes[i] = l.Inspected
	}
	slices.Sort(sizes)
	n := sizes[len(sizes)/2]
	var rows []methodRow
	for _, m := range []spc.Method{spc.MethodSigma, spc.MethodExact, spc.MethodLaney} {
		row := methodRow{Method: m, InUse: m == p.Method, N: n}
		a, err := spc.Analyze(in, spc.Config{Chart: p.Chart, Method: m, K: p.K, Rules: rules, Exclude: ex})
		if err != nil {
			row.Problem = err.Error()
			rows = append(rows, row)
			continue
		}
		row.Centre, row.SigmaZ, row.Signals = a.Rate, a.SigmaZ, len(a.Signals)
		for i, pt := range a.Points {
			if pt.OutOfLimits() {
				row.Out++
			}
			if in[i].Inspected == n && row.UCL == 0 {
				row.LCL, row.UCL = math.Max(0, pt.LCL), pt.UCL
			}
		}
		rows = append(rows, row)
	}
	return rows
}

// freezeLimits recomputes the trial limits of the posted baseline and
// freezes them as a new limit set: centre = Analysis.Rate (p̄, ū or c̄),
// σ_z from the analysis.
func (s *Server) freezeLimits(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	if err := r.ParseForm(); err != nil {
		s.badRequest(w, r, "the form could not be read: "+err.Error())
		return
	}
	b := readBaseline(r.PostForm.Get, func(k string) []string { return r.PostForm[k] })
	reason := strings.TrimSpace(r.PostForm.Get("reason"))
	effective := strings.TrimSpace(r.PostForm.Get("effective"))
	problems := map[string]string{}
	fail := func() { s.showLimits(w, r, statusOf(errFormRefused), b, reason, problems, effective, "") }
	d, a, base, err := s.limitsData(r, p, b)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	if d.Problem != "" || a == nil {
		problems["baseline"] = "the baseline has a problem: " + d.Problem
		fail()
		return
	}
	for code, why := range b.Excluded {
		if why == "" {
			problems["excluded"] = fmt.Sprintf("lot %s is left out without a reason", code)
		}
	}
	lotID := map[string]int64{}
	for _, l := range base {
		lotID[l.Lot] = l.ID
	}
	if reason == "" {
		problems["reason"] = "is empty: say why these limits are frozen"
	}
	var eff time.Time
	if effective != "" {
		if eff, err = time.ParseInLocation(formTime, effective, p.Location()); err != nil {
			problems["effective"] = fmt.Sprintf("%q is not a date and time", effective)
		}
	}
	// The process's monitors are frozen with the centre; the CUSUM's
	// decision interval and an EWMA's width asked by its false alarms are
	// designed now, over the baseline's lot sizes.
	mon := p.Monitors
	sizes := make([]int64, len(base))
	for i, l := range base {
		sizes[i] = l.Inspected
	}
	if mon.EWMALambda != 0 && mon.EWMAWidth == 0 && mon.EWMAARL0 != 0 {
		if e, err := mon.EWMA(p.Chart, a.Rate, sizes); err != nil {
			problems["baseline"] = "the process's EWMA cannot be designed from this baseline: " + err.Error()
		} else {
			mon.EWMAWidth = e.L
		}
	}
	if mon.CUSUMShift != 0 {
		arl0 := mon.CUSUMARL0
		if arl0 == 0 {
			arl0 = spc.DefaultARL0
		}
		c, err := spc.DesignCUSUM(p.Chart, a.Rate, mon.CUSUMShift, sizes, arl0, 0)
		if err != nil {
			problems["baseline"] = "the process's CUSUM cannot be designed from this baseline: " + err.Error()
		} else {
			mon.CUSUMH = c.H
		}
	}
	if len(problems) > 0 {
		fail()
		return
	}
	ls, err := s.db.FreezeLimitSet(r.Context(), who(r).user.Name, store.LimitSet{
		ProcessID: p.ID, Method: a.Method, K: a.K, Center: a.Rate, SigmaZ: a.SigmaZ,
		BaselineFrom: base[0].Time, BaselineTo: base[len(base)-1].Time, BaselineLots: a.Baseline,
		Excluded: b.Excluded, EffectiveFrom: eff, Reason: reason, Monitors: mon,
	})
	var ve *store.ValidationError
	if errors.As(err, &ve) {
		for _, pr := range ve.Problems {
			f := pr.Field
			if f == "effective_from" {
				f = "effective"
			}
			problems[f] = joinMsg(problems[f], pr.String())
		}
		fail()
		return
	}
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	// The reasons marked so become the lots' assignable causes, in the
	// same step (the limit set first, so that a refused freeze records
	// nothing).
	for _, code := range b.Order {
		if !b.AsCause[code] || lotID[code] == 0 {
			continue
		}
		if _, err := s.db.AddAnnotation(r.Context(), who(r).user.Name, store.Annotation{ProcessID: p.ID, LotID: lotID[code],
			Cause: b.Excluded[code], Action: fmt.Sprintf("left out of the baseline of limit set %d", ls.Number)}); err != nil {
			s.internalError(w, r, fmt.Errorf("limit set %d is frozen, but the cause of lot %s could not be recorded: %w", ls.Number, code, err))
			return
		}
	}
	q := b.query()
	q.Set("frozen", fmt.Sprint(ls.Number))
	http.Redirect(w, r, "/processes/"+formatID(p.ID)+"/limits?"+q.Encode(), http.StatusSeeOther)
}

package web

import (
	"errors"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"

	"lotwatch/spc/chartjson"
	"lotwatch/store"
	"lotwatch/web/storejson"
)

// lotJSON is a stored lot as the API shows it.
type lotJSON struct {
	ID         int64            `json:"id"`
	Lot        string           `json:"lot"`
	Time       string           `json:"time"`
	Shift      string           `json:"shift"`
	Inspected  int64            `json:"inspected"`
	Count      int64            `json:"count"`
	Categories map[string]int64 `json:"categories"`
	Inspector  string           `json:"inspector"`
	Note       string           `json:"note"`
	Revision   int              `json:"revision"`
	Recorded   string           `json:"recorded"`
	RecordedBy string           `json:"recorded_by"`
}

func toLotJSON(l store.Lot, loc *time.Location) lotJSON {
	cats := l.Categories
	if cats == nil {
		cats = map[string]int64{}
	}
	return lotJSON{ID: l.ID, Lot: l.Lot, Time: l.Time.In(loc).Format(time.RFC3339), Shift: l.Shift,
		Inspected: l.Inspected, Count: l.Count, Categories: cats, Inspector: l.Inspector, Note: l.Note,
		Revision: l.Revision, Recorded: l.Recorded.UTC().Format(time.RFC3339), RecordedBy: l.RecordedBy}
}

// verdictJSON is a stored lot with its judgement on the chart.
type verdictJSON struct {
	lotJSON
	Value       Num      `json:"value"`
	Center      Num      `json:"center"`
	UCL         Num      `json:"ucl"`
	LCL         Num      `json:"lcl"`
	Z           Num      `json:"z"`
	OutOfLimits bool     `json:"out_of_limits"`
	Signals     []string `json:"signals"`
	Limits      string   `json:"limits"`
	LimitSet    int      `json:"limit_set,omitempty"`
}

type signalJSON struct {
	Rule        string                 `json:"rule"`
	Lots        []string               `json:"lots"`
	Description string                 `json:"description"`
	FirstTime   string                 `json:"first_time"`
	LastTime    string                 `json:"last_time"`
	Annotations []storejson.Annotation `json:"annotations"`
}

type limitSetJSON struct {
	ID            int64             `json:"id"`
	Number        int               `json:"number"`
	Method        string            `json:"method"`
	K             Num               `json:"k"`
	Center        Num               `json:"center"`
	SigmaZ        Num               `json:"sigma_z"`
	BaselineFrom  string            `json:"baseline_from"`
	BaselineTo    string            `json:"baseline_to"`
	BaselineLots  int               `json:"baseline_lots"`
	Excluded      map[string]string `json:"excluded"`
	EffectiveFrom string            `json:"effective_from"`
	FrozenBy      string            `json:"frozen_by"`
	FrozenAt      string            `json:"frozen_at"`
	Reason        string            `json:"reason"`
}

// pathProcess reads the {id} of the path and loads the process, answering
// 400 or 404 itself when it cannot.
func (s *Server) pathProcess(w http.ResponseWriter, r *http.Request) (store.Process, bool) {
	raw := chi.URLParam(r, "id")
	id, err := strconv.ParseInt(raw, 10, 64)
	if err != nil || id <= 0 {
		s.badRequest(w, r, "process id "+strconv.Quote(raw)+" is not a positive whole number")
		return store.Process{}, false
	}
	p, err := s.db.Process(r.Context(), id)
	if errors.Is(err, store.ErrNotFound) {
		err = refuse(store.ErrNotFound, "no process with id "+raw, "There is no process with id "+raw+".")
	}
	if err != nil {
		s.fail(w, r, err)
		return store.Process{}, false
	}
	return p, true
}

// badRequest answers bad input told in msg (400), on a page or in the API.
func (s *Server) badRequest(w http.ResponseWriter, r *http.Request, msg string) {
	s.fail(w, r, invalid(msg))
}

func (s *Server) apiMe(w http.ResponseWriter, r *http.Request) {
	p := who(r)
	via := "session"
	if p.token {
		via = "token"
	}
	writeJSON(w, http.StatusOK, map[string]any{"id": p.user.ID, "name": p.user.Name, "role": string(p.user.Role), "via": via})
}

func (s *Server) apiProcesses(w http.ResponseWriter, r *http.Request) {
	all := r.URL.Query().Get("retired") == "1"
	ps, err := s.db.Processes(r.Context(), all)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	out := make([]storejson.Process, len(ps))
	for i, p := range ps {
		out[i] = storejson.ProcessOf(p)
	}
	writeJSON(w, http.StatusOK, out)
}

func (s *Server) apiProcess(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	writeJSON(w, http.StatusOK, storejson.ProcessOf(p))
}

// apiWindowedChart reads the process of the path and its from=/to=
// window, and judges the process's lots; it answers the request itself
// (400, 404, 500) when it returns false.
func (s *Server) apiWindowedChart(w http.ResponseWriter, r *http.Request) (*processChart, window, bool) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return nil, window{}, false
	}
	win, err := parseWindow(r.URL.Query(), p.Location())
	if err != nil {
		s.fail(w, r, invalidBecause(err))
		return nil, window{}, false
	}
	pc, err := s.freshChart(r.Context(), p)
	if err != nil {
		s.fail(w, r, err)
		return nil, window{}, false
	}
	return pc, win, true
}

// apiChart answers a page of the chart (chartPage): at most
// maxChartPage lots, with the cursor of the next page.
func (s *Server) apiChart(w http.ResponseWriter, r *http.Request) {
	pg, err := parseChartPage(r.URL.Query())
	if err != nil {
		s.fail(w, r, invalidBecause(err))
		return
	}
	if pc, win, ok := s.apiWindowedChart(w, r); ok {
		writeJSON(w, http.StatusOK, pc.chartJSON(win, pg))
	}
}

func (s *Server) apiLots(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	loc := p.Location()
	win, err := parseWindow(r.URL.Query(), loc)
	if err != nil {
		s.fail(w, r, invalidBecause(err))
		return
	}
	to := win.to
	if !to.IsZero() {
		to = to.Add(time.Nanosecond) // the store's upper bound is exclusive
	}
	lots, err := s.db.Lots(r.Context(), p.ID, win.from, to)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	out := make([]lotJSON, 0, len(lots))
	for _, l := range lots {
		if win.contains(l.Time) {
			out = append(out, toLotJSON(l, loc))
		}
	}
	writeJSON(w, http.StatusOK, out)
}

// apiPostLots logs one lot or an array of them, all or nothing, and
// answers 201 with each stored lot and its verdict. Re-posting a lot
// identical to the stored one changes nothing and answers 201 with the
// stored lot (same id), so that a station may safely retry.
func (s *Server) apiPostLots(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	loc := p.Location()
	ins, lp, err := decodeLots(r.Body, loc)
	if err != nil {
		s.fail(w, r, invalidBecause(err))
		return
	}
	if !lp.any() {
		for i, in := range ins {
			for _, pr := range store.ValidateLot(p, in) {
				lp.add(i, lotField(pr.Field), pr.Value, pr.Reason)
			}
		}
	}
	if lp.any() {
		s.fail(w, r, lp)
		return
	}
	actor := who(r).user.Name
	stored, err := s.db.AddLots(r.Context(), actor, p.ID, ins)
	var ve *store.ValidationError
	switch {
	case errors.As(err, &ve):
		for _, pr := range ve.Problems {
			i := 0
			if pr.Line > 0 {
				i = pr.Line - 1
			}
			lp.add(i, lotField(pr.Field), pr.Value, pr.Reason)
		}
		lp.more += ve.More
		s.fail(w, r, lp)
		return
	case errors.Is(err, store.ErrConflict):
		s.fail(w, r, refuse(store.ErrConflict, strings.ReplaceAll(err.Error(), "\n", "; ")+"; nothing was stored (a stored lot is changed by correcting it, which keeps its history)", ""))
		return
	case err != nil:
		s.fail(w, r, err)
		return
	}
	s.obs.LotsAccepted("api", len(stored))
	pc, err := s.freshChart(r.Context(), p)
	if err != nil {
		// The lots are stored; say so even though they cannot be judged.
		s.log.Error("judging posted lots", "process", p.ID, "err", err)
		out := make([]lotJSON, len(stored))
		for i, l := range stored {
			out[i] = toLotJSON(l, loc)
		}
		writeJSON(w, http.StatusCreated, map[string]any{"lots": out, "warning": "stored, but the chart could not be computed: " + err.Error()})
		return
	}
	writeJSON(w, http.StatusCreated, map[string]any{"lots": pc.verdicts(stored)})
}

// lotField names a store problem's field as the API does: a defect
// category is "categories.NAME".
func lotField(f string) string {
	if f == "" || lotFields[f] {
		return f
	}
	return "categories." + f
}

// verdicts returns the stored lots with their points on the chart.
func (pc *processChart) verdicts(stored []store.Lot) []verdictJSON {
	loc := pc.proc.Location()
	index := make(map[int64]int, len(stored))
	for _, l := range stored {
		index[l.ID] = -1
	}
	found := 0
	for i := len(pc.lots) - 1; i >= 0 && found < len(index); i-- {
		if j, ok := index[pc.lots[i].ID]; ok && j < 0 {
			index[pc.lots[i].ID] = i
			found++
		}
	}
	out := make([]verdictJSON, len(stored))
	for k, l := range stored {
		v := verdictJSON{lotJSON: toLotJSON(l, loc), Signals: []string{}, Limits: "trial"}
		v.Value, v.Center, v.UCL, v.LCL, v.Z = Num(nan), Num(nan), Num(nan), Num(nan), Num(nan)
		if i := index[l.ID]; i >= 0 && pc.a != nil && i < len(pc.a.Points) {
			pt := pc.a.Points[i]
			v.Value, v.Center, v.UCL, v.LCL, v.Z = Num(pt.Value), Num(pt.Center), Num(pt.UCL), Num(pt.LCL), Num(pt.Z)
			v.OutOfLimits = pt.Above || pt.Below
			v.Signals = chartjson.RuleNames(pt.Rules)
			if n := pc.setOf[i]; n > 0 {
				v.Limits, v.LimitSet = "frozen", n
			}
		}
		out[k] = v
	}
	return out
}

func (s *Server) apiSignals(w http.ResponseWriter, r *http.Request) {
	pc, win, ok := s.apiWindowedChart(w, r)
	if !ok {
		return
	}
	anns, err := s.db.Annotations(r.Context(), pc.proc.ID)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	writeJSON(w, http.StatusOK, pc.signals(win, anns))
}

// signals lists the signals touching the window, each with the
// annotations recorded against its lots (for its rule, or for no rule).
func (pc *processChart) signals(win window, anns []store.Annotation) []signalJSON {
	out := []signalJSON{}
	if pc.a == nil {
		return out
	}
	loc := pc.proc.Location()
	codeOf := make(map[int64]string, len(pc.lots))
	for _, l := range pc.lots {
		codeOf[l.ID] = l.Lot
	}
	for _, sg := range pc.a.Signals {
		if sg.First < 0 || sg.Last >= len(pc.lots) || sg.First > sg.Last {
			continue
		}
		first, last := pc.lots[sg.First], pc.lots[sg.Last]
		if (!win.to.IsZero() && first.Time.After(win.to)) || (!win.from.IsZero() && last.Time.Before(win.from)) {
			continue
		}
		rule := sg.Rule.String()
		ids := map[int64]bool{}
		for i := sg.First; i <= sg.Last; i++ {
			ids[pc.lots[i].ID] = true
		}
		lots := sg.Lots
		if lots == nil {
			lots = []string{}
		}
		js := signalJSON{Rule: rule, Lots: lots, Description: sg.Description,
			FirstTime: first.Time.In(loc).Format(time.RFC3339), LastTime: last.Time.In(loc).Format(time.RFC3339),
			Annotations: []storejson.Annotation{}}
		for _, a := range anns {
			if ids[a.LotID] && (a.Rule == "" || a.Rule == rule) {
				js.Annotations = append(js.Annotations, storejson.AnnotationOf(a, codeOf[a.LotID], loc))
			}
		}
		out = append(out, js)
	}
	return out
}

func (s *Server) apiLimitSets(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	sets, err := s.db.LimitSets(r.Context(), p.ID)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	loc := p.Location()
	ts := func(t time.Time) string {
		if t.IsZero() {
			return ""
		}
		return t.In(loc).Format(time.RFC3339)
	}
	out := make([]limitSetJSON, len(sets))
	for i, ls := range sets {
		ex := ls.Excluded
		if ex == nil {
			ex = map[string]string{}
		}
		out[i] = limitSetJSON{ID: ls.ID, Number: ls.Number, Method: string(ls.Method), K: Num(ls.K), Center: Num(ls.Center),
			SigmaZ: Num(ls.SigmaZ), BaselineFrom: ts(ls.BaselineFrom), BaselineTo: ts(ls.BaselineTo), BaselineLots: ls.BaselineLots,
			Excluded: ex, EffectiveFrom: ts(ls.EffectiveFrom), FrozenBy: ls.FrozenBy, FrozenAt: ts(ls.FrozenAt), Reason: ls.Reason}
	}
	writeJSON(w, http.StatusOK, out)
}

func (s *Server) apiUsers(w http.ResponseWriter, r *http.Request) {
	us, err := s.db.Users(r.Context())
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	out := make([]storejson.User, len(us))
	for i, u := range us {
		out[i] = storejson.UserOf(u)
	}
	writeJSON(w, http.StatusOK, out)
}

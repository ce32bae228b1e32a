package web

import (
	"errors"
	"fmt"
	"net/http"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/lotcsv"
	"lotwatch/web/attention"
)

// formTime is the layout of an <input type="datetime-local">.
const formTime = "2006-01-02T15:04"

// catField is one defect category's input.
type catField struct {
	Name, Input, Value, Problem string
}

// lotForm is the form for logging or correcting a lot, with the problems
// of the last attempt beside their fields.
type lotForm struct {
	Proc       store.Process
	Action     string
	CountLabel string
	Values     map[string]string
	Cats       []catField
	Problems   map[string]string
	Other      []string
	Shifts     []string
	Correcting bool
	LotID      int64
	unread     map[string]bool // fields whose text was not a number or time
}

// Problem returns the message for a field, for the template.
func (f lotForm) Problem(field string) string { return f.Problems[field] }

func countLabel(c spc.Chart) string {
	if c.CountsUnits() {
		return "Nonconforming units (defective)"
	}
	return "Defects found"
}

func newLotForm(p store.Process, vals map[string]string) lotForm {
	f := lotForm{Proc: p, CountLabel: countLabel(p.Chart), Values: vals, Problems: map[string]string{}, unread: map[string]bool{}}
	for i, c := range p.Categories {
		in := "cat" + strconv.Itoa(i)
		f.Cats = append(f.Cats, catField{Name: c, Input: in, Value: vals[in]})
	}
	return f
}

// addProblems puts store problems beside their fields.
func (f *lotForm) addProblems(ps []store.Problem) {
	for _, pr := range ps {
		field := pr.Field
		if field == "defective" || field == "defects" {
			field = "count"
		}
		msg := pr.Reason
		if pr.Value != "" {
			msg = strconv.Quote(pr.Value) + " " + pr.Reason
		}
		placed := false
		for i := range f.Cats {
			if f.Cats[i].Name == pr.Field {
				if f.Cats[i].Problem == "" { // a number that could not be read says so already
					f.Cats[i].Problem = msg
				}
				placed = true
			}
		}
		switch field {
		case "lot", "time", "shift", "inspected", "count", "inspector", "note", "reason":
			if _, ok := f.Problems[field]; !ok || !f.unread[field] {
				f.Problems[field] = joinMsg(f.Problems[field], msg)
			}
			placed = true
		}
		if !placed {
			f.Other = append(f.Other, pr.String())
		}
	}
}

func joinMsg(a, b string) string {
	if a == "" {
		return b
	}
	return a + "; " + b
}

// readLotForm reads a posted lot form. Numbers that are not whole numbers
// are problems beside their fields; the form's values come back as typed.
func readLotForm(r *http.Request, p store.Process) (store.LotInput, lotForm) {
	vals := map[string]string{}
	for _, k := range []string{"lot", "time", "shift", "inspected", "count", "inspector", "note", "reason"} {
		vals[k] = r.PostFormValue(k)
	}
	for i := range p.Categories {
		k := "cat" + strconv.Itoa(i)
		vals[k] = r.PostFormValue(k)
	}
	vals["categories"] = r.PostFormValue("categories")
	f := newLotForm(p, vals)
	// The category inputs are named by position; a form opened before an
	// engineer changed the process's categories would put a count under
	// the wrong one. The form carries the list it was drawn with.
	if sent, ok := r.PostForm["categories"]; ok && (len(sent) != 1 || sent[0] != categoryList(p.Categories)) {
		f.Other = append(f.Other, "the defect categories of this process changed since the form was opened; check the counts by category and save again")
	}
	for k := range r.PostForm {
		if strings.HasPrefix(k, "cat") && k != "categories" {
			if i, err := strconv.Atoi(k[3:]); err != nil || i < 0 || i >= len(p.Categories) || "cat"+strconv.Itoa(i) != k {
				f.Other = append(f.Other, fmt.Sprintf("field %q is not a defect category of this process", k))
			}
		}
	}
	sort.Strings(f.Other)
	in := store.LotInput{Lot: strings.TrimSpace(vals["lot"]), Shift: strings.TrimSpace(vals["shift"]),
		Inspector: strings.TrimSpace(vals["inspector"]), Note: vals["note"]}
	whole := func(field, v string) int64 {
		v = strings.TrimSpace(v)
		if v == "" {
			f.Problems[field] = "is empty: enter a whole number"
			f.unread[field] = true
			return 0
		}
		n, err := lotcsv.ParseCount(v) // the rules of lot files: digits only
		if err != nil {
			f.Problems[field] = strconv.Quote(v) + " " + err.Error()
			f.unread[field] = true
		}
		return n
	}
	in.Inspected = whole("inspected", vals["inspected"])
	in.Count = whole("count", vals["count"])
	for i, c := range p.Categories {
		v := strings.TrimSpace(vals["cat"+strconv.Itoa(i)])
		if v == "" {
			continue // not recorded
		}
		n, err := lotcsv.ParseCount(v)
		if err != nil {
			f.Cats[i].Problem = strconv.Quote(v) + " " + err.Error()
			continue
		}
		if in.Categories == nil {
			in.Categories = map[string]int64{}
		}
		in.Categories[c] = n
	}
	if t := strings.TrimSpace(vals["time"]); t != "" {
		tt, err := time.ParseInLocation(formTime, t, p.Location())
		if err != nil {
			tt, err = parseLotTime(t, p.Location())
		}
		if err != nil {
			f.Problems["time"] = strconv.Quote(t) + " is not a date and time (YYYY-MM-DD HH:MM)"
			f.unread["time"] = true
		}
		in.Time = tt
	}
	return in, f
}

// HasProblems reports whether the form found anything wrong, for the
// template's "not saved" notice.
func (f lotForm) HasProblems() bool { return f.hasProblems() }

// hasProblems reports whether the form found anything wrong.
func (f lotForm) hasProblems() bool {
	if len(f.Problems) > 0 || len(f.Other) > 0 {
		return true
	}
	for _, c := range f.Cats {
		if c.Problem != "" {
			return true
		}
	}
	return false
}

// recentShifts lists the shift names of the process's latest lots, for
// the form's suggestions.
func recentShifts(lots []store.Lot) []string {
	seen := map[string]bool{}
	var out []string
	for i := len(lots) - 1; i >= 0 && i >= len(lots)-200; i-- {
		if s := lots[i].Shift; s != "" && !seen[s] {
			seen[s] = true
			out = append(out, s)
		}
	}
	sort.Strings(out)
	return out
}

// chooseProcessPage lets an inspector pick the process to log a lot for.
func (s *Server) chooseProcessPage(w http.ResponseWriter, r *http.Request) {
	if id := r.URL.Query().Get("process"); id != "" {
		if _, err := strconv.ParseInt(id, 10, 64); err == nil {
			http.Redirect(w, r, "/processes/"+id+"/log", http.StatusSeeOther)
			return
		}
	}
	ps, err := s.db.Processes(r.Context(), false)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	s.render(w, r, http.StatusOK, "choose.html", "Log a lot", ps)
}

func (s *Server) lotFormPage(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	if !p.Active {
		s.fail(w, r, refuse(store.ErrConflict, "Process "+p.Name+" is retired: it takes no new lots.", ""))
		return
	}
	vals := map[string]string{"time": s.now().In(p.Location()).Format(formTime), "inspector": who(r).user.Name}
	f := newLotForm(p, vals)
	f.Action = "/processes/" + formatID(p.ID) + "/lots"
	if pc, err := s.freshChart(r.Context(), p); err == nil {
		f.Shifts = recentShifts(pc.lots)
		if n := len(pc.lots); n > 0 {
			f.Values["shift"] = pc.lots[n-1].Shift
		}
	}
	s.render(w, r, http.StatusOK, "lotform.html", "Log a lot — "+p.Name, f)
}

// postLot logs one lot from the form and sends the browser to the lot's
// page, which says at once how the lot stands on the chart.
func (s *Server) postLot(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	in, f := readLotForm(r, p)
	f.Action = "/processes/" + formatID(p.ID) + "/lots"
	fail := func() {
		s.render(w, r, statusOf(errFormRefused), "lotform.html", "Log a lot — "+p.Name, f)
	}
	// every problem at once: the shared validation runs even when a
	// number could not be read (that field keeps its own message)
	f.addProblems(store.ValidateLot(p, in))
	if f.hasProblems() {
		fail()
		return
	}
	stored, err := s.db.AddLots(r.Context(), who(r).user.Name, p.ID, []store.LotInput{in})
	var ve *store.ValidationError
	switch {
	case errors.As(err, &ve):
		f.addProblems(ve.Problems)
		fail()
		return
	case errors.Is(err, store.ErrConflict):
		f.Problems["lot"] = "lot " + strconv.Quote(in.Lot) + " is already logged with other values; nothing was saved. Open the stored lot to correct it."
		fail()
		return
	case err != nil:
		s.internalError(w, r, err)
		return
	}
	s.obs.LotsAccepted("form", len(stored))
	http.Redirect(w, r, "/lots/"+formatID(stored[0].ID)+"?logged=1", http.StatusSeeOther)
}

// lotPageData is a lot with its verdict, annotations and history.
type lotPageData struct {
	Proc       store.Process
	Lot        store.Lot
	Logged     bool
	Done       string
	Point      *viewPoint
	OnChart    bool
	Signals    []spc.Signal
	Tail       string
	Causes     []store.Annotation
	RuleChoice []option
	Problem    string
	CauseForm  map[string]string
	Back       string // the worklist to return to after recording a cause
	NeedWords  string // why the lot needs attention, "" when it does not
	History    []store.Lot
	Audit      []store.AuditEntry
	Form       lotForm
}

// pathLot reads the {lot} id of the path and loads the lot and process.
func (s *Server) pathLot(w http.ResponseWriter, r *http.Request) (store.Lot, store.Process, bool) {
	raw := chi.URLParam(r, "lot")
	id, err := strconv.ParseInt(raw, 10, 64)
	if err != nil || id <= 0 {
		s.badRequest(w, r, "lot id "+strconv.Quote(raw)+" is not a positive whole number")
		return store.Lot{}, store.Process{}, false
	}
	l, err := s.db.LotByID(r.Context(), id)
	if errors.Is(err, store.ErrNotFound) {
		err = refuse(store.ErrNotFound, "no lot with id "+raw, "There is no lot with id "+raw+".")
	}
	if err != nil {
		s.fail(w, r, err)
		return store.Lot{}, store.Process{}, false
	}
	p, err := s.db.Process(r.Context(), l.ProcessID)
	if err != nil {
		s.internalError(w, r, err)
		return store.Lot{}, store.Process{}, false
	}
	l.Time = l.Time.In(p.Location())
	return l, p, true
}

func (s *Server) lotPage(w http.ResponseWriter, r *http.Request) {
	s.showLot(w, r, http.StatusOK, "", nil, nil)
}

// showLot renders the lot page, with a problem of the last post and the
// values typed into the cause or correction form.
func (s *Server) showLot(w http.ResponseWriter, r *http.Request, status int, problem string, cause map[string]string, form *lotForm) {
	l, p, ok := s.pathLot(w, r)
	if !ok {
		return
	}
	ctx := r.Context()
	q := r.URL.Query()
	d := lotPageData{Proc: p, Lot: l, Logged: q.Get("logged") == "1", Done: q.Get("done"), Problem: problem, CauseForm: cause}
	if d.CauseForm == nil {
		d.CauseForm = map[string]string{"rule": q.Get("rule")}
	}
	if back := q.Get("back"); isWorklistPath(back) {
		d.Back = back
	} else if back := r.PostFormValue("back"); isWorklistPath(back) {
		d.Back = back
	}
	pc, err := s.freshChart(ctx, p)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	anns, err := s.db.Annotations(ctx, p.ID)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	if i := pc.lotIndex(l.ID); i >= 0 && pc.a != nil {
		v, err := buildView(pc, window{from: l.Time, to: l.Time}, byLot, anns)
		if err != nil {
			s.internalError(w, r, err)
			return
		}
		for k := range v.Points {
			if v.Points[k].LotID == l.ID {
				pt := v.Points[k]
				d.Point, d.OnChart = &pt, true
			}
		}
		for _, sg := range pc.a.Signals {
			if sg.First <= i && i <= sg.Last {
				d.Signals = append(d.Signals, sg)
			}
		}
		if d.Point != nil {
			d.Tail = tailWords(d.Point.TailP, d.Point.Value >= d.Point.Center, "lots")
		}
	}
	for _, n := range attention.Find(p, pc.lots, pc.a, anns) {
		if n.LotID == l.ID {
			d.NeedWords = kindWords[n.Kind]
			if len(n.Rules) > 0 {
				d.NeedWords += " (" + strings.Join(n.Rules, ", ") + ")"
			}
		}
	}
	rules := []string{"", "the lot itself"}
	seen := map[string]bool{}
	for _, sg := range d.Signals {
		if n := sg.Rule.String(); !seen[n] {
			seen[n] = true
			rules = append(rules, n, "signal "+n+": "+sg.Description)
		}
	}
	if rr := d.CauseForm["rule"]; rr != "" && !seen[rr] {
		rules = append(rules, rr, "signal "+rr)
	}
	d.RuleChoice = options(d.CauseForm["rule"], rules...)
	for _, a := range anns {
		if a.LotID == l.ID {
			a.At = a.At.In(p.Location())
			if !a.ClosedAt.IsZero() {
				a.ClosedAt = a.ClosedAt.In(p.Location())
			}
			d.Causes = append(d.Causes, a)
		}
	}
	if d.History, err = s.db.LotHistory(ctx, l.ID); err != nil {
		s.internalError(w, r, err)
		return
	}
	for i := range d.History {
		d.History[i].Recorded = d.History[i].Recorded.In(p.Location())
	}
	if d.Audit, err = s.db.AuditFor(ctx, "lot", l.ID); err != nil {
		s.internalError(w, r, err)
		return
	}
	for i := range d.Audit {
		d.Audit[i].At = d.Audit[i].At.In(p.Location())
	}
	if form != nil {
		d.Form = *form
	} else {
		vals := map[string]string{"lot": l.Lot, "time": l.Time.Format(formTime), "shift": l.Shift,
			"inspected": strconv.FormatInt(l.Inspected, 10), "count": strconv.FormatInt(l.Count, 10),
			"inspector": l.Inspector, "note": l.Note}
		for i, c := range p.Categories {
			if n, ok := l.Categories[c]; ok {
				vals["cat"+strconv.Itoa(i)] = strconv.FormatInt(n, 10)
			}
		}
		d.Form = newLotForm(p, vals)
	}
	d.Form.Correcting, d.Form.LotID = true, l.ID
	d.Form.Action = "/lots/" + formatID(l.ID) + "/correct"
	s.render(w, r, status, "lot.html", "Lot "+l.Lot, d)
}

// postCause records an assignable cause on the lot, or on one of the
// signals the lot takes part in.
func (s *Server) postCause(w http.ResponseWriter, r *http.Request) {
	l, p, ok := s.pathLot(w, r)
	if !ok {
		return
	}
	vals := map[string]string{"cause": r.PostFormValue("cause"), "action": r.PostFormValue("action"),
		"rule": r.PostFormValue("rule"), "closed": r.PostFormValue("closed"), "reason": r.PostFormValue("reason")}
	a := store.Annotation{ProcessID: p.ID, LotID: l.ID, Rule: vals["rule"], Cause: strings.TrimSpace(vals["cause"]),
		Action: strings.TrimSpace(vals["action"]), Closed: vals["closed"] == "1",
		NoCauseFound: r.PostFormValue("no_cause") == "1", Reason: strings.TrimSpace(vals["reason"])}
	if _, err := s.db.AddAnnotation(r.Context(), who(r).user.Name, a); err != nil {
		if errors.Is(err, store.ErrInvalid) {
			s.showLot(w, r, statusOf(err), "The cause was not recorded: "+err.Error(), vals, nil)
			return
		}
		s.internalError(w, r, err)
		return
	}
	if back := r.PostFormValue("back"); isWorklistPath(back) {
		http.Redirect(w, r, back, http.StatusSeeOther)
		return
	}
	http.Redirect(w, r, "/lots/"+formatID(l.ID)+"?done=cause#causes", http.StatusSeeOther)
}

// closeCause closes an annotation of the lot.
func (s *Server) closeCause(w http.ResponseWriter, r *http.Request) {
	l, p, ok := s.pathLot(w, r)
	if !ok {
		return
	}
	aid, err := strconv.ParseInt(chi.URLParam(r, "ann"), 10, 64)
	if err != nil {
		s.badRequest(w, r, "annotation id "+strconv.Quote(chi.URLParam(r, "ann"))+" is not a whole number")
		return
	}
	anns, err := s.db.Annotations(r.Context(), p.ID)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	found := false
	for _, a := range anns {
		found = found || (a.ID == aid && a.LotID == l.ID)
	}
	if !found {
		s.fail(w, r, refuse(store.ErrNotFound, "Lot "+l.Lot+" has no annotation "+strconv.FormatInt(aid, 10)+".", ""))
		return
	}
	if err := s.db.CloseAnnotation(r.Context(), who(r).user.Name, aid, strings.TrimSpace(r.PostFormValue("action"))); err != nil {
		if errors.Is(err, store.ErrInvalid) {
			s.showLot(w, r, statusOf(err), "The cause was not closed: "+err.Error(), nil, nil)
			return
		}
		s.internalError(w, r, err)
		return
	}
	http.Redirect(w, r, "/lots/"+formatID(l.ID)+"?done=closed#causes", http.StatusSeeOther)
}

// correctLot replaces a lot's values, keeping the earlier revision; a
// reason is required.
func (s *Server) correctLot(w http.ResponseWriter, r *http.Request) {
	l, p, ok := s.pathLot(w, r)
	if !ok {
		return
	}
	in, f := readLotForm(r, p)
	reason := strings.TrimSpace(r.PostFormValue("reason"))
	if reason == "" {
		f.Problems["reason"] = "is empty: say why the lot changes"
	}
	if in.Time.IsZero() {
		in.Time = l.Time
	}
	f.addProblems(store.ValidateLot(p, in))
	if f.hasProblems() {
		s.showLot(w, r, statusOf(errFormRefused), "The correction was not saved; see the fields marked below.", nil, &f)
		return
	}
	_, err := s.db.CorrectLot(r.Context(), who(r).user.Name, reason, l.ID, in)
	var ve *store.ValidationError
	switch {
	case errors.As(err, &ve):
		f.addProblems(ve.Problems)
		s.showLot(w, r, statusOf(errFormRefused), "The correction was not saved; see the fields marked below.", nil, &f)
		return
	case errors.Is(err, store.ErrConflict):
		f.Problems["lot"] = "another lot of this process already has the code " + strconv.Quote(in.Lot)
		s.showLot(w, r, statusOf(errFormRefused), "The correction was not saved.", nil, &f)
		return
	case err != nil:
		s.internalError(w, r, err)
		return
	}
	http.Redirect(w, r, "/lots/"+formatID(l.ID)+"?done=corrected#history", http.StatusSeeOther)
}

// voidLot takes a lot off the charts with a reason; its values stay in
// its history.
func (s *Server) voidLot(w http.ResponseWriter, r *http.Request) {
	l, _, ok := s.pathLot(w, r)
	if !ok {
		return
	}
	err := s.db.VoidLot(r.Context(), who(r).user.Name, strings.TrimSpace(r.PostFormValue("reason")), l.ID)
	if errors.Is(err, store.ErrInvalid) {
		s.showLot(w, r, statusOf(err), "The lot was not voided: "+err.Error(), nil, nil)
		return
	}
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	http.Redirect(w, r, "/lots/"+formatID(l.ID)+"?done=voided#history", http.StatusSeeOther)
}

// categoryList is the process's categories as the form carries them.
func categoryList(cats []string) string { return strings.Join(cats, "\x1f") }

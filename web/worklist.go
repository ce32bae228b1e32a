package web

import (
	"errors"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"

	"lotwatch/store"
	"lotwatch/web/attention"
)

// worklistRow is one lot needing attention on the worklist.
type worklistRow struct {
	attention.Lot
	Zone   string // the process's zone, for the time
	Words  string // the kind in words
	Ticked bool   // ticked for the bulk form: a chosen signal's lot, or one ticked before a refused post
}

// signalLink is a signal over several lots needing attention, with the
// worklist address that shows exactly its lots, ticked for one cause.
type signalLink struct {
	Process, Rule, Words string
	First, Last          string // codes of its first and last lot needing attention
	Lots                 int
	Href                 string
	key                  string // attention.Signal.Key
	ids                  map[int64]bool
}

// worklistData is the worklist page.
type worklistData struct {
	Rows                       []worklistRow
	Total                      int
	Process, Area, Shift, Kind string
	Processes                  []option
	Areas, Shifts              []string
	Kinds                      []option
	Signals                    []signalLink // the open signals with a lot shown
	Signal                     *signalLink  // the signal chosen by ?signal=, whose lots alone are shown
	Back                       string       // this page with its filter, for the forms to return to
	Done                       string
	Problem                    string
	Form                       map[string]string
}

// kindWords says why a lot needs attention.
var kindWords = map[attention.Kind]string{
	attention.OutOfLimits: "out of limits",
	attention.RunRule:     "in a run-rule signal",
	attention.Shift:       "in a small-shift signal",
}

// worklistPage lists every lot needing attention across the processes,
// oldest first, filtered by process, area, shift and kind, with the way
// to record each lot's cause (or that none was found), and to record one
// cause over several lots at once.
func (s *Server) worklistPage(w http.ResponseWriter, r *http.Request) {
	s.showWorklist(w, r, http.StatusOK, "", nil)
}

func (s *Server) showWorklist(w http.ResponseWriter, r *http.Request, status int, problem string, form map[string]string) {
	q := r.URL.Query()
	if r.Method == http.MethodPost {
		if u, err := url.Parse(r.PostFormValue("back")); err == nil && isWorklistPath(r.PostFormValue("back")) {
			q = u.Query()
		}
	}
	pps, err := s.plant(r.Context())
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	d := worklistData{Process: q.Get("process"), Area: q.Get("area"), Shift: q.Get("shift"), Kind: q.Get("kind"),
		Done: q.Get("done"), Problem: problem, Form: form}
	if d.Form == nil {
		d.Form = map[string]string{}
	}
	var all []attention.Lot
	var signals []signalLink
	procs := []string{"", "any process"}
	areas, shifts := map[string]bool{}, map[string]bool{}
	for _, pp := range pps {
		if pp.err != nil {
			d.Problem = strings.TrimSpace(d.Problem + " Process " + pp.proc.Name + " could not be judged: its lots are not listed.")
			continue
		}
		procs = append(procs, formatID(pp.proc.ID), pp.proc.Name)
		if pp.proc.Area != "" {
			areas[pp.proc.Area] = true
		}
		all = append(all, pp.need...)
		for _, sg := range pp.sum.flagged.OpenSignals(pp.proc, pp.anns) {
			signals = append(signals, newSignalLink(pp.proc, sg))
		}
	}
	if key := q.Get("signal"); key != "" {
		for i, sl := range signals {
			if sl.key == key {
				d.Signal = &signals[i]
			}
		}
		if d.Signal == nil {
			d.Problem = strings.TrimSpace(d.Problem + " That signal has no lots needing attention any more (it was explained, or its lots changed): every lot is shown.")
		}
	}
	ticked := map[int64]bool{}
	if r.Method == http.MethodPost {
		for _, raw := range r.PostForm["lot"] {
			id, _ := strconv.ParseInt(raw, 10, 64)
			ticked[id] = true
		}
	} else if d.Signal != nil {
		ticked = d.Signal.ids
	}
	attention.Oldest(all)
	zone := map[int64]string{}
	for _, pp := range pps {
		zone[pp.proc.ID] = pp.proc.TimeZone
	}
	for _, l := range all {
		if l.Shift != "" {
			shifts[l.Shift] = true
		}
		if d.keeps(l) {
			row := worklistRow{Lot: l, Words: kindWords[l.Kind], Ticked: ticked[l.LotID]}
			row.Time = l.Time.In(store.Process{TimeZone: zone[l.ProcessID]}.Location())
			d.Rows = append(d.Rows, row)
		}
	}
	for _, sl := range signals {
		if slices.ContainsFunc(d.Rows, func(row worklistRow) bool { return sl.ids[row.LotID] }) {
			d.Signals = append(d.Signals, sl)
		}
	}
	d.Total = len(all)
	d.Processes = options(d.Process, procs...)
	d.Kinds = options(d.Kind, "", "any kind", string(attention.OutOfLimits), "out of limits", string(attention.RunRule), "run-rule signal", string(attention.Shift), "small-shift signal")
	d.Areas, d.Shifts = sortedKeys(areas), sortedKeys(shifts)
	back := url.Values{}
	for _, k := range []string{"process", "area", "shift", "kind", "signal"} {
		if v := q.Get(k); v != "" {
			back.Set(k, v)
		}
	}
	d.Back = "/attention"
	if len(back) > 0 {
		d.Back += "?" + back.Encode()
	}
	s.render(w, r, status, "worklist.html", "Worklist: lots needing attention", d)
}

// newSignalLink describes an open signal of the process for the worklist.
func newSignalLink(p store.Process, sg attention.Signal) signalLink {
	sl := signalLink{Process: p.Name, Rule: sg.Rule.String(), Words: sg.Rule.Describe(), Lots: len(sg.Lots),
		First: sg.Lots[0].Lot, Last: sg.Lots[len(sg.Lots)-1].Lot, Href: signalHref(sg.Key()), key: sg.Key(), ids: map[int64]bool{}}
	for _, l := range sg.Lots {
		sl.ids[l.LotID] = true
	}
	return sl
}

// signalHref is the worklist showing only the lots of the signal with
// the key, ticked, at the bulk form.
func signalHref(key string) string {
	return "/attention?" + url.Values{"signal": {key}}.Encode() + "#bulk"
}

// keeps reports whether a lot passes the worklist's filter: a chosen
// signal's lots, or the lots of the process, area, shift and kind asked.
func (d *worklistData) keeps(l attention.Lot) bool {
	if d.Signal != nil {
		return d.Signal.ids[l.LotID]
	}
	return (d.Process == "" || d.Process == formatID(l.ProcessID)) && (d.Area == "" || d.Area == l.Area) &&
		(d.Shift == "" || d.Shift == l.Shift) && (d.Kind == "" || d.Kind == string(l.Kind))
}

func sortedKeys(m map[string]bool) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}

// postWorklistCauses records one cause, or one "no assignable cause
// found", on each lot ticked on the worklist: the bulk path for the lots
// of one signal. Every lot is checked before anything is stored.
func (s *Server) postWorklistCauses(w http.ResponseWriter, r *http.Request) {
	if err := r.ParseForm(); err != nil {
		s.badRequest(w, r, "the form could not be read: "+err.Error())
		return
	}
	form := map[string]string{"cause": r.PostFormValue("cause"), "action": r.PostFormValue("action"),
		"reason": r.PostFormValue("reason"), "no_cause": r.PostFormValue("no_cause"), "closed": r.PostFormValue("closed")}
	if form["no_cause"] == "1" {
		form["cause"], form["action"], form["closed"] = "", "", ""
	} else {
		form["reason"] = ""
	}
	ids := r.PostForm["lot"]
	if len(ids) == 0 {
		s.showWorklist(w, r, statusOf(errFormRefused), "Nothing was recorded: tick the lots the cause is for (field lot).", form)
		return
	}
	var lots []store.Lot
	for _, raw := range ids {
		id, err := strconv.ParseInt(raw, 10, 64)
		if err != nil || id <= 0 {
			s.showWorklist(w, r, statusOf(errFormRefused), "Nothing was recorded: lot id "+strconv.Quote(raw)+" is not a positive whole number.", form)
			return
		}
		l, err := s.db.LotByID(r.Context(), id)
		if errors.Is(err, store.ErrNotFound) || (err == nil && l.Voided) {
			s.showWorklist(w, r, statusOf(store.ErrNotFound), "Nothing was recorded: there is no lot with id "+raw+".", form)
			return
		}
		if err != nil {
			s.internalError(w, r, err)
			return
		}
		lots = append(lots, l)
	}
	actor := who(r).user.Name
	for i, l := range lots {
		a := store.Annotation{ProcessID: l.ProcessID, LotID: l.ID, Cause: strings.TrimSpace(form["cause"]), Action: strings.TrimSpace(form["action"]),
			Closed: form["closed"] == "1", NoCauseFound: form["no_cause"] == "1", Reason: strings.TrimSpace(form["reason"])}
		if _, err := s.db.AddAnnotation(r.Context(), actor, a); err != nil {
			if errors.Is(err, store.ErrInvalid) && i == 0 {
				s.showWorklist(w, r, statusOf(err), "Nothing was recorded: "+err.Error(), form)
				return
			}
			s.internalError(w, r, err)
			return
		}
	}
	back := r.PostFormValue("back")
	if !isWorklistPath(back) {
		back = "/attention"
	}
	if u, err := url.Parse(back); err == nil && u.Query().Has("signal") {
		q := u.Query() // the signal is explained now: back to the whole list
		q.Del("signal")
		back = "/attention"
		if len(q) > 0 {
			back += "?" + q.Encode()
		}
	}
	sep := "?"
	if strings.Contains(back, "?") {
		sep = "&"
	}
	http.Redirect(w, r, back+sep+"done="+strconv.Itoa(len(lots)), http.StatusSeeOther)
}

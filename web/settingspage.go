package web

import (
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"strconv"
	"strings"

	"lotwatch/spc"
	"lotwatch/store"
)

// processForm is the add / edit form of a process.
type processForm struct {
	Proc     store.Process
	Editing  bool
	Values   map[string]string
	Problems map[string]string
	Other    []string
	Charts   []option
	Methods  []option
	Zones    []string
	HasLots  bool
	Done     bool
	// MonitorCosts says, for a process with lots, what its CUSUM and EWMA
	// as judged now cost in false alarms and gain in detection.
	MonitorCosts []string
	// MethodChange says what a change of the limit method changed.
	MethodChange string
}

// Problem returns the message for a field, for the template.
func (f processForm) Problem(field string) string { return f.Problems[field] }

// commonZones are suggested in the time zone field (any IANA name works).
var commonZones = []string{"UTC", "Europe/London", "Europe/Berlin", "Europe/Paris", "Europe/Warsaw", "America/New_York",
	"America/Chicago", "America/Los_Angeles", "America/Mexico_City", "America/Sao_Paulo", "Asia/Shanghai", "Asia/Tokyo",
	"Asia/Kolkata", "Asia/Singapore", "Australia/Sydney"}

func newProcessForm(vals map[string]string) processForm {
	return processForm{Values: vals, Problems: map[string]string{}, Zones: commonZones,
		Charts: options(vals["chart"], "p", "p — fraction nonconforming (n varies)", "np", "np — nonconforming units (n constant)",
			"u", "u — defects per unit", "c", "c — defects per lot (equal lots)"),
		Methods: options(vals["method"], "sigma", "sigma — k·σ from the normal approximation", "exact",
			"exact — binomial or Poisson quantiles (small counts)", "laney", "laney — p′/u′ widened for lot-to-lot variation")}
}

func processValues(p store.Process) map[string]string {
	return map[string]string{"name": p.Name, "description": p.Description, "area": p.Area, "chart": string(p.Chart),
		"method": string(p.Method), "k": strconv.FormatFloat(p.K, 'g', -1, 64), "rules": p.Rules,
		"categories": strings.Join(p.Categories, ", "), "tz": p.TimeZone, "retired": map[bool]string{true: "", false: "1"}[p.Active],
		"cusum_shift": monitorValue(p.Monitors.CUSUMShift), "cusum_arl0": monitorValue(p.Monitors.CUSUMARL0),
		"ewma_lambda": monitorValue(p.Monitors.EWMALambda), "ewma_width": monitorValue(p.Monitors.EWMAWidth),
		"ewma_arl0": monitorValue(p.Monitors.EWMAARL0)}
}

// monitorKeys are the form fields of the shift monitors.
var monitorKeys = []string{"cusum_shift", "cusum_arl0", "ewma_lambda", "ewma_width", "ewma_arl0"}

// monitorValue shows a monitor setting in the form: empty when not set.
func monitorValue(v float64) string {
	if v == 0 {
		return ""
	}
	return strconv.FormatFloat(v, 'g', -1, 64)
}

// readProcessForm reads the posted form into a process.
func readProcessForm(r *http.Request, f *processForm) store.Process {
	for _, k := range append([]string{"name", "description", "area", "chart", "method", "k", "rules", "categories", "tz", "retired", "reason"}, monitorKeys...) {
		f.Values[k] = r.PostFormValue(k)
	}
	*f = newProcessFormKeep(*f)
	p := store.Process{Name: strings.TrimSpace(f.Values["name"]), Description: strings.TrimSpace(f.Values["description"]), Area: strings.TrimSpace(f.Values["area"]),
		Chart: spc.Chart(f.Values["chart"]), Method: spc.Method(f.Values["method"]), Rules: strings.TrimSpace(f.Values["rules"]),
		TimeZone: strings.TrimSpace(f.Values["tz"]), Active: f.Values["retired"] != "1"}
	if k := strings.TrimSpace(f.Values["k"]); k != "" {
		v, err := strconv.ParseFloat(k, 64)
		if err != nil {
			f.Problems["k"] = strconv.Quote(k) + " is not a number"
		}
		p.K = v
	}
	for k, dst := range map[string]*float64{"cusum_shift": &p.Monitors.CUSUMShift, "cusum_arl0": &p.Monitors.CUSUMARL0,
		"ewma_lambda": &p.Monitors.EWMALambda, "ewma_width": &p.Monitors.EWMAWidth, "ewma_arl0": &p.Monitors.EWMAARL0} {
		if s := strings.TrimSpace(f.Values[k]); s != "" {
			v, err := strconv.ParseFloat(s, 64)
			if err != nil {
				f.Problems[k] = strconv.Quote(s) + " is not a number"
			}
			*dst = v
		}
	}
	p.Categories = []string{}
	for _, c := range strings.Split(f.Values["categories"], ",") {
		if c = strings.TrimSpace(c); c != "" {
			p.Categories = append(p.Categories, c)
		}
	}
	return p
}

func newProcessFormKeep(f processForm) processForm {
	n := newProcessForm(f.Values)
	n.Proc, n.Editing, n.Problems, n.HasLots, n.MonitorCosts = f.Proc, f.Editing, f.Problems, f.HasLots, f.MonitorCosts
	return n
}

// place puts store problems beside the form's fields.
func (f *processForm) place(ps []store.Problem) {
	field := map[string]string{"limits": "method", "sigma": "k"}
	for _, pr := range ps {
		k := pr.Field
		if m, ok := field[k]; ok {
			k = m
		}
		msg := pr.Reason
		if pr.Value != "" {
			msg = strconv.Quote(pr.Value) + " " + pr.Reason
		}
		switch k {
		case "name", "description", "area", "chart", "method", "k", "rules", "categories", "tz", "reason", "cusum_shift", "cusum_arl0", "ewma_lambda", "ewma_width", "ewma_arl0":
			f.Problems[k] = joinMsg(f.Problems[k], msg)
		default:
			f.Other = append(f.Other, pr.String())
		}
	}
}

type processListData struct {
	Processes []store.Process
	Form      processForm
	// PlantZone is the zone new processes get; ZoneForm its form.
	PlantZone string
	ZoneForm  processForm
	ZoneSaved bool
}

// processListPage lists the processes with the form for a new one, whose
// time zone starts as the plant's, and the form setting the plant's zone.
func (s *Server) processListPage(w http.ResponseWriter, r *http.Request) {
	tz, err := s.db.PlantTimeZone(r.Context())
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	s.showProcessList(w, r, http.StatusOK, newProcessForm(map[string]string{"chart": "p", "method": "sigma", "k": "3", "rules": "we", "tz": tz}),
		newProcessForm(map[string]string{"tz": tz}))
}

func (s *Server) showProcessList(w http.ResponseWriter, r *http.Request, status int, f processForm, zf ...processForm) {
	ps, err := s.db.Processes(r.Context(), true)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	tz, err := s.db.PlantTimeZone(r.Context())
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	d := processListData{Processes: ps, Form: f, PlantZone: tz, ZoneForm: newProcessForm(map[string]string{"tz": tz}),
		ZoneSaved: r.URL.Query().Get("zone") == "saved"}
	if len(zf) > 0 {
		d.ZoneForm = zf[0]
	}
	s.render(w, r, status, "processlist.html", "Processes", d)
}

// setPlantZone sets the plant's time zone, which new processes get.
func (s *Server) setPlantZone(w http.ResponseWriter, r *http.Request) {
	zf := newProcessForm(map[string]string{"tz": strings.TrimSpace(r.PostFormValue("tz")), "reason": r.PostFormValue("reason")})
	err := s.db.SetPlantTimeZone(r.Context(), who(r).user.Name, zf.Values["reason"], zf.Values["tz"])
	var ve *store.ValidationError
	switch {
	case errors.As(err, &ve):
		for _, pr := range ve.Problems {
			zf.Problems[pr.Field] = pr.String()
		}
		s.showProcessList(w, r, statusOf(errFormRefused), newProcessForm(map[string]string{"chart": "p", "method": "sigma", "k": "3", "rules": "we", "tz": zf.Values["tz"]}), zf)
	case err != nil:
		s.internalError(w, r, err)
	default:
		http.Redirect(w, r, "/settings/processes?zone=saved", http.StatusSeeOther)
	}
}

func (s *Server) addProcess(w http.ResponseWriter, r *http.Request) {
	f := newProcessForm(map[string]string{})
	p := readProcessForm(r, &f)
	if len(f.Problems) == 0 {
		np, err := s.db.AddProcess(r.Context(), who(r).user.Name, p)
		if s.savedProcess(w, r, &f, np, err) {
			return
		}
	}
	s.showProcessList(w, r, statusOf(errFormRefused), f)
}

func (s *Server) processSettingsPage(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	f := newProcessForm(processValues(p))
	f.Proc, f.Editing, f.Done = p, true, r.URL.Query().Get("done") == "1"
	if was := r.URL.Query().Get("was"); f.Done && was != "" && was != string(p.Method) {
		f.MethodChange = fmt.Sprintf("The limit method changed from %s to %s. The trial limits, on which every lot before the first frozen limit set is judged, use %s from now on, and so will the next limit set you freeze; limit sets already frozen keep the method they were frozen with.",
			was, p.Method, p.Method)
	}
	f.HasLots, f.MonitorCosts = s.chartFacts(r, p)
	s.render(w, r, http.StatusOK, "processform.html", "Settings — "+p.Name, f)
}

// chartFacts reads the process's judged chart for its settings form:
// whether it has lots, and what its shift monitors cost (monitorCosts).
func (s *Server) chartFacts(r *http.Request, p store.Process) (bool, []string) {
	pc, err := s.freshChart(r.Context(), p)
	if err != nil || len(pc.lots) == 0 {
		return false, nil
	}
	return true, monitorCosts(pc.a.Shift)
}

// monitorCosts says in words how often the CUSUM and the EWMA of a judged
// chart raise a false alarm at its centre, over its lot sizes, and how
// soon the CUSUM catches its shift: the price of each setting, beside it.
func monitorCosts(sw *spc.ShiftWatch) []string {
	if sw == nil {
		return nil
	}
	lots := func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) }
	var out []string
	if c := sw.CUSUM; c != nil {
		out = append(out, fmt.Sprintf("As judged now (centre %s, this process's lot sizes), the CUSUM (h = %.2f) raises a false alarm once every %s lots on average and catches a shift to %s after %s lots.",
			strconv.FormatFloat(c.P0, 'g', 4, 64), c.H, lots(c.ARL0), strconv.FormatFloat(c.P1, 'g', 4, 64), lots(c.ARL1)))
	}
	if e := sw.EWMA; e != nil && e.ARL0 > 0 {
		out = append(out, fmt.Sprintf("As judged now (centre %s, this process's lot sizes), the EWMA (weight %g, limits at %g standard deviations) raises a false alarm once every %s lots on average; the planning page finds the weight and width that catch a given shift soonest for as many false alarms as the chart.",
			strconv.FormatFloat(e.P0, 'g', 4, 64), e.Lambda, e.L, lots(e.ARL0)))
	}
	return out
}

func (s *Server) updateProcess(w http.ResponseWriter, r *http.Request) {
	old, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	f := newProcessForm(map[string]string{})
	f.Proc, f.Editing = old, true
	p := readProcessForm(r, &f)
	p.ID = old.ID
	p.ColumnMap, p.DateOrder = old.ColumnMap, old.DateOrder // not on this form
	reason := strings.TrimSpace(f.Values["reason"])
	if reason == "" {
		f.Problems["reason"] = "is empty: say why the process changes"
	}
	if len(f.Problems) == 0 {
		np, err := s.db.UpdateProcess(r.Context(), who(r).user.Name, reason, p)
		was := ""
		if err == nil && np.Method != old.Method {
			was = "&was=" + url.QueryEscape(string(old.Method))
		}
		if s.savedProcess(w, r, &f, np, err, was) {
			return
		}
	}
	f.HasLots, f.MonitorCosts = s.chartFacts(r, old)
	s.render(w, r, statusOf(errFormRefused), "processform.html", "Settings — "+old.Name, f)
}

// savedProcess answers a saved process with a redirect to its settings
// (true), or puts the store's refusal beside the form's fields (false:
// the caller shows the form again); any other error is answered as an
// internal error (true).
func (s *Server) savedProcess(w http.ResponseWriter, r *http.Request, f *processForm, p store.Process, err error, extra ...string) bool {
	var ve *store.ValidationError
	switch {
	case errors.As(err, &ve):
		f.place(ve.Problems)
		return false
	case errors.Is(err, store.ErrConflict):
		f.Problems["name"] = "a process named " + strconv.Quote(strings.TrimSpace(f.Values["name"])) + " already exists"
		return false
	case err != nil:
		s.internalError(w, r, err)
		return true
	}
	http.Redirect(w, r, "/processes/"+formatID(p.ID)+"/settings?done=1"+strings.Join(extra, ""), http.StatusSeeOther)
	return true
}

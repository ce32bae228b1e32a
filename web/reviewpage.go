package web

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"html/template"
	"math"
	"net/http"
	"net/url"
	"sort"
	"strconv"
	"strings"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/attention"
	"lotwatch/web/review"
	"lotwatch/web/review/report"
)

type reviewPageData struct {
	Week     string
	Filter   string
	Area     string
	Areas    []string
	FDR      bool
	Problem  string
	Fragment template.HTML
	Query    string
}

// reviewMaxDetails is the number of processes whose sections the review
// page writes below the summary; past it the page is the summary alone,
// each row linking to its process's section.
const reviewMaxDetails = 12

// reviewOptions reads the week (ISO 8601, "2026-W48"; default the last
// complete week) and the false-discovery-rate choice of a review request.
// The review takes each process's judged record from the summaries the
// status board keeps (judging a process only when its summary is missing
// or older than its lots), so it reads only the lots of the trend's weeks.
func (s *Server) reviewOptions(r *http.Request) review.Options {
	q := r.URL.Query()
	return review.Options{Week: strings.TrimSpace(q.Get("week")), Now: s.now(), FDR: q.Get("fdr") == "1", Judged: s.judgedRecord}
}

// judgedRecord gives what the process's whole record flags, as of its
// change counter now or later.
func (s *Server) judgedRecord(ctx context.Context, p store.Process) (*attention.Flagged, error) {
	v, err := s.db.LotsVersion(ctx, p.ID)
	if err != nil {
		return nil, err
	}
	sum, err := s.summaryOf(ctx, p, v)
	if err != nil {
		return nil, err
	}
	return sum.flagged, nil
}

// reviewPage shows the weekly review inside the site's layout: the summary
// of every process, sorted by concern, then the sections of the processes
// matching the filter (a part of the name, any case, and the area) when they are few, with links
// to download the review as a self-contained HTML document, CSV or JSON.
// The review is always built over every active process, so that a
// process's verdict and adjusted p-value do not depend on the filter.
// The review's charts are inline SVG, so that they print.
func (s *Server) reviewPage(w http.ResponseWriter, r *http.Request) {
	opt := s.reviewOptions(r)
	q := r.URL.Query()
	d := reviewPageData{Week: opt.Week, FDR: opt.FDR, Filter: strings.TrimSpace(q.Get("process")), Area: strings.TrimSpace(q.Get("area"))}
	rv, err := review.Build(r.Context(), s.db, opt)
	var oe *review.OptionError
	switch {
	case errors.As(err, &oe):
		d.Problem = oe.Error() + " (write the week as 2026-W48)"
		s.render(w, r, statusOf(errFormRefused), "review.html", "Weekly review", d)
		return
	case err != nil:
		s.internalError(w, r, err)
		return
	}
	d.Week = rv.Week
	base := url.Values{"week": {rv.Week}}
	if opt.FDR {
		base.Set("fdr", "1")
	}
	d.Query = base.Encode()
	v := report.View{MaxDetails: reviewMaxDetails, DetailURL: func(pr *review.ProcessReview) string {
		u := url.Values{"week": {rv.Week}, "process": {pr.Process.Name}}
		if opt.FDR {
			u.Set("fdr", "1")
		}
		return "/review?" + u.Encode() + "#p-" + strconv.FormatInt(pr.Process.ID, 10)
	}}
	seen := map[string]bool{}
	for _, pr := range rv.Processes {
		if a := pr.Process.Area; a != "" && !seen[a] {
			seen[a] = true
			d.Areas = append(d.Areas, a)
		}
	}
	sort.Strings(d.Areas)
	if f, area := strings.ToLower(d.Filter), d.Area; f != "" || area != "" {
		v.Match = func(pr *review.ProcessReview) bool {
			return strings.Contains(strings.ToLower(pr.Process.Name), f) && (area == "" || pr.Process.Area == area)
		}
	}
	if d.Fragment, err = report.HTMLView(rv, v); err != nil {
		s.internalError(w, r, err)
		return
	}
	s.render(w, r, http.StatusOK, "review.html", "Weekly review "+rv.Week, d)
}

// reviewDownload answers the review as a file: html (self-contained), csv
// or json.
func (s *Server) reviewDownload(w http.ResponseWriter, r *http.Request) {
	format := r.URL.Query().Get("format")
	ctype := map[string]string{"html": "text/html; charset=utf-8", "csv": "text/csv; charset=utf-8", "json": "application/json; charset=utf-8"}[format]
	if ctype == "" {
		s.badRequest(w, r, (&paramError{"format", format, "is not html, csv or json"}).Error())
		return
	}
	rv, err := review.Build(r.Context(), s.db, s.reviewOptions(r))
	var oe *review.OptionError
	if errors.As(err, &oe) {
		s.badRequest(w, r, oe.Error())
		return
	}
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	var b bytes.Buffer
	switch format {
	case "html":
		err = report.WriteHTML(&b, rv)
	case "csv":
		err = report.WriteCSV(&b, rv)
	case "json":
		err = report.WriteJSON(&b, rv)
	}
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	h := w.Header()
	h.Set("Content-Type", ctype)
	h.Set("Content-Disposition", fmt.Sprintf(`attachment; filename="lotwatch-review-%s.%s"`, rv.Week, format))
	h.Set("Cache-Control", "no-store")
	w.Write(b.Bytes())
}

// reviewCSS serves the review's style sheet (the CSP allows styles from
// this origin only, never inline).
func reviewCSS(w http.ResponseWriter, r *http.Request) {
	h := w.Header()
	h.Set("Content-Type", "text/css; charset=utf-8")
	h.Set("Cache-Control", "public, max-age=3600")
	w.Write([]byte(report.Stylesheet))
}

type planPageData struct {
	Processes []store.Process
	Selected  int64
	Values    map[string]string
	Problem   string
	Centre    *review.Centre
	Result    *review.PlanResult
	Rows      []planRow
	Floor     int
	Options   map[string]any
}

// planRow is one lot size of the planning table, in words: a limit that
// no lot can cross is said so, never shown as a negative count or −1.
type planRow struct {
	What, High, Low, ARL0, ARL1 string
}

func newPlanRow(what string, pl *spc.Plan) planRow {
	r := planRow{What: what, ARL0: runLength(pl.ARL0), ARL1: runLength(pl.ARL1)}
	if pl.UCLCount >= pl.N {
		r.High = "no lot can signal high at this size"
	} else {
		r.High = fmt.Sprintf("more than %d nonconforming", pl.UCLCount)
	}
	if pl.LCLCount < 1 {
		r.Low = "no lot can signal low at this size"
		if pl.MinNPositiveLCL > 0 {
			r.Low += fmt.Sprintf(" (that needs at least %d units per lot)", pl.MinNPositiveLCL)
		}
	} else {
		r.Low = fmt.Sprintf("fewer than %d nonconforming", pl.LCLCount)
	}
	return r
}

// runLength writes an average run length in lots, or says that no lot
// can signal.
func runLength(arl float64) string {
	if math.IsInf(arl, 1) || math.IsNaN(arl) {
		return "never (no lot can signal)"
	}
	return strconv.FormatFloat(arl, 'f', 2, 64)
}

// planPage plans lot sizes for a p or np process: the limits and ARLs at
// a lot size, the smallest lot size that detects a shift soon enough on
// average while keeping false alarms to at most one in spc.DefaultMinARL0
// lots (or the floor the user set), and the ARL curves against lot size.
func (s *Server) planPage(w http.ResponseWriter, r *http.Request) {
	ctx := r.Context()
	all, err := s.db.Processes(ctx, false)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	d := planPageData{Values: map[string]string{}, Floor: spc.DefaultMinARL0}
	for _, p := range all {
		if p.Chart.CountsUnits() {
			d.Processes = append(d.Processes, p)
		}
	}
	q := r.URL.Query()
	for _, k := range []string{"process", "p1", "n", "arl1", "min_arl0"} {
		d.Values[k] = strings.TrimSpace(q.Get(k))
	}
	if d.Values["process"] == "" {
		s.render(w, r, http.StatusOK, "plan.html", "Planning", d)
		return
	}
	fail := func(msg string) {
		d.Problem = msg
		s.render(w, r, statusOf(errFormRefused), "plan.html", "Planning", d)
	}
	d.Selected, _ = strconv.ParseInt(d.Values["process"], 10, 64)
	var proc *store.Process
	for i := range d.Processes {
		if d.Processes[i].ID == d.Selected {
			proc = &d.Processes[i]
		}
	}
	if proc == nil {
		fail("Choose a process with a p or np chart.")
		return
	}
	c, err := review.CurrentCentre(ctx, s.db, *proc)
	if err != nil {
		fail(err.Error())
		return
	}
	d.Centre = &c
	req := review.PlanRequest{}
	num := func(name string, dst *float64) bool {
		v := d.Values[name]
		if v == "" {
			return true
		}
		f, err := strconv.ParseFloat(strings.TrimSuffix(v, "%"), 64)
		if err != nil {
			fail(fmt.Sprintf("%s %q is not a number", name, v))
			return false
		}
		if strings.HasSuffix(v, "%") {
			f /= 100
		}
		*dst = f
		return true
	}
	var n float64
	if !num("p1", &req.P1) || !num("n", &n) || !num("arl1", &req.TargetARL1) || !num("min_arl0", &req.MinARL0) {
		return
	}
	if d.Values["min_arl0"] != "" && !(req.MinARL0 >= 1) {
		fail(fmt.Sprintf("min_arl0 %q must be a number of lots, 1 or more", d.Values["min_arl0"]))
		return
	}
	if d.Values["p1"] == "" {
		req.P1 = 2 * c.P0 // a doubling of the rate, unless told otherwise
		d.Values["p1"] = strconv.FormatFloat(req.P1, 'g', 4, 64)
	}
	if n != float64(int64(n)) {
		fail(fmt.Sprintf("n %q is not a whole number", d.Values["n"]))
		return
	}
	req.N = int64(n)
	if req.N == 0 && req.TargetARL1 == 0 {
		req.TargetARL1 = 10
		d.Values["arl1"] = "10"
	}
	res, err := review.PlanFor(c, req)
	if err != nil {
		fail(err.Error())
		return
	}
	d.Result = res
	if res.Plan != nil {
		d.Rows = append(d.Rows, newPlanRow(fmt.Sprintf("%d (asked)", res.Plan.N), res.Plan))
	}
	if res.SmallestPlan != nil {
		d.Rows = append(d.Rows, newPlanRow(fmt.Sprintf("%d (smallest meeting the target)", res.SmallestPlan.N), res.SmallestPlan))
	}
	d.Options = planChartOptions(res.Curve, res.MinARL0, req.TargetARL1, max(req.N, res.Smallest))
	s.render(w, r, http.StatusOK, "plan.html", "Planning — "+proc.Name, d)
}

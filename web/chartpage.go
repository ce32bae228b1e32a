package web

import (
	"encoding/csv"
	"fmt"
	"net/http"
	"net/url"
	"strconv"
	"strings"

	"lotwatch/store"
	"lotwatch/store/lotcsv"
)

// tableRows is the most rows the chart page's table lists (newest
// first); the CSV download has every point of the period.
const tableRows = 200

type chartPageData struct {
	View        *chartView
	Kind        string
	Options     map[string]any
	Details     [][]string
	ShiftCharts []shiftChart
	Drawn       int
	Thinned     bool
	Rows        []viewPoint
	MoreRows    int
	Query       string // the period and subgroup, for links
	Periods     []option
	Subgroups   []option
	LimitSets   []store.LimitSet
	OpenCauses  int
	LatestLotID int64
}

// option is one choice of a select.
type option struct {
	Value, Label string
	Selected     bool
}

func options(cur string, pairs ...string) []option {
	out := make([]option, 0, len(pairs)/2)
	for i := 0; i+1 < len(pairs); i += 2 {
		out = append(out, option{pairs[i], pairs[i+1], pairs[i] == cur})
	}
	return out
}

// loadView reads the period and subgrouping of the request and builds the
// chart view of the process.
func (s *Server) loadView(w http.ResponseWriter, r *http.Request) (*chartView, *processChart, []store.Annotation, bool) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return nil, nil, nil, false
	}
	pc, err := s.freshChart(r.Context(), p)
	if err != nil {
		s.internalError(w, r, err)
		return nil, nil, nil, false
	}
	q := r.URL.Query()
	win, period, words, err := periodOf(q, pc, s.now())
	if err != nil {
		s.badRequest(w, r, err.Error())
		return nil, nil, nil, false
	}
	by := q.Get("by")
	switch by {
	case "":
		by = byLot
	case byLot, byShift, byDay:
	default:
		s.badRequest(w, r, (&paramError{"by", by, "is not lot, shift or day"}).Error())
		return nil, nil, nil, false
	}
	anns, err := s.db.Annotations(r.Context(), p.ID)
	if err != nil {
		s.internalError(w, r, err)
		return nil, nil, nil, false
	}
	v, err := buildView(pc, win, by, anns)
	if err != nil {
		s.internalError(w, r, err)
		return nil, nil, nil, false
	}
	v.Period, v.PeriodWords, v.From, v.To = period, words, q.Get("from"), q.Get("to")
	return v, pc, anns, true
}

func (s *Server) chartPage(w http.ResponseWriter, r *http.Request) {
	v, pc, anns, ok := s.loadView(w, r)
	if !ok {
		return
	}
	d := chartPageData{View: v, Kind: chartKind(v.Proc.Chart), LimitSets: pc.sets}
	idx, thinned := thin(v.Points)
	d.Drawn, d.Thinned = len(idx), thinned
	if len(idx) > 0 {
		d.Options, d.Details = chartOptions(v.Proc.Name+" — "+string(v.Proc.Chart)+" chart", v, idx)
		d.ShiftCharts = shiftChartOptions(v, idx)
	}
	for i := len(v.Points) - 1; i >= 0 && len(d.Rows) < tableRows; i-- {
		d.Rows = append(d.Rows, v.Points[i])
	}
	d.MoreRows = len(v.Points) - len(d.Rows)
	q := url.Values{}
	q.Set("period", v.Period)
	if v.Period == "custom" {
		q.Set("from", v.From)
		q.Set("to", v.To)
	}
	q.Set("by", v.Subgroup)
	d.Query = q.Encode()
	d.Periods = options(v.Period, "today", "Today", "shift", "This shift", "7d", "Last 7 days", "30d", "Last 30 days", "all", "Whole record", "custom", "From … to …")
	d.Subgroups = options(v.Subgroup, byLot, "Each lot", byShift, "Each shift (lots pooled)", byDay, "Each day (lots pooled)")
	for _, a := range anns {
		if !a.Closed {
			d.OpenCauses++
		}
	}
	if n := len(pc.lots); n > 0 {
		d.LatestLotID = pc.lots[n-1].ID
	}
	s.render(w, r, http.StatusOK, "chart.html", v.Proc.Name, d)
}

// chartCSV downloads the chart page's table, every point of the period.
func (s *Server) chartCSV(w http.ResponseWriter, r *http.Request) {
	v, _, _, ok := s.loadView(w, r)
	if !ok {
		return
	}
	name := strings.TrimSuffix(fileSafe(v.Proc.Name), "-") + "-chart.csv"
	h := w.Header()
	h.Set("Content-Type", "text/csv; charset=utf-8")
	h.Set("Content-Disposition", `attachment; filename="`+name+`"`)
	h.Set("Cache-Control", "no-store")
	cw := csv.NewWriter(w)
	cw.Write([]string{v.Unit, "time", "shift", "lots", "inspected", "count", "value", "lcl", "center", "ucl", "z", "tail_p", "out_of_limits", "signals", "limits", "notes"})
	f := func(x float64) string { return strconv.FormatFloat(x, 'g', 6, 64) }
	for _, p := range v.Points {
		cw.Write([]string{lotcsv.Neutralise(p.Label), p.Time.Format("2006-01-02T15:04:05Z07:00"), lotcsv.Neutralise(p.Shift), strconv.Itoa(p.Lots),
			strconv.FormatInt(p.Inspected, 10), strconv.FormatInt(p.Count, 10), f(p.Value), f(p.LCL), f(p.Center), f(p.UCL),
			f(p.Z), f(p.TailP), strconv.FormatBool(p.Out()), strings.Join(p.Rules, " "), p.Limits, lotcsv.Neutralise(strings.Join(p.Notes, "; "))})
	}
	cw.Flush()
}

// fileSafe turns a name into a file name part: lower-case letters, digits
// and dashes.
func fileSafe(name string) string {
	var b strings.Builder
	dash := false
	for _, r := range strings.ToLower(name) {
		if (r >= 'a' && r <= 'z') || (r >= '0' && r <= '9') {
			b.WriteRune(r)
			dash = false
		} else if !dash && b.Len() > 0 {
			b.WriteByte('-')
			dash = true
		}
	}
	if b.Len() == 0 {
		return fmt.Sprint("process")
	}
	return b.String()
}

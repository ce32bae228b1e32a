package web

import (
	"bytes"
	"embed"
	"fmt"
	"html/template"
	"io/fs"
	"math"
	"net/http"
	"path"
	"time"

	"lotwatch/store"
)

// Caution is shown in the footer of every page.
const Caution = "A chart in control is not proof that the product meets specification; " +
	"lotwatch does not replace the plant's release or acceptance procedure. " +
	"Defer to the quality system, customer requirements and local regulations."

//go:embed templates
var templatesFS embed.FS

// pageSet holds one parsed template per page, each joined with the shared
// layout. All pages go through html/template, which escapes every value
// for where it appears.
type pageSet struct {
	pages map[string]*template.Template
}

var templateFuncs = template.FuncMap{
	"asset": assetURL,
	"fmtnum": func(v Num) string {
		f := float64(v)
		if math.IsNaN(f) || math.IsInf(f, 0) {
			return "—"
		}
		return fmt.Sprintf("%.4g", f)
	},
}

func loadPages() (*pageSet, error) {
	names, err := fs.Glob(templatesFS, "templates/*.html")
	if err != nil {
		return nil, err
	}
	ps := &pageSet{pages: map[string]*template.Template{}}
	for _, n := range names {
		base := path.Base(n)
		if base == "layout.html" {
			continue
		}
		t, err := template.New(base).Funcs(templateFuncs).ParseFS(templatesFS, "templates/layout.html", n)
		if err != nil {
			return nil, fmt.Errorf("web: template %s: %w", base, err)
		}
		ps.pages[base] = t
	}
	return ps, nil
}

// page is what the layout needs, with the page's own data in Data.
type page struct {
	Title   string
	User    *store.User
	Caution string
	Data    any
}

// render executes the page into a buffer first, so that a template error
// becomes a clean 500 and not half a page.
func (s *Server) render(w http.ResponseWriter, r *http.Request, status int, name, title string, data any) {
	t, ok := s.pages.pages[name]
	if !ok {
		s.log.Error("no such page template", "name", name)
		http.Error(w, "internal error", http.StatusInternalServerError)
		return
	}
	pg := page{Title: title, Caution: Caution, Data: data}
	if p := who(r); p != nil {
		u := p.user
		pg.User = &u
	}
	var buf bytes.Buffer
	if err := t.ExecuteTemplate(&buf, "layout", pg); err != nil {
		s.log.Error("rendering page", "name", name, "err", err)
		http.Error(w, "internal error", http.StatusInternalServerError)
		return
	}
	h := w.Header()
	h.Set("Content-Type", "text/html; charset=utf-8")
	h.Set("Cache-Control", "no-store")
	w.WriteHeader(status)
	w.Write(buf.Bytes())
}

// pageError shows a message on a page of its own.
func (s *Server) pageError(w http.ResponseWriter, r *http.Request, status int, msg string) {
	s.render(w, r, status, "error.html", http.StatusText(status), struct {
		Status int
		Text   string
	}{status, msg})
}

type processRow struct {
	ID          int64
	Name        string
	Description string
	Chart       string
}

func (s *Server) processesPage(w http.ResponseWriter, r *http.Request) {
	ps, err := s.db.Processes(r.Context(), false)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	rows := make([]processRow, len(ps))
	for i, p := range ps {
		rows[i] = processRow{ID: p.ID, Name: p.Name, Description: p.Description, Chart: string(p.Chart)}
	}
	s.render(w, r, http.StatusOK, "processes.html", "Processes", rows)
}

type chartPageData struct {
	Process  store.Process
	From, To string
	Chart    *ChartJSON
	Options  map[string]any
	Recent   []LotJSON
	OutCount int
	Limits   string
}

// recentRows is how many of the latest lots the chart page lists.
const recentRows = 30

func (s *Server) chartPage(w http.ResponseWriter, r *http.Request) {
	p, ok := s.pathProcess(w, r)
	if !ok {
		return
	}
	q := r.URL.Query()
	win, err := parseWindow(q, p.Location())
	if err != nil {
		s.pageError(w, r, http.StatusBadRequest, err.Error())
		return
	}
	pc, err := s.freshChart(r.Context(), p)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	c := pc.chartJSON(win)
	d := chartPageData{Process: p, From: q.Get("from"), To: q.Get("to"), Chart: c,
		Options: chartOptions(p.Name+" — "+c.Chart+" chart", c)}
	for _, l := range c.Lots {
		if l.OutOfLimits {
			d.OutCount++
		}
	}
	for i := len(c.Lots) - 1; i >= 0 && len(d.Recent) < recentRows; i-- {
		d.Recent = append(d.Recent, c.Lots[i])
	}
	switch {
	case len(pc.sets) == 0:
		d.Limits = "trial limits estimated from the lots themselves (no limit set frozen yet)"
	default:
		last := pc.sets[len(pc.sets)-1]
		d.Limits = fmt.Sprintf("limit set %d in force from %s (earlier lots: trial limits or earlier sets)",
			last.Number, last.EffectiveFrom.In(p.Location()).Format(time.DateOnly))
	}
	s.render(w, r, http.StatusOK, "chart.html", p.Name, d)
}

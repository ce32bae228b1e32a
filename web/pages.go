package web

import (
	"bytes"
	"embed"
	"fmt"
	"html/template"
	"io/fs"
	"math"
	"net/http"
	"net/url"
	"path"

	"lotwatch/spc"
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
	"num":        fmtFloat,
	"when":       fmtWhen,
	"catlist":    categoryList,
	"plural":     plural,
	"thousands":  func(n int) string { return thousands(int64(n)) },
	"ruleName":   spc.Rule.String,
	"sub":        func(a, b int) int { return a - b },
	"valueShort": func(c spc.Chart) string { return valueShort(string(c)) },
	// seg escapes a name for one segment of a path (a user name in
	// /admin/users/NAME/password), so that "/", "?" or "#" in it cannot
	// lead the form elsewhere; pathParam reads it back.
	"seg": url.PathEscape,
}

func loadPages() (*pageSet, error) {
	names, err := fs.Glob(templatesFS, "templates/*.html")
	if err != nil {
		return nil, err
	}
	ps := &pageSet{pages: map[string]*template.Template{}}
	for _, n := range names {
		base := path.Base(n)
		if base == "layout.html" || base == "partials.html" {
			continue
		}
		t, err := template.New(base).Funcs(templateFuncs).ParseFS(templatesFS, "templates/layout.html", "templates/partials.html", n)
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

// Can reports whether the signed-in user has at least the role, for the
// templates to show only what the user may use (the routes check again).
func (p page) Can(role string) bool {
	return p.User != nil && p.User.Role.AtLeast(store.Role(role))
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

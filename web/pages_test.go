package web

import (
	"encoding/json"
	"fmt"
	"html/template"
	"net/http"
	"regexp"
	"strings"
	"testing"

	"lotwatch/spc"
	"lotwatch/store"
)

var (
	// An attribute that loads or links something, pointing at a scheme
	// (http:, https:, javascript:, data: …) or a protocol-relative //host.
	foreignAttr = regexp.MustCompile(`(?i)\b(src|href|action|formaction|poster|srcset)\s*=\s*["']?\s*([a-z][a-z0-9+.\-]*:|//)`)
	// A CSS url(…) or @import pointing elsewhere.
	foreignCSS = regexp.MustCompile(`(?i)(url\(\s*["']?\s*([a-z][a-z0-9+.\-]*:|//))|@import`)
	// In scripts: a literal remote URL assigned to src/href or in url(…).
	foreignJS = regexp.MustCompile(`(?i)((src|href)\s*=\s*["'](https?:)?//)|(url\(\s*["']?(https?:)?//)`)
	localRef  = regexp.MustCompile(`(?i)\b(?:src|href)\s*=\s*"(/[^"]*)"`)
)

// TestNoOtherOrigin walks every page and every static file and looks for
// anything that would make the browser contact another origin: the
// program must work fully offline.
func TestNoOtherOrigin(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 40, func(i int) int64 { return int64(2 + i%4 + 20*btoi(i == 33)) })
	c := e.signIn(t, "admin1", testPassword)
	id := fmt.Sprint(e.proc.ID)
	pages := []string{"/signin", "/", "/processes/" + id, "/processes/" + id + "?from=2000-01-01", "/password", "/password?done=1", "/no-such-page", "/processes/999999", "/processes/" + id + "?from=bad"}
	seen := map[string]bool{}
	var queue []string
	for name := range staticFiles {
		queue = append(queue, "/static/"+name)
	}
	for _, p := range pages {
		for _, ck := range []*http.Cookie{nil, c} {
			rec := e.do(req{method: "GET", path: p, cookie: ck})
			body := rec.Body.String()
			if rec.Code != http.StatusSeeOther && !strings.Contains(body, template.HTMLEscapeString(Caution)) {
				t.Errorf("%s (status %d) lacks the caution in its footer", p, rec.Code)
			}
			if rec.Header().Get("Content-Security-Policy") == "" {
				t.Errorf("%s: no Content-Security-Policy", p)
			}
			if m := foreignAttr.FindString(body); m != "" {
				t.Errorf("%s refers to another origin: %q", p, m)
			}
			if m := foreignCSS.FindString(body); m != "" {
				t.Errorf("%s has CSS pointing elsewhere: %q", p, m)
			}
			if strings.Contains(body, "<script>") || strings.Contains(body, " style=") || regexp.MustCompile(`(?i)\son[a-z]+=`).MatchString(body) {
				t.Errorf("%s has an inline script, style attribute or event handler (the CSP forbids them)", p)
			}
			for _, m := range localRef.FindAllStringSubmatch(body, -1) {
				queue = append(queue, m[1])
			}
		}
	}
	for len(queue) > 0 {
		p := queue[0]
		queue = queue[1:]
		if seen[p] || !strings.HasPrefix(p, "/static/") {
			continue
		}
		seen[p] = true
		rec := e.do(req{method: "GET", path: p})
		if rec.Code != 200 {
			t.Errorf("%s: status %d", p, rec.Code)
			continue
		}
		body := rec.Body.String()
		switch {
		case strings.Contains(p, ".css"):
			if m := foreignCSS.FindString(body); m != "" {
				t.Errorf("%s points elsewhere: %q", p, m)
			}
		case strings.Contains(p, ".js"):
			if m := foreignJS.FindString(body); m != "" {
				t.Errorf("%s loads from elsewhere: %q", p, m)
			}
		}
		if strings.Contains(p, "?v=") && !strings.Contains(rec.Header().Get("Cache-Control"), "max-age=31536000") {
			t.Errorf("%s: versioned asset not cached long: %q", p, rec.Header().Get("Cache-Control"))
		}
		if rec.Header().Get("X-Content-Type-Options") != "nosniff" {
			t.Errorf("%s: no nosniff", p)
		}
	}
	for _, want := range []string{"/static/echarts.min.js", "/static/charts.js", "/static/style.css"} {
		found := false
		for p := range seen {
			found = found || strings.HasPrefix(p, want+"?v=")
		}
		if !found {
			t.Errorf("no page loads %s", want)
		}
	}
	// Our own scripts and styles mention no remote address at all.
	for _, name := range []string{"charts.js", "style.css"} {
		if strings.Contains(string(staticFiles[name].body), "//") && regexp.MustCompile(`https?://`).Match(staticFiles[name].body) {
			t.Errorf("%s mentions a remote address", name)
		}
	}
}

func btoi(b bool) int {
	if b {
		return 1
	}
	return 0
}

// TestPagesEscapeUserText: text a user typed (process names, lot codes,
// notes) is shown escaped on every page, including inside the chart's
// JSON data block.
func TestPagesEscapeUserText(t *testing.T) {
	e := newTestEnv(t)
	const evil = `<script>alert("x")</script><img src=x onerror=alert(1)>`
	p, err := e.db.AddProcess(t.Context(), "setup", store.Process{Name: "Press " + evil, Description: evil,
		Chart: spc.ChartC, Method: spc.MethodSigma, K: 3, Rules: "nelson", TimeZone: "UTC", Active: true})
	if err != nil {
		t.Fatal(err)
	}
	_, err = e.db.AddLots(t.Context(), "setup", p.ID, []store.LotInput{
		{Lot: "A</script><b>", Inspected: 1, Count: 3, Note: evil},
		{Lot: "B", Inspected: 1, Count: 4}, {Lot: "C", Inspected: 1, Count: 30},
	})
	if err != nil {
		t.Fatal(err)
	}
	c := e.signIn(t, "viewer1", testPassword)
	for _, path := range []string{"/", fmt.Sprintf("/processes/%d", p.ID)} {
		body := e.do(req{method: "GET", path: path, cookie: c}).Body.String()
		for _, raw := range []string{evil, "<script>alert", "<img src=x", "</script><b>"} {
			if strings.Contains(body, raw) {
				t.Errorf("%s shows user text unescaped: %q", path, raw)
			}
		}
		if !strings.Contains(body, "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt;") {
			t.Errorf("%s does not show the escaped process name", path)
		}
	}
	// The sign-in form echoes the typed name escaped.
	rec := e.do(req{method: "POST", path: "/signin", form: true, headers: sameOrigin(), body: "name=%22%3E%3Cscript%3E&password=nope-nope-1"})
	if strings.Contains(rec.Body.String(), `"><script>`) {
		t.Error("sign-in page echoes the user name unescaped")
	}
}

// TestChartPage checks the chart page's ECharts options: the value
// series, UCL, centre and LCL as step lines, and the lots outside their
// limits marked.
func TestChartPage(t *testing.T) {
	e := newTestEnv(t)
	lots := e.addLots(t, 30, func(i int) int64 { return int64(3 + i%3 + 40*btoi(i == 12)) })
	c := e.signIn(t, "viewer1", testPassword)
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d", e.proc.ID), cookie: c})
	if rec.Code != 200 {
		t.Fatalf("status %d", rec.Code)
	}
	body := rec.Body.String()
	if !strings.Contains(body, template.HTMLEscapeString(Caution)) {
		t.Error("the page lacks the caution")
	}
	const open = `<script type="application/json" id="chart-options">`
	i := strings.Index(body, open)
	j := strings.Index(body[i+1:], "</script>")
	if i < 0 || j < 0 || !strings.Contains(body, `data-chart-options="chart-options"`) {
		t.Fatal("no chart data block")
	}
	var opt struct {
		XAxis []struct {
			Data []string `json:"data"`
		} `json:"xAxis"`
		Series []struct {
			Name string `json:"name"`
			Type string `json:"type"`
			Step any    `json:"step"`
			Data []struct {
				Value any `json:"value"`
			} `json:"data"`
		} `json:"series"`
	}
	if err := json.Unmarshal([]byte(body[i+len(open):i+1+j]), &opt); err != nil {
		t.Fatalf("chart options are not JSON: %v", err)
	}
	if len(opt.XAxis) == 0 || len(opt.XAxis[0].Data) != len(lots) || opt.XAxis[0].Data[0] != lots[0].Lot {
		t.Fatalf("x axis %+v, want the %d lot codes", opt.XAxis, len(lots))
	}
	byName := map[string]int{}
	for k, s := range opt.Series {
		byName[s.Name] = k
	}
	for _, name := range []string{"UCL", "LCL", "centre line"} {
		k, ok := byName[name]
		if !ok || opt.Series[k].Step != "middle" || opt.Series[k].Type != "line" || len(opt.Series[k].Data) != len(lots) {
			t.Errorf("series %q missing or not a step line over every lot", name)
		}
	}
	k, ok := byName["out of limits"]
	if !ok {
		t.Fatal("no out-of-limits series")
	}
	for n, d := range opt.Series[k].Data {
		if marked := d.Value != "-"; marked != (n == 12) {
			t.Errorf("lot %d marked out of limits: %v, want %v", n, marked, n == 12)
		}
	}
	if !strings.Contains(body, "outside limits") {
		t.Error("the lot table does not mark the lot outside its limits")
	}
}

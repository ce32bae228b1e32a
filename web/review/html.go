package review

import (
	"bytes"
	"fmt"
	"html/template"
	"io"
	"math"
	"time"

	"lotwatch/spc"
)

// Stylesheet is the CSS of the review, also for the web layer to serve
// with its own stylesheets: HTMLFragment uses classes only (no style
// attributes), so it renders under a content security policy that allows
// only the server's own style sheets. It includes the print rules: a page
// break before each process after the first.
const Stylesheet = `.lw-review{font-family:sans-serif;color:#222;max-width:60rem}
.lw-review h1{font-size:1.4rem;margin:.2rem 0}
.lw-review h2{font-size:1.15rem;border-bottom:1px solid #999;padding-bottom:.2rem;margin-top:1.5rem}
.lw-review h3{font-size:1rem;margin:1rem 0 .3rem}
.lw-review table{border-collapse:collapse;margin:.3rem 0}
.lw-review th,.lw-review td{border:1px solid #bbb;padding:.2rem .5rem;text-align:left;vertical-align:top}
.lw-review td.num{text-align:right;font-variant-numeric:tabular-nums}
.lw-review .verdict{font-weight:bold}
.lw-review .muted{color:#666}
.lw-review .caution{border:1px solid #a04a2a;padding:.5rem;margin:1rem 0}
.lw-review .lw-chart{max-width:100%;height:auto;display:block;margin:.3rem 0}
@media print{
.lw-review{max-width:none;font-size:10pt}
.lw-process+.lw-process{break-before:page;page-break-before:always}
.lw-review table,.lw-review .lw-chart{break-inside:avoid;page-break-inside:avoid}
}
`

var funcs = template.FuncMap{
	"rate":    FormatRate,
	"diff":    formatDiff,
	"pval":    FormatP,
	"pct":     func(x float64) string { return fmt.Sprintf("%.1f%%", x) },
	"level":   levelPercent,
	"unit":    UnitWord,
	"status":  CauseStatus,
	"plotted": plotted,
	"when": func(t time.Time, loc *time.Location) string {
		if t.IsZero() {
			return ""
		}
		return t.In(loc).Format("Mon 2006-01-02 15:04")
	},
	"date":   func(t time.Time) string { return t.Format(dateOnly) },
	"lots":   lotList,
	"finite": func(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) },
	"pareto": func(pr *ProcessReview) template.HTML {
		return ParetoSVG(pr.Pareto, "Defect categories, "+pr.Current.Week)
	},
	"trend": func(pr *ProcessReview) template.HTML {
		return TrendSVG(pr.Process.Chart, pr.Trend, fmt.Sprintf("Weekly rate with %s intervals, %d weeks", pr.Method, len(pr.Trend)))
	},
	"caveat": func(m spc.IntervalMethod) string { return m.Caveat() },
}

var fragmentTmpl = template.Must(template.New("fragment").Funcs(funcs).Parse(`<div class="lw-review">
<h1>Weekly review {{.Week}}</h1>
<p>Monday {{date .FirstDay}} to Sunday {{date .LastDay}}, each process on its own clocks. Intervals at {{level .Level}}: {{.Method}} for the fraction nonconforming, exact Poisson for defects per unit.</p>
{{with caveat .Method}}<p class="muted">{{.}}</p>{{end}}
{{if not .Processes}}<p>No processes to review.</p>{{end}}
{{range .Processes}}{{$p := .}}{{$ch := .Process.Chart}}{{$loc := .Process.Location}}
<section class="lw-process">
<h2>{{.Process.Name}} <span class="muted">({{$ch}} chart, {{.Process.TimeZone}})</span></h2>
<table>
<tr><th>Week</th><th>Lots</th><th>Inspected</th><th>{{unit $ch}}</th><th>Rate</th><th>{{level $.Level}} interval</th></tr>
{{range (index $.Rows .)}}<tr><td>{{.Week}}</td><td class="num">{{.Lots}}</td><td class="num">{{.Inspected}}</td><td class="num">{{.Count}}</td><td class="num">{{rate $ch .Rate}}</td><td>{{if .HasLots}}{{rate $ch .Lower}} to {{rate $ch .Upper}}{{else}}no lots inspected{{end}}</td></tr>
{{end}}</table>
{{with .Change}}{{if .Compared}}<p>Change: {{diff $ch .Difference}} ({{level $.Level}} {{.Interval}} interval {{diff $ch .Lower}} to {{diff $ch .Upper}}; {{.Test}}, {{pval .PValue}}).</p>{{end}}
<p class="verdict">{{.VerdictText}}</p>{{end}}

<h3>Lots outside their control limits</h3>
{{if .OutOfLimits}}<table>
<tr><th>Lot</th><th>Time</th><th>{{unit $ch}} / inspected</th><th>Judged</th><th>Cause</th></tr>
{{range .OutOfLimits}}<tr><td>{{.Lot.Lot}}</td><td>{{when .Lot.Time $loc}}</td><td class="num">{{.Lot.Count}} / {{.Lot.Inspected}}</td><td>{{if .Above}}above the upper limit {{plotted $ch .UCL}}{{else}}below the lower limit {{plotted $ch .LCL}}{{end}} ({{.Limits}})</td><td>{{status .Annotations}}{{range .Annotations}}<br>{{.Cause}}{{with .Action}}; action: {{.}}{{end}} <span class="muted">({{.By}}, {{if .Closed}}closed{{else}}open{{end}})</span>{{end}}</td></tr>
{{end}}</table>{{else}}<p>None.</p>{{end}}

<h3>Run-rule signals touching the week</h3>
{{if .Signals}}<table>
<tr><th>Rule</th><th>What</th><th>Lots</th><th>Cause</th></tr>
{{range .Signals}}<tr><td>{{.Rule}}</td><td>{{.Description}}</td><td>{{lots .Lots}}</td><td>{{status .Annotations}}{{range .Annotations}}<br>{{.Cause}}{{with .Action}}; action: {{.}}{{end}} <span class="muted">({{.By}}, {{if .Closed}}closed{{else}}open{{end}})</span>{{end}}</td></tr>
{{end}}</table>{{else}}<p>None.</p>{{end}}

<h3>Defect categories</h3>
{{pareto .}}
{{if .Pareto}}<table>
<tr><th>Category</th><th>Count</th><th>Percent</th><th>Cumulative</th></tr>
{{range .Pareto}}<tr><td>{{.Category}}</td><td class="num">{{.Count}}</td><td class="num">{{pct .Percent}}</td><td class="num">{{pct .CumulativePercent}}</td></tr>
{{end}}</table>{{end}}
{{if .Uncategorized}}<p class="muted">{{.Uncategorized}} {{unit $ch}} not split into categories.</p>{{end}}

<h3>Trend</h3>
{{trend .}}

<h3>Checks of the week's lots</h3>
{{with .Dispersion}}<p>{{.Advice}}</p>{{end}}
{{range .Warnings}}<p>{{.Message}}</p>{{end}}
{{range .Notes}}<p>{{.}}</p>{{end}}
{{if not (or .Dispersion .Warnings .Notes)}}<p class="muted">No lots this week to check.</p>{{end}}
</section>
{{end}}
<p class="caution">{{.Caution}}</p>
</div>
`))

var documentTmpl = template.Must(template.New("document").Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Weekly review {{.Week}} · lotwatch</title>
<style>
{{.CSS}}</style>
</head>
<body>
{{.Body}}
</body>
</html>
`))

type fragmentData struct {
	*Review
	Rows    map[*ProcessReview][]WeekStat
	Caution string
}

// HTMLFragment renders the review as an HTML fragment (a div of class
// lw-review) for a page with the server's own layout; style it with
// Stylesheet. It holds no scripts, no style attributes and no references
// to other resources; the charts are inline SVG.
func (r *Review) HTMLFragment() (template.HTML, error) {
	d := fragmentData{Review: r, Rows: map[*ProcessReview][]WeekStat{}, Caution: "Caution: " + Caution}
	for _, pr := range r.Processes {
		d.Rows[pr] = []WeekStat{pr.Current, pr.Previous}
	}
	var b bytes.Buffer
	if err := fragmentTmpl.Execute(&b, d); err != nil {
		return "", err
	}
	return template.HTML(b.String()), nil // produced by html/template
}

// WriteHTML writes the review as a self-contained HTML document: the style
// sheet (with its print rules) inline, the charts as inline SVG, no
// scripts and no external references, so that it reads the same when
// mailed or printed.
func (r *Review) WriteHTML(w io.Writer) error {
	body, err := r.HTMLFragment()
	if err != nil {
		return err
	}
	return documentTmpl.Execute(w, struct {
		Week string
		CSS  template.CSS
		Body template.HTML
	}{r.Week, template.CSS(Stylesheet), body})
}

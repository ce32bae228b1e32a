package report

import (
	"bytes"
	"fmt"
	"html/template"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"lotwatch/spc"
	"lotwatch/web/review"
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
.lw-review .lw-scroll{max-width:100%;overflow-x:auto}
.lw-review table.lw-summary td,.lw-review table.lw-summary th{padding:.15rem .4rem}
.lw-review table.lw-summary .verdict{font-weight:normal}
.lw-review .rise{font-weight:bold}
.lw-review .lw-glance{font-weight:bold}
@media (max-width:40rem){.lw-review th,.lw-review td{padding:.15rem .25rem;font-size:.85rem}}
@media print{
.lw-summary-block{break-after:page;page-break-after:always}
.lw-review table.lw-summary{font-size:8.5pt}
.lw-review .lw-scroll{overflow:visible}
.lw-review{max-width:none;font-size:10pt}
.lw-review,.lw-review table,.lw-review .caution,.lw-review svg{max-width:100%;box-sizing:border-box}
.lw-review h2,.lw-review h3{break-after:avoid;page-break-after:avoid}
.lw-process+.lw-process{break-before:page;page-break-before:always}
.lw-review table,.lw-review .lw-chart{break-inside:avoid;page-break-inside:avoid}
}
`

var funcs = template.FuncMap{
	"rate":    FormatRate,
	"diff":    formatDiff,
	"pval":    review.FormatP,
	"pct":     func(x float64) string { return fmt.Sprintf("%.1f%%", x) },
	"level":   review.LevelPercent,
	"unit":    UnitWord,
	"status":  review.CauseStatus,
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
	"pareto": func(pr *review.ProcessReview) template.HTML {
		return ParetoSVG(pr.Pareto, "Defect categories, "+pr.Current.Week)
	},
	"trend": func(pr *review.ProcessReview) template.HTML {
		return TrendSVG(pr.Process.Chart, pr.Trend, fmt.Sprintf("Weekly rate with %s intervals, %d weeks", pr.Method, len(pr.Trend)))
	},
	"caveat": func(m spc.IntervalMethod) string { return m.Caveat() },
	"stamp":  func(t time.Time) string { return t.UTC().Format("2006-01-02 15:04 UTC") },
	"adjp": func(c review.Change) string {
		if !c.Compared {
			return "—"
		}
		return strings.TrimPrefix(review.FormatP(c.AdjustedP), "p = ")
	},
}

var fragmentTmpl = template.Must(template.New("fragment").Funcs(funcs).Parse(`<div class="lw-review">
<h1>Weekly review {{.Week}}</h1>
<p>Monday {{date .FirstDay}} to Sunday {{date .LastDay}}, each process on its own clocks. Intervals at {{level .Level}}: {{.Method}} for the fraction nonconforming, exact Poisson for defects per unit. <span class="muted">Generated at {{stamp .Generated}}.</span></p>
{{with caveat .Method}}<p class="muted">{{.}}</p>{{end}}
{{if not .Processes}}<p>No processes to review.</p>{{end}}
{{if .Processes}}<section class="lw-summary-block">
<h2>Summary{{if .Filtered}} <span class="muted">({{len .Rows}} of {{len .Processes}} processes)</span>{{end}}</h2>
<p class="lw-glance">{{.Glance.Sentence}}</p>
<p>Processes asking most for attention first: a rise unlikely from sampling alone, lots outside their limits or in run-rule or small-shift signals with no cause recorded, a rise too close to call. "Outside limits" and "Signals" count the week's; "Lots needing attention" counts every lot of the record, of any age, flagged and not yet explained.</p>
{{with .Chance.Sentence .FDR}}<p>{{.}}</p>{{end}}
<div class="lw-scroll"><table class="lw-summary">
<thead><tr><th scope="col">Process</th><th scope="col">Rate {{.Week}}</th><th scope="col">{{level .Level}} interval</th><th scope="col">Change</th><th scope="col">Verdict</th><th scope="col">Adjusted p</th><th scope="col">Outside limits</th><th scope="col">Signals</th><th scope="col">Lots needing attention</th></tr></thead>
<tbody>{{range .Rows}}{{$ch := .Process.Chart}}<tr><td>{{with $.Link .}}<a href="{{.}}">{{end}}{{.Process.Name}}{{if $.Link .}}</a>{{end}}{{with .Process.Area}} <span class="muted">({{.}})</span>{{end}}</td><td class="num">{{rate $ch .Current.Rate}}</td><td>{{if .Current.HasLots}}{{rate $ch .Current.Lower}} to {{rate $ch .Current.Upper}}{{else}}—{{end}}</td><td class="num">{{diff $ch .Change.Difference}}</td><td class="verdict{{if and .Change.StatesChange (gt .Change.Difference 0.0)}} rise{{end}}">{{.Change.VerdictText}}</td><td class="num">{{adjp .Change}}</td><td class="num">{{len .OutOfLimits}}{{with .UnexplainedOut}} ({{.}} no cause){{end}}</td><td class="num">{{len .Signals}}{{with .UnexplainedSignals}} ({{.}} no cause){{end}}{{with .Shifts}}<br><span class="muted">{{.}} of a sustained small shift</span>{{end}}</td><td class="num">{{.NeedAttention}}</td></tr>
{{end}}</tbody></table></div>
{{if .Hidden}}<p class="muted">The details of {{.Hidden}} processes are not on this page: choose a process in the summary, or narrow the filter.</p>{{end}}
</section>{{end}}
{{range .Details}}{{$p := .}}{{$ch := .Process.Chart}}{{$loc := .Process.Location}}
<section class="lw-process" id="p-{{.Process.ID}}">
<h2>{{.Process.Name}} <span class="muted">({{$ch}} chart, {{.Process.TimeZone}})</span></h2>
<div class="lw-scroll"><table>
<tr><th>Week</th><th>Lots</th><th>Inspected</th><th>{{unit $ch}}</th><th>Rate</th><th>{{level $.Level}} interval</th></tr>
{{range (index $.RowsOf .)}}<tr><td>{{.Week}}</td><td class="num">{{.Lots}}</td><td class="num">{{.Inspected}}</td><td class="num">{{.Count}}</td><td class="num">{{rate $ch .Rate}}</td><td>{{if .HasLots}}{{rate $ch .Lower}} to {{rate $ch .Upper}}{{else}}no lots inspected{{end}}</td></tr>
{{end}}</table></div>
{{with .Change}}{{if .Compared}}<p>Change: {{diff $ch .Difference}} ({{level $.Level}} {{.Interval}} interval {{diff $ch .Lower}} to {{diff $ch .Upper}}; {{.Test}}, {{pval .PValue}}{{if $.FDR}}{{else}}; adjusted across the review {{adjp .}}{{end}}).</p>{{end}}
<p class="verdict">{{.VerdictText}}</p>{{end}}

<h3>Lots outside their control limits</h3>
{{if .OutOfLimits}}<div class="lw-scroll"><table>
<tr><th>Lot</th><th>Time</th><th>{{unit $ch}} / inspected</th><th>Judged</th><th>Cause</th></tr>
{{range .OutOfLimits}}<tr><td>{{.Lot.Lot}}</td><td>{{when .Lot.Time $loc}}</td><td class="num">{{.Lot.Count}} / {{.Lot.Inspected}}</td><td>{{if .Above}}above the upper limit {{plotted $ch .UCL}}{{else}}below the lower limit {{plotted $ch .LCL}}{{end}} ({{.Limits}})</td><td>{{status .Annotations}}{{range .Annotations}}<br>{{if .NoCauseFound}}no assignable cause found: {{.Reason}}{{else}}{{.Cause}}{{end}}{{with .Action}}; action: {{.}}{{end}} <span class="muted">({{.By}}, {{if .Closed}}closed{{else}}open{{end}})</span>{{end}}</td></tr>
{{end}}</table></div>{{else}}<p>None.</p>{{end}}

<h3>Signals touching the week <span class="muted">(run rules and small shifts)</span></h3>
{{if .Signals}}<div class="lw-scroll"><table>
<tr><th>Rule</th><th>What</th><th>Lots</th><th>Cause</th></tr>
{{range .Signals}}<tr><td>{{.Rule}}{{if .Meaning}}<br><span class="muted">sustained small shift</span>{{end}}</td><td>{{.Description}}{{with .Meaning}}<br><span class="muted">{{.}}</span>{{end}}</td><td>{{lots .Lots}}</td><td>{{status .Annotations}}{{range .Annotations}}<br>{{if .NoCauseFound}}no assignable cause found: {{.Reason}}{{else}}{{.Cause}}{{end}}{{with .Action}}; action: {{.}}{{end}} <span class="muted">({{.By}}, {{if .Closed}}closed{{else}}open{{end}})</span>{{end}}</td></tr>
{{end}}</table></div>{{else}}<p>None.</p>{{end}}

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
	*review.Review
	Rows     []*review.ProcessReview // summary rows, by concern
	Details  []*review.ProcessReview // sections written, by concern
	Filtered bool
	Hidden   int // rows whose section is not written
	RowsOf   map[*review.ProcessReview][]review.WeekStat
	Caution  string
	link     func(*review.ProcessReview) string
}

// Link is the address of a summary row's process: its section on the page,
// or the View's DetailURL when its section is not written; "" for none.
func (d fragmentData) Link(pr *review.ProcessReview) string {
	if d.link == nil {
		return ""
	}
	return d.link(pr)
}

// View chooses what a page shows of the review. The zero View shows every
// process, summary and sections, with no links (the mailed file).
type View struct {
	// Match keeps the processes the reader filtered for; nil keeps all.
	Match func(*review.ProcessReview) bool
	// MaxDetails writes the sections only when at most this many processes
	// match; 0 means always. A plant-wide review is then a summary whose
	// rows link to DetailURL.
	MaxDetails int
	// DetailURL is the address of one process's section on its own page;
	// nil gives no links.
	DetailURL func(*review.ProcessReview) string
}

// HTMLFragment renders the review as an HTML fragment (a div of class
// lw-review) for a page with the server's own layout; style it with
// Stylesheet. It holds no scripts, no style attributes and no references
// to other resources; the charts are inline SVG.
func HTMLFragment(r *review.Review) (template.HTML, error) { return HTMLView(r, View{}) }

// HTMLView renders the review as HTMLFragment does, showing what v
// chooses: the summary first, sorted by concern, then the sections.
func HTMLView(r *review.Review, v View) (template.HTML, error) {
	d := fragmentData{Review: r, RowsOf: map[*review.ProcessReview][]review.WeekStat{}, Caution: "Caution: " + review.Caution}
	for _, pr := range r.ByConcern() {
		if v.Match == nil || v.Match(pr) {
			d.Rows = append(d.Rows, pr)
		}
	}
	d.Filtered = len(d.Rows) < len(r.Processes)
	d.Details = d.Rows
	if v.MaxDetails > 0 && len(d.Rows) > v.MaxDetails {
		d.Details, d.Hidden = nil, len(d.Rows)
	}
	shown := map[*review.ProcessReview]bool{}
	for _, pr := range d.Details {
		shown[pr] = true
		d.RowsOf[pr] = []review.WeekStat{pr.Current, pr.Previous}
	}
	if v.DetailURL != nil {
		d.link = func(pr *review.ProcessReview) string {
			if shown[pr] {
				return "#p-" + strconv.FormatInt(pr.Process.ID, 10)
			}
			return v.DetailURL(pr)
		}
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
func WriteHTML(w io.Writer, r *review.Review) error {
	body, err := HTMLFragment(r)
	if err != nil {
		return err
	}
	return documentTmpl.Execute(w, struct {
		Week string
		CSS  template.CSS
		Body template.HTML
	}{r.Week, template.CSS(Stylesheet), body})
}

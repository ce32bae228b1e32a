package report

import (
	"fmt"
	"html"
	"html/template"
	"math"
	"strconv"
	"strings"

	"lotwatch/spc"
	"lotwatch/web/review"
)

// The charts are inline SVG written here, with presentation attributes
// only (no style attributes, no scripts, no references), so that they
// render in a mailed file and under a strict content security policy.
// Inline SVG in HTML needs no namespace declaration.

const (
	colourBar      = "#5b7f95"
	colourLine     = "#a04a2a"
	colourAxis     = "#444444"
	colourGrid     = "#dddddd"
	colourCurrent  = "#1f3f57"
	colourInterval = "#7a7a7a"
)

// svgWriter accumulates SVG markup.
type svgWriter struct{ b strings.Builder }

func (s *svgWriter) f(format string, a ...any) { fmt.Fprintf(&s.b, format, a...) }

func (s *svgWriter) text(x, y float64, anchor, size, fill, body string, extra string) {
	s.f(`<text x="%.1f" y="%.1f" text-anchor="%s" font-size="%s" fill="%s"%s>%s</text>`, x, y, anchor, size, fill, extra, html.EscapeString(body))
}

func (s *svgWriter) open(w, h int, label string) {
	s.f(`<svg class="lw-chart" width="%d" height="%d" viewBox="0 0 %d %d" role="img" aria-label="%s" font-family="sans-serif">`,
		w, h, w, h, html.EscapeString(label))
	s.f(`<title>%s</title>`, html.EscapeString(label))
}

func (s *svgWriter) close() template.HTML {
	s.b.WriteString(`</svg>`)
	return template.HTML(s.b.String()) // every piece of text was escaped above
}

// niceMax rounds x up to 1, 2, 2.5 or 5 times a power of ten, for an axis.
func niceMax(x float64) float64 {
	if !(x > 0) || math.IsInf(x, 0) {
		return 1
	}
	e := math.Pow(10, math.Floor(math.Log10(x)))
	for _, m := range []float64{1, 2, 2.5, 5, 10} {
		if m*e >= x*(1-1e-12) {
			return m * e
		}
	}
	return 10 * e
}

func tick(v float64) string { return strconv.FormatFloat(v, 'g', 4, 64) }

// ParetoSVG draws the Pareto chart of bars: counts as bars, largest first,
// with the cumulative percent as a line on a 0–100% scale at the right.
func ParetoSVG(bars []spc.ParetoBar, title string) template.HTML {
	const w, h = 640, 280
	const left, right, top, bottom = 50.0, 50.0, 30.0, 70.0
	var s svgWriter
	s.open(w, h, title)
	s.text(w/2, 18, "middle", "13", colourAxis, title, "")
	pw, ph := w-left-right, h-top-bottom
	if len(bars) == 0 {
		s.text(w/2, h/2, "middle", "12", colourAxis, "No defect categories recorded this week.", "")
		return s.close()
	}
	maxC := niceMax(float64(bars[0].Count))
	y := func(c float64) float64 { return top + ph - ph*c/maxC }
	yp := func(p float64) float64 { return top + ph - ph*p/100 }
	for i := 0; i <= 4; i++ {
		v := maxC * float64(i) / 4
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, y(v), left+pw, y(v), colourGrid)
		s.text(left-6, y(v)+4, "end", "10", colourAxis, tick(v), "")
		s.text(left+pw+6, yp(float64(i)*25)+4, "start", "10", colourAxis, strconv.Itoa(i*25)+"%", "")
	}
	slot := pw / float64(len(bars))
	bw := slot * 0.7
	var pts []string
	for i, b := range bars {
		x := left + slot*float64(i) + (slot-bw)/2
		s.f(`<rect x="%.1f" y="%.1f" width="%.1f" height="%.1f" fill="%s"><title>%s: %d (%.1f%%)</title></rect>`,
			x, y(float64(b.Count)), bw, ph-(y(float64(b.Count))-top), colourBar, html.EscapeString(b.Category), b.Count, b.Percent)
		cx := x + bw/2
		pts = append(pts, fmt.Sprintf("%.1f,%.1f", cx, yp(b.CumulativePercent)))
		label := b.Category
		if r := []rune(label); len(r) > 16 {
			label = string(r[:15]) + "…"
		}
		s.text(cx, top+ph+12, "end", "10", colourAxis, label, fmt.Sprintf(` transform="rotate(-40 %.1f %.1f)"`, cx, top+ph+12))
	}
	s.f(`<polyline points="%s" fill="none" stroke="%s" stroke-width="2"/>`, strings.Join(pts, " "), colourLine)
	for _, p := range pts {
		xy := strings.Split(p, ",")
		s.f(`<circle cx="%s" cy="%s" r="3" fill="%s"/>`, xy[0], xy[1], colourLine)
	}
	s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, top+ph, left+pw, top+ph, colourAxis)
	s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, top, left, top+ph, colourAxis)
	s.text(12, top+ph/2, "middle", "10", colourAxis, "count", fmt.Sprintf(` transform="rotate(-90 12 %.1f)"`, top+ph/2))
	s.text(w-10, top+ph/2, "middle", "10", colourLine, "cumulative", fmt.Sprintf(` transform="rotate(90 %d %.1f)"`, w-10, top+ph/2))
	return s.close()
}

// TrendSVG draws the weekly rate of the weeks (oldest first) as points
// with their confidence intervals as bars; the last week is the reviewed
// one and is drawn darker. Weeks without lots are marked "no lots".
func TrendSVG(ch spc.Chart, weeks []review.WeekStat, title string) template.HTML {
	const w, h = 640, 260
	const left, right, top, bottom = 60.0, 20.0, 30.0, 60.0
	var s svgWriter
	s.open(w, h, title)
	s.text(w/2, 18, "middle", "13", colourAxis, title, "")
	pw, ph := w-left-right, h-top-bottom
	hi := 0.0
	for _, st := range weeks {
		if st.HasLots() {
			hi = math.Max(hi, st.Upper)
		}
	}
	maxY := niceMax(100 * hi) // percent, or per 100 units
	y := func(rate float64) float64 { return top + ph - ph*100*rate/maxY }
	unit := "%"
	if !ch.CountsUnits() {
		unit = ""
	}
	for i := 0; i <= 4; i++ {
		v := maxY * float64(i) / 4
		yy := top + ph - ph*float64(i)/4
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, yy, left+pw, yy, colourGrid)
		s.text(left-6, yy+4, "end", "10", colourAxis, tick(v)+unit, "")
	}
	axis := "rate (percent)"
	if !ch.CountsUnits() {
		axis = "defects per 100 units"
	}
	s.text(12, top+ph/2, "middle", "10", colourAxis, axis, fmt.Sprintf(` transform="rotate(-90 12 %.1f)"`, top+ph/2))
	if len(weeks) == 0 {
		return s.close()
	}
	slot := pw / float64(len(weeks))
	var line []string
	for i, st := range weeks {
		cx := left + slot*(float64(i)+0.5)
		label := st.Week
		if k := strings.Index(label, "-"); k >= 0 && i > 0 && weeks[i-1].Week[:k] == label[:k] {
			label = label[k+1:] // the year only where it changes
		}
		s.text(cx, top+ph+14, "middle", "10", colourAxis, label, "")
		if !st.HasLots() {
			s.text(cx, top+ph-6, "middle", "9", colourInterval, "no lots", "")
			line = append(line, "") // break the line
			continue
		}
		colour := colourBar
		if i == len(weeks)-1 {
			colour = colourCurrent
		}
		yl, yu, yr := y(st.Lower), y(st.Upper), y(st.Rate)
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s" stroke-width="1.5"/>`, cx, yl, cx, yu, colourInterval)
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s" stroke-width="1.5"/>`, cx-5, yl, cx+5, yl, colourInterval)
		s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s" stroke-width="1.5"/>`, cx-5, yu, cx+5, yu, colourInterval)
		s.f(`<circle cx="%.1f" cy="%.1f" r="4" fill="%s"><title>%s: %s (%s to %s), %d lots</title></circle>`, cx, yr, colour,
			html.EscapeString(st.Week), html.EscapeString(FormatRate(ch, st.Rate)), html.EscapeString(FormatRate(ch, st.Lower)),
			html.EscapeString(FormatRate(ch, st.Upper)), st.Lots)
		line = append(line, fmt.Sprintf("%.1f,%.1f", cx, yr))
	}
	// Join consecutive weeks that have lots.
	var run []string
	flush := func() {
		if len(run) > 1 {
			s.f(`<polyline points="%s" fill="none" stroke="%s" stroke-width="1"/>`, strings.Join(run, " "), colourBar)
		}
		run = run[:0]
	}
	for _, p := range line {
		if p == "" {
			flush()
			continue
		}
		run = append(run, p)
	}
	flush()
	s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, top+ph, left+pw, top+ph, colourAxis)
	s.f(`<line x1="%.1f" y1="%.1f" x2="%.1f" y2="%.1f" stroke="%s"/>`, left, top, left, top+ph, colourAxis)
	return s.close()
}

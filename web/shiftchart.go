package web

import (
	"fmt"
	"strconv"

	"github.com/go-echarts/go-echarts/v2/charts"
	"github.com/go-echarts/go-echarts/v2/opts"
)

// shiftChart is one chart of a shift monitor, drawn below the control
// chart on the same axis of lots.
type shiftChart struct {
	ID      string
	Label   string // what it shows, in words (also the chart's accessible name)
	Options map[string]any
}

// shiftChartOptions builds the charts of the process's CUSUM (S with its
// decision interval h) and EWMA (the average with its limits) over the
// drawn points idx, with the control chart's lot codes on the x axis and
// the points where each monitor signals marked.
func shiftChartOptions(v *chartView, idx []int) []shiftChart {
	sw := v.Shift
	if sw == nil || len(idx) == 0 {
		return nil
	}
	codes := make([]string, len(idx))
	for k, i := range idx {
		codes[k] = v.Points[i].Label
	}
	base := func(title, yName string) *charts.Line {
		line := charts.NewLine()
		line.AssetsHost = "/static/"
		line.SetGlobalOptions(
			charts.WithAnimation(false),
			// title and legend inside the card's border and the y-axis name
			// along the axis, as on the control chart
			charts.WithTitleOpts(opts.Title{Title: title, Top: "8", Left: "10"}),
			charts.WithTooltipOpts(opts.Tooltip{Show: opts.Bool(true), Trigger: "axis"}),
			charts.WithLegendOpts(opts.Legend{Show: opts.Bool(true), Type: "scroll", Top: "36", Left: "10", Right: "10"}),
			charts.WithGridOpts(opts.Grid{Left: "72", Right: "24", Top: "72", Bottom: "84"}),
			charts.WithXAxisOpts(opts.XAxis{Type: "category", Name: v.Unit, NameLocation: "middle", NameGap: 28, Data: codes}),
			charts.WithYAxisOpts(opts.YAxis{Type: "value", Name: yName, NameLocation: "middle", NameGap: 52, Scale: opts.Bool(true)}),
			charts.WithDataZoomOpts(opts.DataZoom{Type: "inside"}, opts.DataZoom{Type: "slider"}),
		)
		line.SetXAxis(codes)
		return line
	}
	series := func(f func(p *shiftPoint) float64) []opts.LineData {
		out := make([]opts.LineData, len(idx))
		for k, i := range idx {
			out[k] = opts.LineData{Value: chartValue(Num(f(v.Points[i].Monitor)))}
		}
		return out
	}
	// signals marks the points where the monitor signals, as the control
	// chart marks a run-rule signal (a purple triangle).
	signals := func(line *charts.Line, value func(p *shiftPoint) float64, signal func(p *shiftPoint) bool) {
		data := make([]opts.ScatterData, len(idx))
		for k, i := range idx {
			data[k] = opts.ScatterData{Value: "-"}
			if p := v.Points[i].Monitor; signal(p) {
				data[k] = opts.ScatterData{Value: chartValue(Num(value(p))), Name: codes[k]}
			}
		}
		marks := charts.NewScatter()
		marks.AddSeries("signal", data,
			charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "triangle", SymbolSize: 10}),
			charts.WithItemStyleOpts(opts.ItemStyle{Color: colourSignal}))
		line.Overlap(marks)
	}
	var out []shiftChart
	step := charts.WithLineChartOpts(opts.LineChart{Step: "middle", Symbol: "none"})
	if c := sw.CUSUM; c != nil {
		dir := "rise"
		if c.P1 < c.P0 {
			dir = "fall"
		}
		line := base("CUSUM for a "+dir+" to "+strconv.FormatFloat(c.P1, 'g', 4, 64), "S")
		line.AddSeries("S", series(func(p *shiftPoint) float64 { return p.S }),
			charts.WithLineChartOpts(opts.LineChart{Symbol: "circle", SymbolSize: 4}),
			charts.WithLineStyleOpts(opts.LineStyle{Color: colourValue, Width: 1}), charts.WithItemStyleOpts(opts.ItemStyle{Color: colourValue}))
		line.AddSeries("h", series(func(*shiftPoint) float64 { return c.H }), step,
			charts.WithLineStyleOpts(opts.LineStyle{Color: colourLimit, Width: 1.5, Type: "dashed"}), charts.WithItemStyleOpts(opts.ItemStyle{Color: colourLimit}))
		signals(line, func(p *shiftPoint) float64 { return p.S }, func(p *shiftPoint) bool { return p.CUSUMSignal })
		line.Validate()
		out = append(out, shiftChart{ID: "cusum-chart", Options: line.JSON(),
			Label: fmt.Sprintf("CUSUM below the chart, same lots: S against its decision interval h = %.2f (a signal where S reaches h); on average %.0f lots between false alarms at the centre, %.1f to catch a %s to %s.",
				c.H, c.ARL0, c.ARL1, dir, strconv.FormatFloat(c.P1, 'g', 4, 64))})
	}
	if e := sw.EWMA; e != nil {
		line := base("EWMA of the rates (λ "+strconv.FormatFloat(e.Lambda, 'g', -1, 64)+")", valueName(string(v.Proc.Chart)))
		line.AddSeries("EWMA", series(func(p *shiftPoint) float64 { return p.Z }),
			charts.WithLineChartOpts(opts.LineChart{Symbol: "circle", SymbolSize: 4}),
			charts.WithLineStyleOpts(opts.LineStyle{Color: colourValue, Width: 1}), charts.WithItemStyleOpts(opts.ItemStyle{Color: colourValue}))
		for _, s := range []struct {
			name string
			f    func(p *shiftPoint) float64
		}{{"EWMA UCL", func(p *shiftPoint) float64 { return p.UCL }}, {"EWMA LCL", func(p *shiftPoint) float64 { return p.LCL }}} {
			line.AddSeries(s.name, series(s.f), step,
				charts.WithLineStyleOpts(opts.LineStyle{Color: colourLimit, Width: 1.5, Type: "dashed"}), charts.WithItemStyleOpts(opts.ItemStyle{Color: colourLimit}))
		}
		signals(line, func(p *shiftPoint) float64 { return p.Z }, func(p *shiftPoint) bool { return p.EWMASignal })
		line.Validate()
		out = append(out, shiftChart{ID: "ewma-chart", Options: line.JSON(),
			Label: fmt.Sprintf("EWMA below the chart, same lots: the weighted average of the rates (weight %g on the newest) with its limits at %g standard deviations (a signal beyond them); on average %.0f lots between false alarms at the centre.", e.Lambda, e.L, e.ARL0)})
	}
	return out
}

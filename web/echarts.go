package web

import (
	"math"

	"github.com/go-echarts/go-echarts/v2/charts"
	"github.com/go-echarts/go-echarts/v2/opts"
)

// Colours of the control chart, chosen for contrast on white and for
// readers with red-green colour deficiency (the limits are dark blue,
// out-of-limit points orange-red with a larger diamond, signalling points
// purple triangles); every mark also differs in shape, so that colour is
// never the only cue.
const (
	colourValue  = "#33404d"
	colourLimit  = "#1f4e9c"
	colourCentre = "#2d7a3e"
	colourOut    = "#c2360f"
	colourSignal = "#6b2c91"
	colourSet    = "#5b6570"
)

// chartOptions builds the ECharts option object of a control chart with
// go-echarts: the drawn points' values, the per-point UCL and LCL as step
// lines, the centre line (stepped too, as it changes between limit sets),
// the points outside their limits and those in a run-rule signal marked,
// and a vertical line where a limit set comes into force. Only the
// options are used: the page starts the chart from /static/charts.js with
// ECharts served from /static/. details holds the tooltip lines of each
// drawn point, for charts.js.
func chartOptions(title string, v *chartView, idx []int) (options map[string]any, details [][]string) {
	n := len(idx)
	codes := make([]string, n)
	values := make([]opts.LineData, n)
	ucl := make([]opts.LineData, n)
	lcl := make([]opts.LineData, n)
	centre := make([]opts.LineData, n)
	out := make([]opts.ScatterData, n)
	sig := make([]opts.ScatterData, n)
	details = make([][]string, n)
	pos := make(map[int]int, n)
	for k, i := range idx {
		p := v.Points[i]
		pos[i] = k
		codes[k] = p.Label
		values[k] = opts.LineData{Value: chartValue(Num(p.Value))}
		ucl[k] = opts.LineData{Value: chartValue(finite(p.UCL))}
		lcl[k] = opts.LineData{Value: chartValue(finite(p.LCL))}
		centre[k] = opts.LineData{Value: chartValue(Num(p.Center))}
		out[k] = opts.ScatterData{Value: "-"}
		sig[k] = opts.ScatterData{Value: "-"}
		if p.Out() {
			out[k] = opts.ScatterData{Value: chartValue(Num(p.Value)), Name: p.Label}
		} else if len(p.Rules) > 0 {
			sig[k] = opts.ScatterData{Value: chartValue(Num(p.Value)), Name: p.Label}
		}
		details[k] = v.tooltip(p)
	}
	var marks []opts.MarkLineNameXAxisItem
	for _, m := range v.Marks {
		// a set starting at a point that was thinned away is marked at the next drawn point
		k := -1
		for i := m.Index; i < len(v.Points); i++ {
			if j, ok := pos[i]; ok {
				k = j
				break
			}
		}
		if k >= 0 {
			marks = append(marks, opts.MarkLineNameXAxisItem{Name: m.Label, XAxis: codes[k]})
		}
	}
	line := charts.NewLine()
	line.AssetsHost = "/static/"
	line.SetGlobalOptions(
		charts.WithAnimation(false),
		// The title sits inside the card's border, the legend on one
		// line that scrolls on a narrow screen, and the y-axis name along
		// the axis, where neither the card's edge nor the legend cuts it.
		charts.WithTitleOpts(opts.Title{Title: title, Top: "8", Left: "10"}),
		charts.WithTooltipOpts(opts.Tooltip{Show: opts.Bool(true), Trigger: "axis"}),
		charts.WithLegendOpts(opts.Legend{Show: opts.Bool(true), Type: "scroll", Top: "36", Left: "10", Right: "10"}),
		charts.WithGridOpts(opts.Grid{Left: "72", Right: "24", Top: "72", Bottom: "84"}),
		charts.WithXAxisOpts(opts.XAxis{Type: "category", Name: v.Unit, NameLocation: "middle", NameGap: 28, Data: codes}),
		charts.WithYAxisOpts(opts.YAxis{Type: "value", Name: valueName(string(v.Proc.Chart)), NameLocation: "middle", NameGap: 52, Scale: opts.Bool(true)}),
		charts.WithDataZoomOpts(opts.DataZoom{Type: "inside"}, opts.DataZoom{Type: "slider"}),
	)
	line.SetXAxis(codes)
	step := charts.WithLineChartOpts(opts.LineChart{Step: "middle", Symbol: "none"})
	valueOpts := []charts.SeriesOpts{
		charts.WithLineChartOpts(opts.LineChart{Symbol: "circle", SymbolSize: 5}),
		charts.WithLineStyleOpts(opts.LineStyle{Color: colourValue, Width: 1}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourValue}),
	}
	if len(marks) > 0 {
		valueOpts = append(valueOpts,
			charts.WithMarkLineNameXAxisItemOpts(marks...),
			charts.WithMarkLineStyleOpts(opts.MarkLineStyle{Symbol: []string{"none", "none"},
				Label:     &opts.Label{Show: opts.Bool(true), Formatter: "{b}", Position: "insideEndTop", Color: colourSet},
				LineStyle: &opts.LineStyle{Color: colourSet, Type: "dotted", Width: 1.5}}))
	}
	line.AddSeries("value", values, valueOpts...)
	line.AddSeries("UCL", ucl, step, charts.WithLineStyleOpts(opts.LineStyle{Color: colourLimit, Width: 1.5, Type: "dashed"}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourLimit}))
	line.AddSeries("centre line", centre, step, charts.WithLineStyleOpts(opts.LineStyle{Color: colourCentre, Width: 1.5}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourCentre}))
	line.AddSeries("LCL", lcl, step, charts.WithLineStyleOpts(opts.LineStyle{Color: colourLimit, Width: 1.5, Type: "dashed"}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourLimit}))
	marksOut := charts.NewScatter()
	marksOut.AddSeries("out of limits", out,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "diamond", SymbolSize: 13}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourOut}))
	marksOut.AddSeries("in a signal", sig,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "triangle", SymbolSize: 10}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourSignal}))
	line.Overlap(marksOut)
	line.Validate()
	return line.JSON(), details
}

// chartValue is a number for ECharts, or "-" (ECharts' empty value) where
// the limit or value is undefined.
func chartValue(n Num) any {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return "-"
	}
	return f
}

func valueName(chart string) string {
	switch chart {
	case "p":
		return "fraction nonconforming"
	case "np":
		return "nonconforming units"
	case "u":
		return "defects per unit"
	case "c":
		return "defects"
	}
	return chart
}

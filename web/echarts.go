package web

import (
	"math"

	"github.com/go-echarts/go-echarts/v2/charts"
	"github.com/go-echarts/go-echarts/v2/opts"
)

// Colours of the control chart, chosen for contrast on white and for
// readers with red-green colour deficiency (the limits are dark blue,
// out-of-limit points orange-red with a larger symbol).
const (
	colourValue  = "#33404d"
	colourLimit  = "#1f4e9c"
	colourCentre = "#2d7a3e"
	colourOut    = "#d1431a"
)

// chartOptions builds the ECharts option object of a control chart with
// go-echarts: the lots' values, the per-lot UCL and LCL as step lines, the
// centre line (stepped too, as it changes between limit sets) and the lots
// outside their limits marked. Only the options are used: the page starts
// the chart from /static/charts.js with ECharts served from /static/, so
// go-echarts' own page template and its remote assets host play no part.
func chartOptions(title string, c *ChartJSON) map[string]any {
	n := len(c.Lots)
	codes := make([]string, n)
	values := make([]opts.LineData, n)
	ucl := make([]opts.LineData, n)
	lcl := make([]opts.LineData, n)
	centre := make([]opts.LineData, n)
	out := make([]opts.ScatterData, n)
	for i, l := range c.Lots {
		codes[i] = l.Lot
		values[i] = opts.LineData{Value: chartValue(l.Value)}
		ucl[i] = opts.LineData{Value: chartValue(l.UCL)}
		lcl[i] = opts.LineData{Value: chartValue(l.LCL)}
		centre[i] = opts.LineData{Value: chartValue(l.Center)}
		if l.OutOfLimits {
			out[i] = opts.ScatterData{Value: chartValue(l.Value), Name: l.Lot}
		} else {
			out[i] = opts.ScatterData{Value: "-"}
		}
	}
	line := charts.NewLine()
	line.AssetsHost = "/static/"
	line.SetGlobalOptions(
		charts.WithAnimation(false),
		charts.WithTitleOpts(opts.Title{Title: title}),
		charts.WithTooltipOpts(opts.Tooltip{Show: opts.Bool(true), Trigger: "axis"}),
		charts.WithLegendOpts(opts.Legend{Show: opts.Bool(true), Top: "30"}),
		charts.WithGridOpts(opts.Grid{Left: "60", Right: "30", Top: "70", Bottom: "80"}),
		charts.WithXAxisOpts(opts.XAxis{Type: "category", Name: "lot", Data: codes}),
		charts.WithYAxisOpts(opts.YAxis{Type: "value", Name: valueName(c.Chart), Scale: opts.Bool(true)}),
		charts.WithDataZoomOpts(opts.DataZoom{Type: "inside"}, opts.DataZoom{Type: "slider"}),
	)
	line.SetXAxis(codes)
	step := charts.WithLineChartOpts(opts.LineChart{Step: "middle", Symbol: "none"})
	line.AddSeries("value", values,
		charts.WithLineChartOpts(opts.LineChart{Symbol: "circle", SymbolSize: 5}),
		charts.WithLineStyleOpts(opts.LineStyle{Color: colourValue, Width: 1}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourValue}))
	line.AddSeries("UCL", ucl, step, charts.WithLineStyleOpts(opts.LineStyle{Color: colourLimit, Width: 1.5, Type: "dashed"}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourLimit}))
	line.AddSeries("centre line", centre, step, charts.WithLineStyleOpts(opts.LineStyle{Color: colourCentre, Width: 1.5}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourCentre}))
	line.AddSeries("LCL", lcl, step, charts.WithLineStyleOpts(opts.LineStyle{Color: colourLimit, Width: 1.5, Type: "dashed"}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourLimit}))
	marks := charts.NewScatter()
	marks.AddSeries("out of limits", out,
		charts.WithScatterChartOpts(opts.ScatterChart{Symbol: "diamond", SymbolSize: 11}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourOut}))
	line.Overlap(marks)
	line.Validate()
	return line.JSON()
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

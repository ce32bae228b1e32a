package web

import (
	"math"
	"strconv"

	"github.com/go-echarts/go-echarts/v2/charts"
	"github.com/go-echarts/go-echarts/v2/opts"

	"lotwatch/spc"
)

// Colours of the planning chart: detection in the value colour, false
// alarms in the limit colour, dashed, so that the two lines differ in
// shape as well as colour.
const (
	colourARL1 = colourValue
	colourARL0 = colourLimit
)

// planChartOptions builds the ECharts options of the average run lengths
// against lot size, both axes on log scales: ARL1, the lots until a shift
// to P1 signals, and ARL0, the lots between false alarms, with the floor
// on ARL0 and the ARL1 target (0 for none) as horizontal lines, and the
// lot size mark (0 for none) as a vertical one. Lot sizes at which no lot
// can signal are gaps in the lines. Like the control chart, the options
// are data for /static/charts.js, never an inline script.
func planChartOptions(curve []spc.Plan, floor, target float64, mark int64) map[string]any {
	arl1 := make([]opts.LineData, 0, len(curve))
	arl0 := make([]opts.LineData, 0, len(curve))
	point := func(n int64, arl float64) opts.LineData {
		if math.IsInf(arl, 0) || math.IsNaN(arl) || arl < 1 {
			return opts.LineData{Value: []any{n, "-"}}
		}
		return opts.LineData{Value: []any{n, arl}}
	}
	for _, pl := range curve {
		arl1 = append(arl1, point(pl.N, pl.ARL1))
		arl0 = append(arl0, point(pl.N, pl.ARL0))
	}
	hlines := []opts.MarkLineNameYAxisItem{{Name: "ARL0 floor " + strconv.FormatFloat(floor, 'g', -1, 64) + " lots", YAxis: floor}}
	if target >= 1 {
		hlines = append(hlines, opts.MarkLineNameYAxisItem{Name: "ARL1 target " + strconv.FormatFloat(target, 'g', -1, 64) + " lots", YAxis: target})
	}
	line := charts.NewLine()
	line.AssetsHost = "/static/"
	line.SetGlobalOptions(
		charts.WithAnimation(false),
		charts.WithTitleOpts(opts.Title{Title: "Run lengths against lot size", Top: "6", Left: "8", TitleStyle: &opts.TextStyle{FontSize: 15}}),
		charts.WithTooltipOpts(opts.Tooltip{Show: opts.Bool(true), Trigger: "axis"}),
		charts.WithLegendOpts(opts.Legend{Show: opts.Bool(true), Type: "scroll", Top: "34", Left: "8", Right: "8"}),
		charts.WithGridOpts(opts.Grid{Left: "72", Right: "32", Top: "96", Bottom: "64"}),
		charts.WithXAxisOpts(opts.XAxis{Type: "log", Name: "units per lot (log scale)", NameLocation: "middle", NameGap: 30}),
		charts.WithYAxisOpts(opts.YAxis{Type: "log", Name: "lots (log scale)", NameLocation: "middle", NameGap: 48}),
	)
	markOpts := []charts.SeriesOpts{
		charts.WithMarkLineNameYAxisItemOpts(hlines...),
		charts.WithMarkLineStyleOpts(opts.MarkLineStyle{Symbol: []string{"none", "none"},
			Label:     &opts.Label{Show: opts.Bool(true), Formatter: "{b}", Position: "insideEndTop", Color: colourSet},
			LineStyle: &opts.LineStyle{Color: colourSet, Type: "dotted", Width: 1.5}}),
	}
	if mark > 0 {
		markOpts = append(markOpts, charts.WithMarkLineNameXAxisItemOpts(opts.MarkLineNameXAxisItem{Name: "n = " + strconv.FormatInt(mark, 10), XAxis: mark}))
	}
	line.AddSeries("ARL1: lots until the shift signals", arl1, append([]charts.SeriesOpts{
		charts.WithLineChartOpts(opts.LineChart{Symbol: "circle", SymbolSize: 4, ConnectNulls: opts.Bool(false)}),
		charts.WithLineStyleOpts(opts.LineStyle{Color: colourARL1, Width: 1.5}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourARL1}),
	}, markOpts...)...)
	line.AddSeries("ARL0: lots between false alarms", arl0,
		charts.WithLineChartOpts(opts.LineChart{Symbol: "none", ConnectNulls: opts.Bool(false)}),
		charts.WithLineStyleOpts(opts.LineStyle{Color: colourARL0, Width: 1.5, Type: "dashed"}),
		charts.WithItemStyleOpts(opts.ItemStyle{Color: colourARL0}))
	line.Validate()
	return line.JSON()
}

package main

import (
	"flag"
	"fmt"
	"io"
	"math"
	"strconv"
	"text/tabwriter"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
)

// monitorOptions are the flags of `lotwatch analyze` for the CUSUM and
// EWMA monitors, watched beside the Shewhart chart.
type monitorOptions struct {
	cusum, ewma bool
	shift       float64
	shiftSet    bool
	arl0        float64
	h           float64
	hSet        bool
	lambda      float64
	width       float64
	set         map[string]string // the monitor flags given, by name, as typed
}

// addFlags declares the monitor flags on fs.
func (m *monitorOptions) addFlags(fs *flag.FlagSet) {
	m.arl0, m.lambda, m.width = 370, spc.DefaultEWMALambda, spc.DefaultEWMAWidth
	m.set = map[string]string{}
	fs.Func("monitor", "also watch the lots with a `MONITOR` that catches small sustained shifts sooner than\nthe chart: cusum (a cumulative sum of evidence for the shift given by --shift) or\newma (a weighted moving average of the rates); give it twice for both", func(s string) error {
		switch s {
		case "cusum":
			m.cusum = true
		case "ewma":
			m.ewma = true
		default:
			return fmt.Errorf("%q is not a monitor (want cusum or ewma)", s)
		}
		return nil
	})
	number := func(name string, dst *float64, seen *bool) func(string) error {
		return func(s string) error {
			v, err := strconv.ParseFloat(s, 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%q is not a number", s)
			}
			*dst = v
			if seen != nil {
				*seen = true
			}
			m.set[name] = s
			return nil
		}
	}
	fs.Func("shift", "for --monitor cusum: the rate the CUSUM should catch, `P1`, in the chart's units (a fraction\nfor p and np, defects per unit for u, defects per lot for c); above the centre it\nwatches for a rise, below it for a fall", number("shift", &m.shift, &m.shiftSet))
	fs.Func("arl0", "for --monitor cusum: how many lots on average between false alarms while the rate\nstays at the centre, `A`; the decision interval h is set to reach it (default 370,\nabout that of a 3-sigma chart). For --monitor ewma, when given and --width is not,\nthe EWMA's width is set to reach it too", number("arl0", &m.arl0, nil))
	fs.Func("decision-interval", "for --monitor cusum: the decision interval `H` itself (the CUSUM signals when its\nsum reaches H) instead of one designed from --arl0; the run lengths are still reported", number("decision-interval", &m.h, &m.hSet))
	fs.Func("lambda", "for --monitor ewma: the weight `L` of the newest lot in the average, above 0 and at\nmost 1 (default 0.2); smaller weights remember more lots and see smaller shifts", number("lambda", &m.lambda, nil))
	fs.Func("width", "for --monitor ewma: the width `W` of the EWMA's limits in its standard deviations\n(default 3); the output gives the mean number of lots between false alarms that\nλ and W make at the centre", number("width", &m.width, nil))
}

// problems checks the monitor flags that need no data.
func (m *monitorOptions) problems() []string {
	var out []string
	bad := func(name, why string) {
		out = append(out, fmt.Sprintf("--%s: %s %s", name, m.set[name], why))
	}
	for _, name := range []string{"shift", "decision-interval"} {
		if _, ok := m.set[name]; ok && !m.cusum {
			bad(name, "is for --monitor cusum, which is not asked for")
		}
	}
	if _, ok := m.set["arl0"]; ok && !m.cusum && !m.ewma {
		bad("arl0", "is for --monitor cusum or ewma, neither of which is asked for")
	}
	for _, name := range []string{"lambda", "width"} {
		if _, ok := m.set[name]; ok && !m.ewma {
			bad(name, "is for --monitor ewma, which is not asked for")
		}
	}
	if m.cusum {
		if !m.shiftSet {
			out = append(out, "--monitor cusum: needs --shift P1, the rate to catch")
		}
		if m.hSet && !(m.h > 0) {
			bad("decision-interval", "is not a number above 0")
		}
		if m.hSet && m.set["arl0"] != "" {
			out = append(out, "--arl0 and --decision-interval both set the decision interval; give one of them")
		}
	}
	if _, ok := m.set["arl0"]; ok && !(m.arl0 >= 1) {
		bad("arl0", "is not a number of lots of 1 or more")
	}
	if m.ewma {
		if m.designsWidth() && m.set["width"] != "" {
			out = append(out, "--arl0 and --width both set the EWMA's width; give one of them")
		}
		if !(m.lambda > 0 && m.lambda <= 1) {
			bad("lambda", "is not a weight above 0 and at most 1")
		}
		if !(m.width > 0) {
			bad("width", "is not a width above 0")
		}
	}
	return out
}

// designsWidth reports whether the EWMA's width is to be designed for
// --arl0 (given, and --width not).
func (m *monitorOptions) designsWidth() bool {
	_, arl0 := m.set["arl0"]
	return m.ewma && arl0
}

// monitorResult holds what the monitors found, ready to print.
type monitorResult struct {
	cusum   *spc.CUSUM
	target  float64
	cPoints []spc.CUSUMPoint
	cSigs   []spc.CUSUMSignal
	ewma    *spc.EWMA
	ePoints []spc.EWMAPoint
	// ewmaTarget is the in-control ARL the EWMA's width was designed
	// for, 0 when the width was given.
	ewmaTarget float64
}

// run designs and applies the monitors to the lots, with centre p0 (the
// chart's) and the run lengths over the lot sizes of sizes. The error is
// one line naming the option and value.
func (m *monitorOptions) run(ch spc.Chart, lots []spc.Lot, p0 float64, sizes []int64) (*monitorResult, error) {
	r := &monitorResult{}
	if m.cusum {
		if err := spc.CheckCUSUM(ch, p0, m.shift); err != nil {
			if fe, ok := err.(*spc.FieldError); ok && fe.Field == "p0" {
				return nil, fmt.Errorf("--monitor cusum: the centre p0 = %v %s", p0, fe.Reason)
			}
			if ch.CountsUnits() && !(m.shift > 0 && m.shift < 1) {
				return nil, fmt.Errorf("--shift: %s is not a fraction strictly between 0 and 1", m.set["shift"])
			}
			if !(m.shift > 0) {
				return nil, fmt.Errorf("--shift: %s is not a rate above 0", m.set["shift"])
			}
			return nil, fmt.Errorf("--shift: %s equals the centre p0 = %v; the shift to catch must differ from it", m.set["shift"], p0)
		}
		h := 0.0
		if m.hSet {
			h = m.h
		} else {
			r.target = m.arl0
		}
		c, err := spc.DesignCUSUM(ch, p0, m.shift, sizes, m.arl0, h)
		if err != nil {
			return nil, fmt.Errorf("--monitor cusum: %v", err)
		}
		r.cusum = c
		r.cPoints, r.cSigs = c.Run(lots)
	}
	if m.ewma {
		mon := spc.Monitors{EWMALambda: m.lambda, EWMAWidth: m.width}
		if m.designsWidth() {
			mon.EWMAWidth, mon.EWMAARL0 = 0, m.arl0
			r.ewmaTarget = m.arl0
		}
		e, err := mon.EWMA(ch, p0, sizes)
		if err != nil {
			return nil, fmt.Errorf("--monitor ewma: %v", err)
		}
		r.ewma = e
		r.ePoints = e.Run(lots)
	}
	return r, nil
}

// analyzeOut is the JSON of `lotwatch analyze`: the chart, and the
// monitors when asked for.
type analyzeOut struct {
	*chartjson.Chart
	CUSUM *chartjson.CUSUM `json:"cusum,omitempty"`
	EWMA  *chartjson.EWMA  `json:"ewma,omitempty"`
}

// json fills in the monitors' part of the JSON.
func (r *monitorResult) json(out *analyzeOut) {
	if r == nil {
		return
	}
	if c := r.cusum; c != nil {
		out.CUSUM = chartjson.CUSUMOf(c, r.cPoints, r.cSigs)
		if r.target > 0 {
			t := chartjson.Num(r.target)
			out.CUSUM.ARL0Target = &t
		}
	}
	if e := r.ewma; e != nil {
		out.EWMA = chartjson.EWMAOf(*e, r.ePoints)
		if r.ewmaTarget > 0 {
			t := chartjson.Num(r.ewmaTarget)
			out.EWMA.ARL0Target = &t
		}
	}
}

// text writes the monitors for a person to read.
func (r *monitorResult) text(w io.Writer, ch spc.Chart) {
	if r == nil {
		return
	}
	f := func(v float64) string { return fmtStat(ch, v) }
	if ch == spc.ChartNP {
		f = func(v float64) string { return strconv.FormatFloat(v, 'f', 4, 64) }
	}
	if c := r.cusum; c != nil {
		dir := "rise"
		if c.P1 < c.P0 {
			dir = "fall"
		}
		fmt.Fprintf(w, "\nCUSUM watching for a %s from %s to %s: decision interval h %.2f", dir, fmtRate(ch, c.P0), fmtRate(ch, c.P1), c.H)
		if r.target > 0 {
			fmt.Fprintf(w, " (the smallest with an in-control ARL of at least %g lots)", r.target)
		}
		fmt.Fprintf(w, "\n  on average %.1f lots between false alarms at the centre, %.1f lots to signal once the rate is %s\n\n", c.ARL0, c.ARL1, fmtRate(ch, c.P1))
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
		fmt.Fprintln(tw, "lot\tS\t \t")
		for _, p := range r.cPoints {
			mark := ""
			if p.Signal {
				mark = "SIGNAL"
			}
			fmt.Fprintf(tw, "%s\t%.3f\t%s\t\n", p.Lot, p.S, mark)
		}
		tw.Flush()
		fmt.Fprintf(w, "\n%d CUSUM signals\n", len(r.cSigs))
		for _, s := range r.cSigs {
			fmt.Fprintf(w, "  at lot %s: the change probably began at lot %s\n", s.LotID, s.StartID)
		}
	}
	if e := r.ewma; e != nil {
		fmt.Fprintf(w, "\nEWMA of the rates, weight %g, limits at %g standard deviations, centre %s", e.Lambda, e.L, fmtRate(ch, e.P0))
		if r.ewmaTarget > 0 {
			fmt.Fprintf(w, " (the narrowest with an in-control ARL of at least %g lots)", r.ewmaTarget)
		}
		fmt.Fprintln(w)
		fmt.Fprintf(w, "  on average %.1f lots between false alarms at the centre (limits at their steady width, lot sizes as in these lots)\n\n", e.ARL0)
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
		fmt.Fprintln(tw, "lot\tLCL\tEWMA\tUCL\t \t")
		n := 0
		for _, p := range r.ePoints {
			mark := ""
			if p.Signal {
				mark = "SIGNAL"
				n++
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t\n", p.Lot, f(p.LCL), f(p.Z), f(p.UCL), mark)
		}
		tw.Flush()
		fmt.Fprintf(w, "\n%d of %d lots with the EWMA beyond its limits\n", n, len(r.ePoints))
	}
}

// fmtRate formats a centre or shift: a fraction for p and np, else as
// the chart's statistic.
func fmtRate(ch spc.Chart, v float64) string {
	if ch.CountsUnits() {
		return strconv.FormatFloat(v, 'f', 4, 64)
	}
	return fmtStat(ch, v)
}

// csvHeader and csvRow are the monitors' columns of the CSV output,
// appended after the chart's when a monitor is asked for.
func (r *monitorResult) csvHeader() []string {
	var h []string
	if r != nil && r.cusum != nil {
		h = append(h, "cusum_s", "cusum_signal")
	}
	if r != nil && r.ewma != nil {
		h = append(h, "ewma", "ewma_lcl", "ewma_ucl", "ewma_signal")
	}
	return h
}

func (r *monitorResult) csvRow(i int) []string {
	var row []string
	f := func(v float64) string { return strconv.FormatFloat(v, 'g', 10, 64) }
	if r != nil && r.cusum != nil {
		p := r.cPoints[i]
		row = append(row, f(p.S), strconv.FormatBool(p.Signal))
	}
	if r != nil && r.ewma != nil {
		p := r.ePoints[i]
		row = append(row, f(p.Z), f(p.LCL), f(p.UCL), strconv.FormatBool(p.Signal))
	}
	return row
}

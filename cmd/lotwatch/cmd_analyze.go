package main

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
	"text/tabwriter"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
	"lotwatch/store/lotcsv"
)

func init() {
	register(command{
		name:    "analyze",
		summary: "control chart, run-rule signals and warnings for a CSV file of lots",
		run:     runAnalyze,
	})
}

// analyzeOptions are the parsed flags of `lotwatch analyze`.
type analyzeOptions struct {
	chart        string
	limits       string
	sigma        float64
	rules        string
	exclude      string
	center       float64
	centerSet    bool
	format       string
	standardized bool
	baseline     int
	sheet        string
	db, process  string
	monitors     monitorOptions
}

func runAnalyze(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	var o analyzeOptions
	fs := cliFlags("analyze")
	fs.StringVar(&o.chart, "chart", "", "the chart: `p` (fraction nonconforming), np (number nonconforming; meant for lots of\none size, and lots of other sizes get their own limits and a warning),\nu (defects per unit) or c (defects per lot, meant for one size likewise).\nDefault: p when the file has a defective column, u when it has defects")
	fs.StringVar(&o.limits, "limits", "sigma", "how the limits are computed: `sigma` (centre ± K standard errors of each lot),\nexact (binomial or Poisson quantiles of each lot, for small n·p̄),\nor laney (Laney p′/u′, widened by the lot-to-lot variation σ_z)")
	fs.Float64Var(&o.sigma, "sigma", 3, "the width of the limits in standard errors, `K`; exact limits keep the false alarms\nof each tail at or below half the two-sided probability of K (0.00135 for K = 3),\nan upper bound: counts are whole numbers, so it is usually less, and it is 0 in the\nlower tail when even a count of 0 is not rare enough (small n·p̄)")
	fs.StringVar(&o.rules, "rules", "we", "run rules on the standardized values: `we` (the four Western Electric rules),\nnelson (Nelson's eight tests), none, or a list such as we1,we4,nelson3")
	fs.StringVar(&o.exclude, "exclude", "", "lots left out of the centre estimate (an assignable cause was found),\nstill plotted and judged: `LOT,LOT,...`")
	fs.Func("center", "a known standard centre `P` (fraction for p and np, defects per unit for u,\ndefects per lot for c) instead of the centre estimated from the file", func(s string) error {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || v < 0 {
			return fmt.Errorf("%q is not a number of 0 or more", s)
		}
		o.center, o.centerSet = v, true
		return nil
	})
	fs.IntVar(&o.baseline, "baseline", 0, "estimate the centre (and σ_z) from the first `N` lots only, then judge every lot\nagainst those limits as if frozen; 0 uses all lots (trial limits)")
	fs.StringVar(&o.format, "format", "text", "the output: `text`, json or csv")
	fs.StringVar(&o.sheet, "sheet", "", "the worksheet of an XLSX file, `NAME` (default the first)")
	fs.StringVar(&o.process, "process", "", "read the file as the lot files of the process `NAME` (with --db): its column map,\ndate order, time zone and categories, and its chart unless --chart is given;\nan unknown column is then refused, as by import")
	fs.StringVar(&o.db, "db", "", "the lotwatch database `FILE` that holds --process")
	fs.BoolVar(&o.standardized, "standardized", false, "plot the standardized values z with limits in z units")
	o.monitors.addFlags(fs)
	help := cliHelp(fs, `Usage: lotwatch analyze [options] FILE.csv

Reads inspected lots from FILE.csv (separated by commas, semicolons or
tabs) or from an XLSX workbook (- reads standard input) and prints the
control chart: the centre line, each lot's limits (they differ lot by lot when
the number inspected varies), its standardized value z, the lots outside the
limits, the run-rule signals, and warnings about the data (poor normal
approximation, overdispersion, too few lots for trial limits).

The header names at least lot, inspected, and defective (p, np) or defects
(u, c), in any case; other columns are ignored (with --process, read
through the process's column map, and refused unless they are categories).

Options:
`, "\nExit status: 0 when the analysis ran (whatever it found), 2 for bad input.\n\n"+caution)
	pos, code, done := cliParse(fs, args, help, stdout, stderr)
	if done {
		return code
	}
	if len(pos) != 1 {
		fmt.Fprintln(stderr, "lotwatch analyze: want one FILE.csv (or - for standard input); run lotwatch analyze -h")
		return exitUsage
	}
	file := pos[0]

	cfg, problems := o.config()
	problems = append(problems, o.monitors.problems()...)
	if len(problems) > 0 {
		for _, p := range problems {
			fmt.Fprintln(stderr, "lotwatch analyze: "+p)
		}
		return exitUsage
	}

	var in io.Reader = stdin
	if file != "-" {
		f, err := os.Open(file)
		if err != nil {
			fmt.Fprintf(stderr, "lotwatch analyze: %v\n", err)
			return exitUsage
		}
		defer f.Close()
		in = f
	}
	ropt, code, ok := o.readOptions(stderr, cfg.Chart)
	if !ok {
		return code
	}
	lots, chart, bad := readAnalyzeLots(file, in, ropt)
	if len(bad) > 0 {
		for _, p := range bad {
			fmt.Fprintln(stderr, p)
		}
		return exitUsage
	}
	cfg.Chart = chart
	if cfg.Exclude != nil {
		known := make(map[string]bool, len(lots))
		for _, l := range lots {
			known[l.Code] = true
		}
		var missing []string
		for id := range cfg.Exclude {
			if !known[id] {
				missing = append(missing, fmt.Sprintf("%s: --exclude: lot %q is not in the file", file, id))
			}
		}
		if len(missing) > 0 {
			for _, m := range missing {
				fmt.Fprintln(stderr, m)
			}
			return exitUsage
		}
	}
	if o.centerSet {
		if err := checkStandardCenter(chart, o.center); err != nil {
			fmt.Fprintf(stderr, "lotwatch analyze: --center: %v\n", err)
			return exitUsage
		}
	}

	if o.baseline > 0 {
		if o.centerSet {
			fmt.Fprintln(stderr, "lotwatch analyze: --baseline and --center both set the centre; give one of them")
			return exitUsage
		}
		if o.baseline > len(lots) {
			fmt.Fprintf(stderr, "%s: --baseline: %d lots asked for, the file has %d\n", file, o.baseline, len(lots))
			return exitUsage
		}
		base, err := spc.Analyze(lots[:o.baseline], cfg)
		if err != nil {
			fmt.Fprintf(stderr, "%s: --baseline: %v\n", file, err)
			return exitUsage
		}
		cfg.Standard = &spc.Standard{Center: base.Rate, SigmaZ: base.SigmaZ}
		cfg.Exclude = nil
	}
	a, err := spc.Analyze(lots, cfg)
	if err != nil {
		fmt.Fprintf(stderr, "%s: %v\n", file, err)
		return exitUsage
	}
	var mon *monitorResult
	if o.monitors.cusum || o.monitors.ewma {
		// The monitors watch for a change from the chart's centre; their
		// run lengths are for lot sizes like the baseline's.
		sizes := make([]int64, 0, len(lots))
		base := lots
		if o.baseline > 0 {
			base = lots[:o.baseline]
		}
		for _, l := range base {
			sizes = append(sizes, l.Inspected)
		}
		if mon, err = o.monitors.run(chart, lots, a.Rate, sizes); err != nil {
			fmt.Fprintf(stderr, "lotwatch analyze: %v\n", err)
			return exitUsage
		}
	}
	switch o.format {
	case "json":
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		out := analyzeOut{Chart: chartjson.Analysis(a)}
		mon.json(&out)
		if err := enc.Encode(out); err != nil {
			fmt.Fprintf(stderr, "lotwatch analyze: %v\n", err)
			return exitFail
		}
	case "csv":
		writeAnalysisCSV(stdout, a, mon)
	default:
		writeAnalysisText(stdout, file, a, o.baseline, mon)
	}
	return exitOK
}

// config turns the flags into an spc.Config; the chart may still be
// empty (taken from the file's count column).
func (o analyzeOptions) config() (spc.Config, []string) {
	var cfg spc.Config
	var problems []string
	if o.chart != "" {
		c, err := spc.ParseChart(o.chart)
		if err != nil {
			problems = append(problems, "--chart: "+err.Error())
		}
		cfg.Chart = c
	}
	m, err := spc.ParseMethod(o.limits)
	if err != nil {
		problems = append(problems, "--limits: "+err.Error())
	}
	cfg.Method = m
	if !(o.sigma > 0) || o.sigma > 10 {
		problems = append(problems, fmt.Sprintf("--sigma: %v is not a width between 0 and 10 standard errors", o.sigma))
	}
	cfg.K = o.sigma
	r, err := spc.ParseRules(o.rules)
	if err != nil {
		problems = append(problems, "--rules: "+err.Error())
	}
	cfg.Rules = r
	switch o.format {
	case "text", "json", "csv":
	default:
		problems = append(problems, fmt.Sprintf("--format: unknown format %q (want text, json or csv)", o.format))
	}
	if o.baseline < 0 {
		problems = append(problems, fmt.Sprintf("--baseline: %d is not a number of lots (0 for all lots)", o.baseline))
	}
	if o.exclude != "" {
		cfg.Exclude = map[string]bool{}
		for _, id := range strings.Split(o.exclude, ",") {
			if id = strings.TrimSpace(id); id != "" {
				cfg.Exclude[id] = true
			}
		}
	}
	if o.centerSet {
		cfg.Standard = &spc.Standard{Center: o.center}
	}
	cfg.Standardized = o.standardized
	return cfg, problems
}

// checkStandardCenter checks a known centre for the chart.
func checkStandardCenter(chart spc.Chart, v float64) error {
	if chart.CountsUnits() {
		if !(v > 0 && v < 1) {
			return fmt.Errorf("%v is not a fraction nonconforming between 0 and 1", v)
		}
		return nil
	}
	if !(v > 0) {
		return fmt.Errorf("%v is not a defect rate above 0", v)
	}
	return nil
}

// readOptions are the options of reading the file: those of --process
// (its column map, date order, zone, categories and chart), or else any
// column beyond the lot's skipped (analyze reads no categories).
func (o analyzeOptions) readOptions(stderr io.Writer, chart spc.Chart) (lotcsv.Options, int, bool) {
	if o.process == "" {
		return lotcsv.Options{Chart: chart, Sheet: o.sheet, IgnoreUnknown: true}, 0, true
	}
	if o.db == "" {
		return lotcsv.Options{}, cliProblems(stderr, "analyze", "--process needs --db FILE, the database that holds it"), false
	}
	if cliNoFile(o.db) {
		return lotcsv.Options{}, cliProblems(stderr, "analyze", fmt.Sprintf("--db %s: no such database file", o.db)), false
	}
	db, code, ok := cliOpen(stderr, "analyze", o.db)
	if !ok {
		return lotcsv.Options{}, code, false
	}
	defer db.Close()
	p, err := db.ProcessByName(context.Background(), o.process)
	if err != nil {
		return lotcsv.Options{}, cliStoreError(stderr, "analyze", "", err), false
	}
	opt := p.ReadOptions()
	if chart != "" {
		opt.Chart = chart
	}
	opt.Sheet = o.sheet
	return opt, 0, true
}

// readAnalyzeLots reads and checks every lot of a file. It returns one
// line per problem, naming the file, line (or SHEET!ROW), column and value.
func readAnalyzeLots(file string, r io.Reader, opt lotcsv.Options) ([]spc.Lot, spc.Chart, []string) {
	var bad []string
	say := func(p lotcsv.Problem) {
		if p.Sheet != "" {
			bad = append(bad, file+":"+p.String())
			return
		}
		bad = append(bad, file+": "+p.String())
	}
	chart := opt.Chart
	rd, err := lotcsv.NewReader(r, opt)
	if err != nil {
		var ps lotcsv.Problems
		if errors.As(err, &ps) {
			for _, p := range ps {
				say(p)
			}
		} else {
			bad = append(bad, fmt.Sprintf("%s: %v", file, err))
		}
		return nil, chart, bad
	}
	if chart == "" {
		chart = spc.ChartP
		if rd.CountColumn() == lotcsv.ColDefects {
			chart = spc.ChartU
		}
	}
	var lots []spc.Lot
	seen := map[string]int{}
	for {
		row, err := rd.Next()
		if err == io.EOF {
			break
		}
		var ps lotcsv.Problems
		if errors.As(err, &ps) {
			continue // kept by the reader, listed below
		} else if err != nil {
			bad = append(bad, fmt.Sprintf("%s: %v", file, err))
			break
		}
		if first, dup := seen[row.Lot]; dup {
			say(lotcsv.Problem{Line: row.Line, Sheet: rd.Sheet(), Field: lotcsv.ColLot, Value: row.Lot, Reason: fmt.Sprintf("appears twice (first on line %d)", first)})
			continue
		}
		seen[row.Lot] = row.Line
		if err := spc.CheckLot(chart, row.Inspected, row.Count); err != nil {
			var fe *spc.FieldError
			if errors.As(err, &fe) {
				field := fe.Field
				if field != lotcsv.ColInspected {
					field = rd.CountColumn()
				}
				say(lotcsv.Problem{Line: row.Line, Sheet: rd.Sheet(), Field: field, Value: fe.Value, Reason: fe.Reason})
			} else {
				say(lotcsv.Problem{Line: row.Line, Sheet: rd.Sheet(), Reason: err.Error()})
			}
			continue
		}
		lots = append(lots, spc.Lot{Code: row.Lot, Inspected: row.Inspected, Count: row.Count})
	}
	for _, p := range rd.Problems() {
		say(p)
	}
	if n := rd.MoreProblems(); n > 0 {
		bad = append(bad, fmt.Sprintf("%s: and %d more problems", file, n))
	}
	if len(bad) == 0 && len(lots) == 0 {
		bad = append(bad, file+": line 1: the file has a header but no lots")
	}
	return lots, chart, bad
}

// writeAnalysisCSV writes one row per lot.
func writeAnalysisCSV(w io.Writer, a *spc.Analysis, mon *monitorResult) {
	cw := csv.NewWriter(w)
	cw.Write(append([]string{"lot", "inspected", "count", "value", "center", "lcl", "ucl", "z", "out_of_limits", "signals", "excluded", "tail_p"}, mon.csvHeader()...))
	f := func(v float64) string { return strconv.FormatFloat(v, 'g', 10, 64) }
	for i, p := range a.Points {
		cw.Write(append([]string{lotcsv.Neutralise(p.Lot.Code), strconv.FormatInt(p.Lot.Inspected, 10), strconv.FormatInt(p.Lot.Count, 10),
			f(p.Value), f(p.Center), f(p.LCL), f(p.UCL), f(p.Z), strconv.FormatBool(p.OutOfLimits()),
			ruleList(p.Rules), strconv.FormatBool(p.Excluded), f(p.TailP)}, mon.csvRow(i)...))
	}
	cw.Flush()
}

func ruleList(rs spc.RuleSet) string {
	var names []string
	for _, r := range rs.Rules() {
		names = append(names, r.String())
	}
	return strings.Join(names, " ")
}

// writeAnalysisText writes the analysis for a person to read.
func writeAnalysisText(w io.Writer, file string, a *spc.Analysis, baseline int, mon *monitorResult) {
	unit := map[spc.Chart]string{spc.ChartP: "fraction nonconforming", spc.ChartNP: "number nonconforming",
		spc.ChartU: "defects per unit", spc.ChartC: "defects per lot"}[a.Chart]
	fmt.Fprintf(w, "%s chart (%s) of %s, %s limits at %g sigma\n", a.Chart, unit, file, a.Method, a.K)
	switch {
	case baseline > 0:
		fmt.Fprintf(w, "centre line %s (from the first %d lots; all %d judged against it)", fmtStat(a.Chart, a.Center), baseline, len(a.Points))
	case a.Baseline == 0:
		fmt.Fprintf(w, "centre line %s (a known standard; %d lots judged)", fmtStat(a.Chart, a.Center), len(a.Points))
	default:
		fmt.Fprintf(w, "centre line %s (trial limits estimated from %d of %d lots)", fmtStat(a.Chart, a.Center), a.Baseline, len(a.Points))
	}
	if a.Method == spc.MethodLaney {
		fmt.Fprintf(w, ", sigma_z %.3f", a.SigmaZ)
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w)

	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "lot\tinspected\tcount\tvalue\tLCL\tcentre\tUCL\tz\t \t")
	for _, p := range a.Points {
		mark := ""
		switch {
		case p.Above:
			mark = "ABOVE UCL"
		case p.Below:
			mark = "BELOW LCL"
		}
		if rs := ruleList(p.Rules); rs != "" {
			mark = strings.TrimSpace(mark + " " + rs)
		}
		if p.Excluded {
			mark = strings.TrimSpace(mark + " (excluded)")
		}
		fmt.Fprintf(tw, "%s\t%d\t%d\t%s\t%s\t%s\t%s\t%.2f\t%s\t\n", p.Lot.Code, p.Lot.Inspected, p.Lot.Count,
			fmtStat(a.Chart, p.Value), fmtStat(a.Chart, p.LCL), fmtStat(a.Chart, p.Center), fmtStat(a.Chart, p.UCL), p.Z, mark)
	}
	tw.Flush()

	out := 0
	for _, p := range a.Points {
		if p.OutOfLimits() {
			out++
		}
	}
	fmt.Fprintf(w, "\n%d of %d lots outside the limits; %d run-rule signals\n", out, len(a.Points), len(a.Signals))
	for _, s := range a.Signals {
		span := s.Lots[0]
		if len(s.Lots) > 1 {
			span += " … " + s.Lots[len(s.Lots)-1]
		}
		fmt.Fprintf(w, "  %-8s %s (%s)\n", s.Rule, s.Description, span)
	}
	d := a.Dispersion
	fmt.Fprintf(w, "\ndispersion: chi-square %.1f on %d df (ratio %.2f, p = %.3g), sigma_z %.2f\n", d.ChiSquare, d.DF, d.Ratio, d.PValue, d.SigmaZ)
	if d.Advice != "" {
		fmt.Fprintf(w, "  %s\n", d.Advice)
	}
	if len(a.Warnings) > 0 {
		fmt.Fprintln(w, "\nwarnings:")
		for _, wr := range a.Warnings {
			fmt.Fprintf(w, "  - %s\n", wr.Message)
		}
	}
	mon.text(w, a.Chart)
	fmt.Fprint(w, "\n"+caution)
}

// fmtStat formats a plotted value for the chart: fractions with four
// decimals, counts and rates with two or three.
func fmtStat(c spc.Chart, v float64) string {
	switch c {
	case spc.ChartP:
		return strconv.FormatFloat(v, 'f', 4, 64)
	case spc.ChartU:
		return strconv.FormatFloat(v, 'f', 3, 64)
	default:
		return strconv.FormatFloat(v, 'f', 2, 64)
	}
}

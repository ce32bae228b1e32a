package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/review"
)

func init() {
	register(command{
		name:    "plan",
		summary: "plan the lot size of a p/np chart: limits as counts and average run lengths",
		run:     runPlan,
	})
}

const planHelp = `Usage: lotwatch plan --p0 P [--p1 P] [--n N] [--arl1 T] [--sigma K] [options]
       lotwatch plan --process NAME --db FILE [--p1 P] [--n N] [--arl1 T] [options]

Shows how a p or np chart with K-sigma limits behaves for lots of N units:
how many nonconforming units make a lot signal, and the average number of
lots until a signal (the average run length, ARL) when the process runs at
its usual fraction nonconforming P0 (false alarms) and when it has shifted
to P1 (detection). All figures use the exact binomial distribution.

With --n it evaluates that lot size. Without --n, give --p1 and --arl1: it
finds the smallest lot size whose ARL at P1 is at most the target.

Options:
  --p0 P      usual (in-control) fraction nonconforming, between 0 and 1; required
              unless --process is given
  --process NAME  take P0 from this p or np process: the centre of its latest
              frozen limit set, else the trial centre of all its lots
  --db FILE   the lotwatch database holding --process (a file or a postgres:// URL)
  --p1 P      shifted fraction nonconforming to detect, between 0 and 1, not P0
  --n N       units per lot, a whole number greater than 0
  --arl1 T    target: a shift to P1 should signal within T lots on average
              (a number, 1 or more; needs --p1)
  --sigma K   width of the limits in standard deviations (default 3)
  --min-arl0 A  when searching, also require at least A lots on average between
              false alarms at P0 (default 100; small lots can meet the ARL1
              target only by signalling often in control too). A floor below
              100 is allowed, with a warning on standard error
  --max-n N   largest lot size tried when searching (default 100000,
              at most 10000000)
  --format F  text (default) or json; in json, lcl_count and lcl are null
              when no lot can signal low at the lot size
  -h          show this help

Because counts are whole numbers, the ARL does not fall steadily as lots grow:
a lot size somewhat larger than the one found may miss the target again.

Exit status: 0 when done, 1 when no lot size up to --max-n meets the target,
2 for bad input (nothing is printed on standard output then; each problem is
named on standard error).
`

// planMaxN bounds the --max-n search, which evaluates every lot size up to
// it (about a microsecond each), so that a search ends within seconds.
const planMaxN = 10_000_000

type planJSON struct {
	N        int64 `json:"n"`
	UCLCount int64 `json:"ucl_count"`
	// LCLCount and LCL are null when no lot can signal low (the lower
	// limit is at or below zero): a count of −1 or a negative fraction is
	// no limit a lot could fall below.
	LCLCount        *int64   `json:"lcl_count"`
	ARL0            *float64 `json:"arl0"` // null when no lot can signal
	ARL1            *float64 `json:"arl1"` // null without --p1, or when no lot can signal
	MinNPositiveLCL int64    `json:"min_n_positive_lcl"`
	P0              float64  `json:"p0"`
	P1              *float64 `json:"p1"`
	Sigma           float64  `json:"sigma"`
	UCL             float64  `json:"ucl"`
	LCL             *float64 `json:"lcl"`
	TargetARL1      *float64 `json:"arl1_target,omitempty"`
	// CUSUM is the CUSUM for the same shift at the same ARL0, with lots of
	// N units; Sooner says which catches the shift sooner on average
	// ("cusum", "chart" or "same"). Both only with --p1.
	CUSUM    *planCUSUMJSON `json:"cusum,omitempty"`
	Sooner   string         `json:"sooner,omitempty"`
	P0Source string         `json:"p0_source,omitempty"`
}

func finiteOrNil(x float64) *float64 {
	if math.IsInf(x, 0) || math.IsNaN(x) {
		return nil
	}
	return &x
}

func runPlan(args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("plan", flag.ContinueOnError)
	p0s := fs.String("p0", "", "")
	p1s := fs.String("p1", "", "")
	ns := fs.String("n", "", "")
	arl1s := fs.String("arl1", "", "")
	sigmas := fs.String("sigma", "3", "")
	maxNs := fs.String("max-n", "100000", "")
	minARL0s := fs.String("min-arl0", strconv.Itoa(spc.DefaultMinARL0), "")
	format := fs.String("format", "text", "")
	procName := fs.String("process", "", "")
	dbPath := fs.String("db", "", "")
	pos, code := statsParse(fs, args, planHelp, stdout, stderr)
	if code >= 0 {
		return code
	}
	u := &statsUsage{cmd: "plan"}
	asJSON := u.format(*format)
	fraction := func(name, s string) float64 {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || !(v > 0 && v < 1) {
			u.addf("--%s %q must be a fraction between 0 and 1, such as 0.02", name, s)
			return math.NaN()
		}
		return v
	}
	var p0, p1, target float64 = math.NaN(), math.NaN(), math.NaN()
	var n int64
	var p0Source string
	if *procName != "" || *dbPath != "" {
		p0, p0Source = planProcessCentre(u, *procName, *dbPath, *p0s)
	} else if *p0s == "" {
		u.addf("--p0 is required: the usual fraction nonconforming, such as 0.02")
	} else {
		p0 = fraction("p0", *p0s)
	}
	if *p1s != "" {
		p1 = fraction("p1", *p1s)
		if p1 == p0 {
			u.addf("--p1 %q must differ from --p0", *p1s)
		}
	}
	if *ns != "" {
		n = u.count("--n", *ns, 1)
	}
	if *arl1s != "" {
		v, err := strconv.ParseFloat(*arl1s, 64)
		if err != nil || !(v >= 1) || math.IsInf(v, 1) {
			u.addf("--arl1 %q must be a number of lots, 1 or more", *arl1s)
		} else {
			target = v
		}
		if *p1s == "" {
			u.addf("--arl1 %q needs --p1, the shifted fraction to detect", *arl1s)
		}
	}
	k, err := strconv.ParseFloat(*sigmas, 64)
	if err != nil || !(k > 0) || math.IsInf(k, 1) {
		u.addf("--sigma %q must be a number greater than 0, such as 3", *sigmas)
	}
	maxN := u.count("--max-n", *maxNs, 1)
	if maxN > planMaxN {
		u.addf("--max-n %q must be at most %d (the search tries every lot size up to it)", *maxNs, planMaxN)
	}
	if *ns == "" && (*p1s == "" || *arl1s == "") {
		u.addf("give --n N to evaluate a lot size, or --p1 and --arl1 to find the smallest one")
	}
	if len(pos) > 0 {
		u.addf("unexpected argument %q: plan takes options only", pos[0])
	}
	if c := u.report(stderr); c >= 0 {
		return c
	}

	searched := *ns == ""
	if searched {
		minARL0, perr := strconv.ParseFloat(*minARL0s, 64)
		if perr != nil || !(minARL0 >= 0) || math.IsInf(minARL0, 1) {
			fmt.Fprintf(stderr, "lotwatch plan: --min-arl0 %q must be a number of lots, 0 or more\n", *minARL0s)
			return exitUsage
		}
		if minARL0 < spc.DefaultMinARL0 {
			fmt.Fprintf(stderr, "lotwatch plan: warning: --min-arl0 %s is below the default floor of %d lots between false alarms; the lot size found may raise false alarms often enough that people stop trusting the chart\n",
				*minARL0s, spc.DefaultMinARL0)
		}
		n, err = spc.SmallestNWithARL0(p0, p1, k, target, minARL0, maxN)
		if errors.Is(err, spc.ErrNoPlan) {
			fmt.Fprintf(stderr, "lotwatch plan: no lot size up to %d units detects a shift to %s within %s lots on average with at least %s lots between false alarms; try a larger --max-n\n",
				maxN, *p1s, *arl1s, *minARL0s)
			return exitFail
		}
		if err != nil {
			fmt.Fprintf(stderr, "lotwatch plan: %v\n", err)
			return exitUsage
		}
	}
	pl := spc.PlanLimits(p0, n, k)
	var cusum *spc.CUSUM
	if *p1s != "" {
		pl = pl.WithShift(p1)
		cusum = planCUSUM(p0, p1, n, pl.ARL0)
	}

	if asJSON {
		out := planJSON{
			N: pl.N, UCLCount: pl.UCLCount,
			ARL0: finiteOrNil(pl.ARL0), MinNPositiveLCL: pl.MinNPositiveLCL,
			P0: p0, Sigma: k, UCL: pl.UCL, P0Source: p0Source,
		}
		if pl.LCLCount > 0 {
			out.LCLCount, out.LCL = &pl.LCLCount, &pl.LCL
		}
		if *p1s != "" {
			out.P1, out.ARL1 = &p1, finiteOrNil(pl.ARL1)
		}
		if *arl1s != "" {
			out.TargetARL1 = &target
		}
		if cusum != nil {
			out.CUSUM = &planCUSUMJSON{H: cusum.H, ARL0: cusum.ARL0, ARL1: cusum.ARL1}
			out.Sooner = sooner(pl.ARL1, cusum.ARL1)
		}
		return statsJSON(stdout, out)
	}

	var b strings.Builder
	if p0Source != "" {
		fmt.Fprintf(&b, "Usual fraction nonconforming of process %q: %s, the %s.\n\n", *procName, statsRate(p0), p0Source)
	}
	if searched {
		fmt.Fprintf(&b, "Smallest lot size that detects a shift to %s within %s lots on average: %d units.\n\n",
			statsRate(p1), strconv.FormatFloat(target, 'g', -1, 64), n)
	}
	fmt.Fprintf(&b, "Lots of %d units, usual fraction nonconforming %s, limits at %s sigma:\n",
		n, statsRate(p0), strconv.FormatFloat(k, 'g', -1, 64))
	if pl.UCLCount >= n {
		fmt.Fprintf(&b, "  upper limit %s: no lot can signal high at this size.\n", statsRate(pl.UCL))
	} else {
		fmt.Fprintf(&b, "  upper limit %s: a lot signals when it has more than %d nonconforming units.\n", statsRate(pl.UCL), pl.UCLCount)
	}
	if pl.LCLCount < 1 {
		fmt.Fprintf(&b, "  no lower limit: no lot can signal low at this size; that needs lots of at least %d units.\n",
			pl.MinNPositiveLCL)
	} else {
		fmt.Fprintf(&b, "  lower limit %s: a lot signals when it has fewer than %d nonconforming units.\n", statsRate(pl.LCL), pl.LCLCount)
	}
	fmt.Fprintf(&b, "  at the usual rate, a false alarm comes %s (ARL0).\n", planRunLength(pl.ARL0))
	if *p1s != "" {
		fmt.Fprintf(&b, "  after a shift to %s, a signal comes %s (ARL1).\n", statsRate(p1), planRunLength(pl.ARL1))
		if *arl1s != "" && !searched {
			verdict := "meets"
			if !(pl.ARL1 <= target) {
				verdict = "does not meet"
			}
			fmt.Fprintf(&b, "  this %s the target of %s lots.\n", verdict, strconv.FormatFloat(target, 'g', -1, 64))
		}
	}
	if cusum != nil {
		fmt.Fprintf(&b, "\nA CUSUM on the same lots (decision interval h = %.2f), with no more false alarms than the chart\n(one every %.1f lots on average), signals a shift to %s on average after %.1f lots.\n",
			cusum.H, cusum.ARL0, statsRate(p1), cusum.ARL1)
		switch sooner(pl.ARL1, cusum.ARL1) {
		case "cusum":
			fmt.Fprintf(&b, "The CUSUM catches this shift sooner: %.1f lots against %s for the chart.\n", cusum.ARL1, planLots(pl.ARL1))
		case "chart":
			fmt.Fprintf(&b, "The chart catches this shift sooner: %s against %.1f lots for the CUSUM.\n", planLots(pl.ARL1), cusum.ARL1)
		default:
			fmt.Fprintf(&b, "The chart and the CUSUM catch this shift equally soon, after about %.1f lots.\n", cusum.ARL1)
		}
	}
	if pl.ARL0 < spc.DefaultMinARL0 {
		fmt.Fprintf(&b, "\nWarning: at this size an in-control process gives a false alarm every %.1f lots on average,\nmore often than once in %d lots; a larger --n, or a search with --p1 and --arl1, keeps to that floor.\n", pl.ARL0, spc.DefaultMinARL0)
	}
	if searched {
		b.WriteString("\nBecause counts are whole numbers, some larger lot sizes may miss the target again;\ncheck the size you choose with --n.\n")
	}
	b.WriteString("\n" + caution)
	fmt.Fprint(stdout, b.String())
	return exitOK
}

// planRunLength says an average run length in words.
func planRunLength(arl float64) string {
	switch {
	case math.IsInf(arl, 1):
		return "never (no count can signal)"
	case arl < 1.05:
		return "on average with the first lot"
	}
	return "on average once every " + strconv.FormatFloat(arl, 'f', 1, 64) + " lots"
}

// planProcessCentre reads P0 for `lotwatch plan --process NAME --db FILE`
// (review.CurrentCentre), adding a usage problem to u for bad input. It
// returns NaN and "" when there is a problem.
func planProcessCentre(u *statsUsage, name, dbPath, p0s string) (float64, string) {
	switch {
	case p0s != "":
		u.addf("--p0 %q and --process %q: give one of them, not both", p0s, name)
		return math.NaN(), ""
	case name == "":
		u.addf("--db %q needs --process, the process whose centre is P0", dbPath)
		return math.NaN(), ""
	case dbPath == "":
		u.addf("--process %q needs --db, the lotwatch database holding it", name)
		return math.NaN(), ""
	}
	if cliNotAFile(dbPath) {
		u.addf("--db %q is not a lotwatch database file (no such file)", dbPath)
		return math.NaN(), ""
	}
	db, err := store.Open(dbPath)
	if err != nil {
		u.addf("--db %q: %v", store.Redact(dbPath), err)
		u.failed = !errors.Is(err, store.ErrBadURL) // the server, not the command line
		return math.NaN(), ""
	}
	defer db.Close()
	ctx := context.Background()
	p, err := db.ProcessByName(ctx, name)
	if err != nil {
		u.addf("--process %q: %v", name, err)
		return math.NaN(), ""
	}
	c, err := review.CurrentCentre(ctx, db, p)
	if err != nil {
		u.addf("--process %q: %v", name, err)
		return math.NaN(), ""
	}
	if err := spc.CheckPlanInput(c.P0, 1, 3); err != nil {
		u.addf("--process %q: its %s is %s; a plan needs a fraction between 0 and 1, exclusive", name, c.Source, statsRate(c.P0))
		return math.NaN(), ""
	}
	return c.P0, c.Source
}

type planCUSUMJSON struct {
	H    float64 `json:"h"`
	ARL0 float64 `json:"arl0"`
	ARL1 float64 `json:"arl1"`
}

// planCUSUM returns the CUSUM for a shift from p0 to p1 with lots of n
// units, designed for an in-control ARL of at least the chart's arl0
// (370 when no lot can signal on the chart), or nil when none can be
// designed.
func planCUSUM(p0, p1 float64, n int64, arl0 float64) *spc.CUSUM {
	if math.IsInf(arl0, 1) || !(arl0 >= 1) {
		arl0 = spc.DefaultARL0
	}
	c, err := spc.DesignCUSUM(spc.ChartP, p0, p1, []int64{n}, arl0, 0)
	if err != nil {
		return nil
	}
	return c
}

// sooner says which average run length is shorter, by more than 1 %.
func sooner(chart, cusum float64) string {
	switch {
	case cusum < 0.99*chart:
		return "cusum"
	case chart < 0.99*cusum:
		return "chart"
	}
	return "same"
}

// planLots says a run length in lots, or that the chart never signals.
func planLots(arl float64) string {
	if math.IsInf(arl, 1) {
		return "never"
	}
	return strconv.FormatFloat(arl, 'f', 1, 64) + " lots"
}

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

With --p1, it also sets beside the chart, on the same lots and with no more
false alarms, a CUSUM for the shift (decision interval designed by the
Markov chain of Brook & Evans 1972) and an EWMA of the lots' rates (of the
weights 0.05, 0.1, 0.2 and 0.4 the one that catches the shift soonest, its
width designed as Lucas & Saccucci 1990 do), and says which catches the
shift soonest.

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
	CUSUM  *planCUSUMJSON `json:"cusum,omitempty"`
	Sooner string         `json:"sooner,omitempty"`
	// EWMA is the EWMA for the same shift at the same ARL0, the weight
	// of spc.EWMAWeights that catches it soonest; only with --p1.
	EWMA     *planEWMAJSON `json:"ewma,omitempty"`
	P0Source string        `json:"p0_source,omitempty"`
}

func finiteOrNil(x float64) *float64 {
	if math.IsInf(x, 0) || math.IsNaN(x) {
		return nil
	}
	return &x
}

func runPlan(args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("plan", flag.ContinueOnError)
	r := planFlags(fs)
	pos, code := statsParse(fs, args, planHelp, stdout, stderr)
	if code >= 0 {
		return code
	}
	u := &statsUsage{cmd: "plan"}
	asJSON := u.format(*r.format)
	r.read(u, pos)
	if c := u.report(stderr); c >= 0 {
		return c
	}
	if r.searched() {
		if c := r.search(stderr); c >= 0 {
			return c
		}
	}
	pl := spc.PlanLimits(r.p0, r.n, r.k)
	var mon review.Monitors
	if *r.p1s != "" {
		pl = pl.WithShift(r.p1)
		mon = review.MonitorsFor(r.p0, r.p1, r.n, pl)
	}
	if asJSON {
		return statsJSON(stdout, r.json(pl, mon))
	}
	fmt.Fprint(stdout, r.text(pl, mon))
	return exitOK
}

// planRequest is what `lotwatch plan` was asked: the options as given
// and the figures read from them.
type planRequest struct {
	p0s, p1s, ns, arl1s, sigmas, maxNs, minARL0s *string
	format, procName, dbPath                     *string

	p0, p1, target float64 // usual and shifted fraction, target ARL1
	n, maxN        int64
	k              float64 // limits at k sigma
	p0Source       string  // where p0 came from, when read from a process
}

// planFlags declares the options of `lotwatch plan`.
func planFlags(fs *flag.FlagSet) *planRequest {
	return &planRequest{
		p0s:      fs.String("p0", "", ""),
		p1s:      fs.String("p1", "", ""),
		ns:       fs.String("n", "", ""),
		arl1s:    fs.String("arl1", "", ""),
		sigmas:   fs.String("sigma", "3", ""),
		maxNs:    fs.String("max-n", "100000", ""),
		minARL0s: fs.String("min-arl0", strconv.Itoa(spc.DefaultMinARL0), ""),
		format:   fs.String("format", "text", ""),
		procName: fs.String("process", "", ""),
		dbPath:   fs.String("db", "", ""),
		p0:       math.NaN(), p1: math.NaN(), target: math.NaN(),
	}
}

// searched says whether the lot size is to be found (no --n given) rather
// than evaluated.
func (r *planRequest) searched() bool { return *r.ns == "" }

// read reads every option into u's list of problems at once: the usual
// fraction (given, or the centre line of a process), the shift to detect
// and how soon, the sigma multiple and how far the search may go.
func (r *planRequest) read(u *statsUsage, pos []string) {
	r.readRates(u)
	if *r.ns != "" {
		r.n = u.count("--n", *r.ns, 1)
	}
	r.readTarget(u)
	k, err := strconv.ParseFloat(*r.sigmas, 64)
	if err != nil || !(k > 0) || math.IsInf(k, 1) {
		u.addf("--sigma %q must be a number greater than 0, such as 3", *r.sigmas)
	}
	r.k = k
	r.maxN = u.count("--max-n", *r.maxNs, 1)
	if r.maxN > planMaxN {
		u.addf("--max-n %q must be at most %d (the search tries every lot size up to it)", *r.maxNs, planMaxN)
	}
	if *r.ns == "" && (*r.p1s == "" || *r.arl1s == "") {
		u.addf("give --n N to evaluate a lot size, or --p1 and --arl1 to find the smallest one")
	}
	if len(pos) > 0 {
		u.addf("unexpected argument %q: plan takes options only", pos[0])
	}
}

// readRates reads the usual fraction nonconforming p0 (from a process's
// frozen centre line when one is named) and the shifted fraction p1, which
// must differ from it.
func (r *planRequest) readRates(u *statsUsage) {
	fraction := func(name, s string) float64 {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || !(v > 0 && v < 1) {
			u.addf("--%s %q must be a fraction between 0 and 1, such as 0.02", name, s)
			return math.NaN()
		}
		return v
	}
	if *r.procName != "" || *r.dbPath != "" {
		r.p0, r.p0Source = planProcessCentre(u, *r.procName, *r.dbPath, *r.p0s)
	} else if *r.p0s == "" {
		u.addf("--p0 is required: the usual fraction nonconforming, such as 0.02")
	} else {
		r.p0 = fraction("p0", *r.p0s)
	}
	if *r.p1s != "" {
		r.p1 = fraction("p1", *r.p1s)
		if r.p1 == r.p0 {
			u.addf("--p1 %q must differ from --p0", *r.p1s)
		}
	}
}

// readTarget reads --arl1, how many lots on average a shift to p1 may go
// unseen; it means nothing without p1.
func (r *planRequest) readTarget(u *statsUsage) {
	if *r.arl1s == "" {
		return
	}
	v, err := strconv.ParseFloat(*r.arl1s, 64)
	if err != nil || !(v >= 1) || math.IsInf(v, 1) {
		u.addf("--arl1 %q must be a number of lots, 1 or more", *r.arl1s)
	} else {
		r.target = v
	}
	if *r.p1s == "" {
		u.addf("--arl1 %q needs --p1, the shifted fraction to detect", *r.arl1s)
	}
}

// search finds the smallest lot size that detects the shift in time
// without false alarms more often than --min-arl0 allows; it returns an
// exit code when it stops the command, else -1. A floor below the
// default is allowed with a warning: frequent false alarms make people
// stop trusting the chart.
func (r *planRequest) search(stderr io.Writer) int {
	minARL0, perr := strconv.ParseFloat(*r.minARL0s, 64)
	if perr != nil || !(minARL0 >= 0) || math.IsInf(minARL0, 1) {
		fmt.Fprintf(stderr, "lotwatch plan: --min-arl0 %q must be a number of lots, 0 or more\n", *r.minARL0s)
		return exitUsage
	}
	if minARL0 < spc.DefaultMinARL0 {
		fmt.Fprintf(stderr, "lotwatch plan: warning: --min-arl0 %s is below the default floor of %d lots between false alarms; the lot size found may raise false alarms often enough that people stop trusting the chart\n",
			*r.minARL0s, spc.DefaultMinARL0)
	}
	n, err := spc.SmallestNWithARL0(r.p0, r.p1, r.k, r.target, minARL0, r.maxN)
	if errors.Is(err, spc.ErrNoPlan) {
		fmt.Fprintf(stderr, "lotwatch plan: no lot size up to %d units detects a shift to %s within %s lots on average with at least %s lots between false alarms; try a larger --max-n\n",
			r.maxN, *r.p1s, *r.arl1s, *r.minARL0s)
		return exitFail
	}
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch plan: %v\n", err)
		return exitUsage
	}
	r.n = n
	return -1
}

// json is the plan as --format json gives it; a figure that does not
// apply (no lower limit, no shift, no target) is left out.
func (r *planRequest) json(pl spc.Plan, mon review.Monitors) planJSON {
	out := planJSON{
		N: pl.N, UCLCount: pl.UCLCount,
		ARL0: finiteOrNil(pl.ARL0), MinNPositiveLCL: pl.MinNPositiveLCL,
		P0: r.p0, Sigma: r.k, UCL: pl.UCL, P0Source: r.p0Source,
	}
	if pl.LCLCount > 0 {
		out.LCLCount, out.LCL = &pl.LCLCount, &pl.LCL
	}
	if *r.p1s != "" {
		p1 := r.p1
		out.P1, out.ARL1 = &p1, finiteOrNil(pl.ARL1)
	}
	if *r.arl1s != "" {
		target := r.target
		out.TargetARL1 = &target
	}
	if c := mon.CUSUM; c != nil {
		out.CUSUM = &planCUSUMJSON{H: c.H, ARL0: c.ARL0, ARL1: c.ARL1}
		out.Sooner = sooner(pl.ARL1, c.ARL1)
	}
	if e := mon.EWMA; e != nil {
		out.EWMA = &planEWMAJSON{Lambda: e.Lambda, Width: e.L, ARL0: e.ARL0, ARL1: mon.EWMAARL1}
	}
	return out
}

// text is the plan in words: where p0 came from, the lot size found, the
// limits as counts of nonconforming units, how soon false alarms and
// signals come, the CUSUM and the EWMA beside the chart, and the cautions.
func (r *planRequest) text(pl spc.Plan, mon review.Monitors) string {
	var b strings.Builder
	if r.p0Source != "" {
		fmt.Fprintf(&b, "Usual fraction nonconforming of process %q: %s, the %s.\n\n", *r.procName, statsRate(r.p0), r.p0Source)
	}
	if r.searched() {
		fmt.Fprintf(&b, "Smallest lot size that detects a shift to %s within %s lots on average: %d units.\n\n",
			statsRate(r.p1), strconv.FormatFloat(r.target, 'g', -1, 64), r.n)
	}
	r.writeLimits(&b, pl)
	if mon.CUSUM != nil {
		r.writeCUSUM(&b, pl, mon.CUSUM)
	}
	if mon.EWMA != nil {
		r.writeEWMA(&b, pl, mon)
	}
	if pl.ARL0 < spc.DefaultMinARL0 {
		fmt.Fprintf(&b, "\nWarning: at this size an in-control process gives a false alarm every %.1f lots on average,\nmore often than once in %d lots; a larger --n, or a search with --p1 and --arl1, keeps to that floor.\n", pl.ARL0, spc.DefaultMinARL0)
	}
	if r.searched() {
		b.WriteString("\nBecause counts are whole numbers, some larger lot sizes may miss the target again;\ncheck the size you choose with --n.\n")
	}
	b.WriteString("\n" + caution)
	return b.String()
}

// writeLimits says the limits as counts a supervisor can check a lot
// against, and how soon a false alarm and a real signal come.
func (r *planRequest) writeLimits(b *strings.Builder, pl spc.Plan) {
	n := r.n
	fmt.Fprintf(b, "Lots of %d units, usual fraction nonconforming %s, limits at %s sigma:\n",
		n, statsRate(r.p0), strconv.FormatFloat(r.k, 'g', -1, 64))
	if pl.UCLCount >= n {
		fmt.Fprintf(b, "  upper limit %s: no lot can signal high at this size.\n", statsRate(pl.UCL))
	} else {
		fmt.Fprintf(b, "  upper limit %s: a lot signals when it has more than %d nonconforming units.\n", statsRate(pl.UCL), pl.UCLCount)
	}
	if pl.LCLCount < 1 {
		fmt.Fprintf(b, "  no lower limit: no lot can signal low at this size; that needs lots of at least %d units.\n",
			pl.MinNPositiveLCL)
	} else {
		fmt.Fprintf(b, "  lower limit %s: a lot signals when it has fewer than %d nonconforming units.\n", statsRate(pl.LCL), pl.LCLCount)
	}
	fmt.Fprintf(b, "  at the usual rate, a false alarm comes %s (ARL0).\n", planRunLength(pl.ARL0))
	if *r.p1s == "" {
		return
	}
	fmt.Fprintf(b, "  after a shift to %s, a signal comes %s (ARL1).\n", statsRate(r.p1), planRunLength(pl.ARL1))
	if *r.arl1s != "" && !r.searched() {
		verdict := "meets"
		if !(pl.ARL1 <= r.target) {
			verdict = "does not meet"
		}
		fmt.Fprintf(b, "  this %s the target of %s lots.\n", verdict, strconv.FormatFloat(r.target, 'g', -1, 64))
	}
}

// writeCUSUM sets a CUSUM with no more false alarms than the chart beside
// it, and says which catches the shift sooner.
func (r *planRequest) writeCUSUM(b *strings.Builder, pl spc.Plan, cusum *spc.CUSUM) {
	fmt.Fprintf(b, "\nA CUSUM on the same lots (decision interval h = %.2f), with no more false alarms than the chart\n(one every %.1f lots on average), signals a shift to %s on average after %.1f lots.\n",
		cusum.H, cusum.ARL0, statsRate(r.p1), cusum.ARL1)
	switch sooner(pl.ARL1, cusum.ARL1) {
	case "cusum":
		fmt.Fprintf(b, "The CUSUM catches this shift sooner: %.1f lots against %s for the chart.\n", cusum.ARL1, planLots(pl.ARL1))
	case "chart":
		fmt.Fprintf(b, "The chart catches this shift sooner: %s against %.1f lots for the CUSUM.\n", planLots(pl.ARL1), cusum.ARL1)
	default:
		fmt.Fprintf(b, "The chart and the CUSUM catch this shift equally soon, after about %.1f lots.\n", cusum.ARL1)
	}
}

// writeEWMA sets the EWMA with no more false alarms than the chart beside
// it, and says whether it is the soonest.
func (r *planRequest) writeEWMA(b *strings.Builder, pl spc.Plan, mon review.Monitors) {
	e := mon.EWMA
	fmt.Fprintf(b, "\nAn EWMA of the lots' rates (weight %g, limits at %.2f standard deviations), with no more false\nalarms than the chart (one every %.1f lots on average), signals a shift to %s on average after %.1f lots.\n",
		e.Lambda, e.L, e.ARL0, statsRate(r.p1), mon.EWMAARL1)
	if mon.Soonest(pl.ARL1) {
		fmt.Fprintf(b, "The EWMA catches this shift soonest.\n")
	}
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

type planEWMAJSON struct {
	Lambda float64 `json:"lambda"`
	Width  float64 `json:"width"`
	ARL0   float64 `json:"arl0"`
	ARL1   float64 `json:"arl1"`
}

type planCUSUMJSON struct {
	H    float64 `json:"h"`
	ARL0 float64 `json:"arl0"`
	ARL1 float64 `json:"arl1"`
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

package main

import (
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/storejson"
)

func init() {
	register(command{
		name:    "process",
		summary: "add, change or list the processes (one control chart each)",
		run:     runProcess,
	})
}

const processHelp = `Usage:
  lotwatch process add --db FILE --name NAME [options]
  lotwatch process update --db FILE --name NAME [changes] --reason TEXT
  lotwatch process list --db FILE [--format text|json]

A process is one inspection point whose lots make one control chart.

Options of "add":
  --db FILE          the lotwatch database file (created if missing), or a postgres:// URL
  --name NAME        the process name, unique in the database
  --chart KIND       p (fraction nonconforming, the default), np (number
                     nonconforming, constant lot size), u (defects per unit)
                     or c (defects per lot, constant lot size)
  --categories LIST  defect categories counted per lot, comma-separated,
                     e.g. dent,scratch,burr (each becomes a column of the
                     lot file)
  --tz ZONE          the process's time zone, an IANA name such as
                     Europe/Berlin (default: the plant's time zone, set on
                     the web's Processes page; UTC until set); lot times
                     written without an offset are read in it
  --description TEXT what the process is
  --area TEXT        the plant's area or line the process belongs to, e.g.
                     "Line 4" (for filtering the status board and worklist)
  --limits METHOD    how control limits are computed: sigma (centre ± k·σ,
                     the default), exact (binomial or Poisson quantiles) or
                     laney (Laney p′/u′ for overdispersed data)
  --sigma K          k, the width of the limits in sigmas (default 3)
  --rules SET        run rules: we (Western Electric, the default), nelson,
                     none, or a list such as we1,nelson3
  --map "HEADER=COLUMN,..."
                     the plant's own lot-file headers and the lotwatch
                     column (lot, time, shift, inspected, defective or
                     defects, inspector, note) or category each one holds,
                     e.g. "Qty inspected=inspected,Rejects=defective";
                     import, analyze --process and the upload page use it
  --date-order ORDER day-first or month-first: how the plant writes local
                     dates (05.03.2025 14:30); without it only YYYY-MM-DD
                     is read, as the order is never guessed
  --cusum-shift P1   also watch a CUSUM for a sustained change of the rate
                     to P1 (a fraction for p and np, defects per unit for u,
                     defects per lot for c; above the centre it watches for a
                     rise, below for a fall); 0, the default, watches none
  --cusum-arl0 A     how many lots on average between the CUSUM's false
                     alarms while the rate stays at the centre (default 370)
  --ewma-lambda L    also watch an EWMA of the rates with weight L for the
                     newest lot, above 0 and at most 1 (0.2 is usual); 0, the
                     default, watches none
  --ewma-width W     the width of the EWMA's limits in its standard
                     deviations (default 3)
  --ewma-arl0 A      instead of --ewma-width: how many lots on average
                     between the EWMA's false alarms while the rate stays at
                     the centre; the width is designed for it over the
                     process's lot sizes (Markov chain of Lucas & Saccucci),
                     and frozen with the limits
  --as NAME          the name recorded in the audit trail (default: your
                     user name on this computer)

Options of "update" (only the options given change; the change and its
reason go to the audit trail):
  --db FILE, --name NAME   the database and the process to change
  --description TEXT, --area TEXT, --limits METHOD, --sigma K, --rules SET,
  --tz ZONE, --date-order ORDER, --cusum-shift P1, --cusum-arl0 A,
  --ewma-lambda L, --ewma-width W, --ewma-arl0 A
                     as for "add" (--date-order "" reads YYYY-MM-DD only;
                     0 turns a monitor off)
  --map "HEADER=COLUMN,..."
                     the whole new column map ("" removes it)
  --categories LIST  the whole new list of defect categories: categories
                     may be added, but none removed or renamed (the lots
                     keep their counts under them)
  --retire           the process takes no more lots (its record stays)
  --activate         a retired process takes lots again
  --reason TEXT      why the process changes (required)
  --as NAME          the name recorded in the audit trail

Options of "list":
  --db FILE          the lotwatch database file, or a postgres:// URL
  --all              include retired processes
  --format F         text (the default) or json

Exit status: 0 when done, 2 for bad input (each problem on standard error,
nothing on standard output), 1 when the database fails.
`

// parseColumnMap reads --map "HEADER=COLUMN,...": a header may hold
// spaces but no comma or equals sign. The store checks the names.
func parseColumnMap(s string) (map[string]string, []string) {
	if strings.TrimSpace(s) == "" {
		return nil, nil
	}
	m := map[string]string{}
	var probs []string
	for _, it := range strings.Split(s, ",") {
		from, to, ok := strings.Cut(it, "=")
		from, to = strings.TrimSpace(from), strings.TrimSpace(to)
		if !ok || from == "" || to == "" {
			probs = append(probs, fmt.Sprintf("--map: %q is not HEADER=COLUMN (e.g. \"Qty inspected=inspected\")", strings.TrimSpace(it)))
			continue
		}
		m[from] = to
	}
	return m, probs
}

func runProcess(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	return cliActions("process", processHelp, args, stdout, stderr,
		cliAction{"add", runProcessAdd},
		cliAction{"update", runProcessUpdate},
		cliAction{"list", runProcessList},
	)
}

func runProcessAdd(args []string, stdout, stderr io.Writer) int {
	fs := cliFlags("process add")
	dbPath := fs.String("db", "", "")
	name := fs.String("name", "", "")
	chart := fs.String("chart", "p", "")
	cats := fs.String("categories", "", "")
	tz := fs.String("tz", "", "")
	desc := fs.String("description", "", "")
	area := fs.String("area", "", "")
	limits := fs.String("limits", "sigma", "")
	sigma := fs.String("sigma", "3", "")
	rules := fs.String("rules", "we", "")
	cmap := fs.String("map", "", "")
	dateOrder := fs.String("date-order", "", "")
	mon := monitorFlags(fs)
	as := fs.String("as", "", "")
	pos, code, done := cliParse(fs, args, processHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire("process add", "db", *dbPath, "name", *name)
	probs = append(probs, cliNoArgs(pos)...)
	p := store.Process{Name: *name, Description: *desc, Area: *area, Rules: *rules, TimeZone: *tz, DateOrder: *dateOrder}
	m, mprobs := parseColumnMap(*cmap)
	p.ColumnMap, probs = m, append(probs, mprobs...)
	if c, err := spc.ParseChart(*chart); err != nil {
		probs = append(probs, fmt.Sprintf("--chart %q: want p, np, u or c", *chart))
	} else {
		p.Chart = c
	}
	if m, err := spc.ParseMethod(*limits); err != nil {
		probs = append(probs, fmt.Sprintf("--limits %q: want sigma, exact or laney", *limits))
	} else {
		p.Method = m
	}
	if k, err := strconv.ParseFloat(*sigma, 64); err != nil || !(k > 0 && k <= 10) {
		probs = append(probs, fmt.Sprintf("--sigma %q: want a number greater than 0 and at most 10", *sigma))
	} else {
		p.K = k
	}
	if _, err := time.LoadLocation(*tz); *tz != "" && (err != nil || *tz == "Local") {
		probs = append(probs, fmt.Sprintf("--tz %q: want an IANA time zone name such as Europe/Berlin or UTC", *tz))
	}
	if *cats != "" {
		for _, c := range strings.Split(*cats, ",") {
			p.Categories = append(p.Categories, strings.TrimSpace(c))
		}
	}
	probs = append(probs, mon.apply(&p.Monitors, nil)...)
	if len(probs) > 0 {
		return cliProblems(stderr, "process add", probs...)
	}
	db, code, ok := cliOpen(stderr, "process add", *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	p, err := db.AddProcess(context.Background(), cliActor(*as), p)
	if err != nil {
		return cliStoreError(stderr, "process add", "", err)
	}
	fmt.Fprintf(stdout, "added process %q (id %d): %s chart, limits %s k=%g, rules %s, categories [%s], time zone %s\n",
		p.Name, p.ID, p.Chart, p.Method, p.K, p.Rules, strings.Join(p.Categories, ", "), p.TimeZone)
	return exitOK
}

func runProcessUpdate(args []string, stdout, stderr io.Writer) int {
	fs := cliFlags("process update")
	u := processUpdateFlags(fs)
	pos, code, done := cliParse(fs, args, processHelp, stdout, stderr)
	if done {
		return code
	}
	fs.Visit(func(f *flag.Flag) { u.set[f.Name] = true })
	if probs := u.check(pos); len(probs) > 0 {
		return cliProblems(stderr, "process update", probs...)
	}
	if cliNoFile(*u.dbPath) {
		return cliProblems(stderr, "process update", fmt.Sprintf("--db %s: no such database file", *u.dbPath))
	}
	db, code, ok := cliOpen(stderr, "process update", *u.dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	ctx := context.Background()
	p, err := db.ProcessByName(ctx, *u.name)
	if err != nil {
		return cliStoreError(stderr, "process update", "", err)
	}
	u.apply(&p)
	p, err = db.UpdateProcess(ctx, cliActor(*u.as), *u.reason, p)
	if err != nil {
		return cliStoreError(stderr, "process update", "", err)
	}
	printProcessUpdated(stdout, p)
	return exitOK
}

// processUpdate is what `lotwatch process update` was asked to change:
// the options as given, which of them were given (only those change), and
// the values check has read from them.
type processUpdate struct {
	dbPath, name, desc, area, limits, sigma, rules, cats, tz *string
	reason, cmap, dateOrder, as                              *string
	retire, activate                                         *bool
	mon                                                      processMonitors
	set                                                      map[string]bool

	method   spc.Method
	k        float64
	newMap   map[string]string
	monitors spc.Monitors
}

// processUpdateFlags declares the options of `lotwatch process update`.
func processUpdateFlags(fs *flag.FlagSet) *processUpdate {
	return &processUpdate{
		dbPath:    fs.String("db", "", ""),
		name:      fs.String("name", "", ""),
		desc:      fs.String("description", "", ""),
		area:      fs.String("area", "", ""),
		limits:    fs.String("limits", "", ""),
		sigma:     fs.String("sigma", "", ""),
		rules:     fs.String("rules", "", ""),
		cats:      fs.String("categories", "", ""),
		tz:        fs.String("tz", "", ""),
		mon:       monitorFlags(fs),
		retire:    fs.Bool("retire", false, ""),
		activate:  fs.Bool("activate", false, ""),
		reason:    fs.String("reason", "", ""),
		cmap:      fs.String("map", "", ""),
		dateOrder: fs.String("date-order", "", ""),
		as:        fs.String("as", "", ""),
		set:       map[string]bool{},
	}
}

// check lists every problem with the options at once, before the database
// is opened: a change to a process is kept in its audit trail, so it needs
// a reason, and at least one thing to change.
func (u *processUpdate) check(pos []string) []string {
	probs := cliRequire("process update", "db", *u.dbPath, "name", *u.name)
	if strings.TrimSpace(*u.reason) == "" {
		probs = append(probs, "--reason is required: say why the process changes")
	}
	probs = append(probs, cliNoArgs(pos)...)
	if *u.retire && *u.activate {
		probs = append(probs, "--retire and --activate exclude each other")
	}
	if !u.changesAnything() {
		probs = append(probs, "nothing to change: give --description, --area, --limits, --sigma, --rules, --categories, --tz, --map, --date-order, a monitor option, --retire or --activate")
	}
	newMap, mprobs := parseColumnMap(*u.cmap)
	u.newMap = newMap
	probs = append(probs, mprobs...)
	probs = append(probs, u.mon.apply(&u.monitors, u.set)...)
	return append(probs, u.checkLimits()...)
}

// changesAnything says whether an option that changes the process was
// given (the database, the name, the reason and the user change nothing).
func (u *processUpdate) changesAnything() bool {
	for _, f := range []string{"description", "area", "limits", "sigma", "rules", "categories", "tz", "retire", "activate", "map", "date-order", "cusum-shift", "cusum-arl0", "ewma-lambda", "ewma-width", "ewma-arl0"} {
		if u.set[f] {
			return true
		}
	}
	return false
}

// checkLimits reads the options that move the control limits or the
// lots' days: the limit method, the sigma multiple k and the time zone.
func (u *processUpdate) checkLimits() []string {
	var probs []string
	if u.set["limits"] {
		m, err := spc.ParseMethod(*u.limits)
		if err != nil {
			probs = append(probs, fmt.Sprintf("--limits %q: want sigma, exact or laney", *u.limits))
		}
		u.method = m
	}
	if u.set["sigma"] {
		v, err := strconv.ParseFloat(*u.sigma, 64)
		if err != nil || !(v > 0 && v <= 10) {
			probs = append(probs, fmt.Sprintf("--sigma %q: want a number greater than 0 and at most 10", *u.sigma))
		}
		u.k = v
	}
	if u.set["tz"] {
		if _, err := time.LoadLocation(*u.tz); err != nil || *u.tz == "" || *u.tz == "Local" {
			probs = append(probs, fmt.Sprintf("--tz %q: want an IANA time zone name such as Europe/Berlin or UTC", *u.tz))
		}
	}
	return probs
}

// apply changes p where an option was given, and only there: what the
// user left out stays as it is.
func (u *processUpdate) apply(p *store.Process) {
	set := u.set
	if set["description"] {
		p.Description = *u.desc
	}
	if set["area"] {
		p.Area = *u.area
	}
	if set["limits"] {
		p.Method = u.method
	}
	if set["sigma"] {
		p.K = u.k
	}
	if set["rules"] {
		p.Rules = *u.rules
	}
	if set["tz"] {
		p.TimeZone = *u.tz
	}
	if set["categories"] {
		p.Categories = splitCategories(*u.cats)
	}
	if set["map"] {
		p.ColumnMap = u.newMap
	}
	if set["date-order"] {
		p.DateOrder = *u.dateOrder
	}
	u.mon.update(&p.Monitors, u.monitors, set)
	if *u.retire {
		p.Active = false
	}
	if *u.activate {
		p.Active = true
	}
}

// splitCategories reads --categories: names separated by commas; empty
// means the process keeps no categories.
func splitCategories(s string) []string {
	cats := []string{}
	if s != "" {
		for _, c := range strings.Split(s, ",") {
			cats = append(cats, strings.TrimSpace(c))
		}
	}
	return cats
}

// printProcessUpdated tells the user the process as it now stands.
func printProcessUpdated(stdout io.Writer, p store.Process) {
	state := "active"
	if !p.Active {
		state = "retired"
	}
	fmt.Fprintf(stdout, "updated process %q (id %d): %s chart, limits %s k=%g, rules %s, categories [%s], time zone %s, %s\n",
		p.Name, p.ID, p.Chart, p.Method, p.K, p.Rules, strings.Join(p.Categories, ", "), p.TimeZone, state)
}

func runProcessList(args []string, stdout, stderr io.Writer) int {
	fs := cliFlags("process list")
	dbPath := fs.String("db", "", "")
	all := fs.Bool("all", false, "")
	format := fs.String("format", "text", "")
	pos, code, done := cliParse(fs, args, processHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire("process list", "db", *dbPath)
	if *format != "text" && *format != "json" {
		probs = append(probs, fmt.Sprintf("--format %q: want text or json", *format))
	}
	probs = append(probs, cliNoArgs(pos)...)
	if len(probs) > 0 {
		return cliProblems(stderr, "process list", probs...)
	}
	if cliNoFile(*dbPath) {
		return cliProblems(stderr, "process list", fmt.Sprintf("--db %s: no such database file", *dbPath))
	}
	db, code, ok := cliOpen(stderr, "process list", *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	ps, err := db.Processes(context.Background(), *all)
	if err != nil {
		return cliStoreError(stderr, "process list", "", err)
	}
	if *format == "json" {
		out := make([]storejson.Process, 0, len(ps))
		for _, p := range ps {
			out = append(out, storejson.ProcessOf(p))
		}
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		enc.Encode(out)
		return exitOK
	}
	tw := tabwriter.NewWriter(stdout, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "NAME\tCHART\tLIMITS\tRULES\tCATEGORIES\tTIME ZONE\tSTATE")
	for _, p := range ps {
		state := "active"
		if !p.Active {
			state = "retired"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s k=%g\t%s\t%s\t%s\t%s\n", p.Name, p.Chart, p.Method, p.K, p.Rules, strings.Join(p.Categories, ","), p.TimeZone, state)
	}
	tw.Flush()
	return exitOK
}

// processMonitors are the shift-monitor options of "process add" and
// "process update", as typed.
type processMonitors struct {
	cusumShift, cusumARL0, ewmaLambda, ewmaWidth, ewmaARL0 *string
}

func monitorFlags(fs *flag.FlagSet) processMonitors {
	return processMonitors{fs.String("cusum-shift", "", ""), fs.String("cusum-arl0", "", ""), fs.String("ewma-lambda", "", ""), fs.String("ewma-width", "", ""),
		fs.String("ewma-arl0", "", "")}
}

// apply reads the options given (all of them when set is nil) into m;
// the store checks the values against the chart.
func (o processMonitors) apply(m *spc.Monitors, set map[string]bool) []string {
	var probs []string
	for _, f := range []struct {
		name string
		v    *string
		dst  *float64
	}{{"cusum-shift", o.cusumShift, &m.CUSUMShift}, {"cusum-arl0", o.cusumARL0, &m.CUSUMARL0}, {"ewma-lambda", o.ewmaLambda, &m.EWMALambda}, {"ewma-width", o.ewmaWidth, &m.EWMAWidth}, {"ewma-arl0", o.ewmaARL0, &m.EWMAARL0}} {
		if (set == nil && *f.v == "") || (set != nil && !set[f.name]) {
			continue
		}
		v, err := strconv.ParseFloat(*f.v, 64)
		if err != nil || v < 0 || v != v || v > 1e12 {
			probs = append(probs, fmt.Sprintf("--%s %q: want a number of 0 or more", f.name, *f.v))
			continue
		}
		*f.dst = v
	}
	return probs
}

// update copies into p the monitor settings of m that were given.
func (o processMonitors) update(p *spc.Monitors, m spc.Monitors, set map[string]bool) {
	if set["cusum-shift"] {
		p.CUSUMShift = m.CUSUMShift
	}
	if set["cusum-arl0"] {
		p.CUSUMARL0 = m.CUSUMARL0
	}
	if set["ewma-lambda"] {
		p.EWMALambda = m.EWMALambda
	}
	if set["ewma-width"] {
		p.EWMAWidth = m.EWMAWidth
	}
	if set["ewma-arl0"] {
		p.EWMAARL0 = m.EWMAARL0
	}
}

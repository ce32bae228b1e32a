package main

import (
	"bytes"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"strings"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/review"
	"lotwatch/web/review/report"
)

func init() {
	register(command{
		name:    "report",
		summary: "weekly review: rates with intervals, change from last week, signals, Pareto, trend",
		run:     runReport,
	})
}

const reportHelp = `Usage: lotwatch report --db FILE [--week YYYY-Www] [--process NAME]... [options]

Writes the weekly review of one ISO 8601 week (Monday to Sunday on each
plant's own clocks) for every active process, or for the processes named:
lots, units inspected, nonconforming units (p, np) or defects (u, c), the
rate with its confidence interval, the previous week beside it, the change
with its interval and test, the week's lots outside their control limits
and run-rule signals with their recorded causes, a Pareto of the defect
categories, a trend of the weekly rate and the dispersion check.

Options:
  --db FILE        the lotwatch database (a file, or a postgres:// URL); required, must exist
  --read-db URL    a streaming replica of a postgres:// --db to read the lots
                   from; for a process whose latest change the replica has
                   not yet replayed, the lots are read from --db
  --week W         ISO week such as 2026-W48 (default: the last week that
                   is complete in every chosen process's time zone)
  --process NAME   a process to review; repeat the option or give a comma
                   list (default: every active process)
  --method NAME    interval for the fraction nonconforming of p and np
                   processes (default wilson): wilson, clopper-pearson,
                   agresti-coull, jeffreys or wald. u and c processes always
                   get the exact Poisson interval.
  --level L        confidence level, between 0 and 1 (default 0.95)
  --fdr            judge each change on its p-value adjusted for the false
                   discovery rate across the processes of the review
                   (Benjamini & Hochberg 1995) rather than on its own; the
                   adjusted values are shown either way
  --format F       text (default), html (a self-contained file that opens
                   when mailed: no scripts, no external references, charts
                   inline), csv (one row per process) or json
  -h               show this help

The review opens with a summary, one line per process, those asking most
for attention first, and says how many changes chance alone would give
across that many processes. A change is stated only when its test and its
interval agree; at small expected counts the fraction nonconforming is
tested with Fisher's exact test.

Rates are fractions in csv and json, percentages (or defects per 100 units)
in text and html.

Exit status: 0 when done, 1 when the database cannot be read, 2 for bad
input (nothing is printed on standard output then; each problem is named
on standard error).
`

// processList collects --process values, repeated or comma-separated.
type processList []string

func (l *processList) String() string { return strings.Join(*l, ",") }

func (l *processList) Set(v string) error {
	for _, name := range strings.Split(v, ",") {
		name = strings.TrimSpace(name)
		if name == "" {
			return fmt.Errorf("%q holds an empty process name", v)
		}
		*l = append(*l, name)
	}
	return nil
}

func runReport(args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("report", flag.ContinueOnError)
	dbPath := fs.String("db", "", "")
	readDB := fs.String("read-db", "", "")
	week := fs.String("week", "", "")
	var procs processList
	fs.Var(&procs, "process", "")
	method := fs.String("method", "wilson", "")
	levels := fs.String("level", "0.95", "")
	format := fs.String("format", "text", "")
	fdr := fs.Bool("fdr", false, "")
	pos, code := statsParse(fs, args, reportHelp, stdout, stderr)
	if code >= 0 {
		return code
	}
	u := &statsUsage{cmd: "report"}
	if *dbPath == "" {
		u.addf("--db is required: the lotwatch database file")
	} else if cliNotAFile(*dbPath) {
		u.addf("--db %q is not a lotwatch database file (no such file)", *dbPath)
	}
	u.week(*week)
	m, err := spc.ParseIntervalMethod(*method)
	if err != nil || m == spc.IntervalPoissonExact {
		u.addf("--method %q must be wilson, clopper-pearson, agresti-coull, jeffreys or wald (u and c processes always get the exact Poisson interval)", *method)
	}
	level := u.level(*levels)
	switch *format {
	case "text", "html", "csv", "json":
	default:
		u.addf("--format %q must be text, html, csv or json", *format)
	}
	if len(pos) > 0 {
		u.addf("unexpected argument %q: report takes options only", pos[0])
	}
	if c := u.report(stderr); c >= 0 {
		return c
	}

	db, err := store.Open(*dbPath)
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch report: --db %q: %v\n", store.Redact(*dbPath), err)
		if errors.Is(err, store.ErrBadURL) {
			return exitUsage
		}
		return exitFail
	}
	defer db.Close()
	if code, ok := cliReplica(stderr, "report", db, *readDB); !ok {
		return code
	}
	r, err := review.Build(context.Background(), db, review.Options{Week: *week, Processes: procs, Method: m, Level: level, FDR: *fdr})
	var oe *review.OptionError
	switch {
	case errors.As(err, &oe):
		fmt.Fprintf(stderr, "lotwatch report: --%s %q %s\n", oe.Option, oe.Value, oe.Reason)
		return exitUsage
	case err != nil:
		fmt.Fprintf(stderr, "lotwatch report: %v\n", err)
		return exitFail
	}

	// Render in full before writing, so a failure prints nothing.
	var b bytes.Buffer
	switch *format {
	case "html":
		err = report.WriteHTML(&b, r)
	case "csv":
		err = report.WriteCSV(&b, r)
	case "json":
		err = report.WriteJSON(&b, r)
	default:
		err = report.WriteText(&b, r) // carries review.Caution, which covers caution
	}
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch report: %v\n", err)
		return exitFail
	}
	if _, err := stdout.Write(b.Bytes()); err != nil {
		fmt.Fprintf(stderr, "lotwatch report: writing the report: %v\n", err)
		return exitFail
	}
	return exitOK
}

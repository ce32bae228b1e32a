package main

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"time"

	"lotwatch/store"
)

func init() {
	register(command{
		name:    "export",
		summary: "write a process's lots as CSV or JSON",
		run:     runExport,
	})
}

const exportHelp = `Usage: lotwatch export --db FILE --process NAME [options]

Writes the lots of a process (not the voided ones) in time order to
standard output. The CSV reads back with "lotwatch import" to the same
lots. Text that a spreadsheet would run as a formula (starting with
= + - @, tab or CR) gets a leading single quote; import removes it again.

Options:
  --db FILE        the lotwatch database file, or a postgres:// URL
  --process NAME   the process
  --from DATE      only lots from this day on (YYYY-MM-DD in the process's
                   time zone, or an RFC 3339 time)
  --to DATE        only lots up to and including this day (YYYY-MM-DD), or
                   before this RFC 3339 time
  --format F       csv (the default) or json

Exit status: 0 when done, 2 for bad input (each problem on standard error,
nothing on standard output), 1 when the database fails.
`

func runExport(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("export")
	dbPath := fs.String("db", "", "")
	process := fs.String("process", "", "")
	from := fs.String("from", "", "")
	to := fs.String("to", "", "")
	format := fs.String("format", "csv", "")
	pos, code, done := cliParse(fs, args, exportHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire("export", "db", *dbPath, "process", *process)
	if *format != "csv" && *format != "json" {
		probs = append(probs, fmt.Sprintf("--format %q: want csv or json", *format))
	}
	if len(pos) > 0 {
		probs = append(probs, fmt.Sprintf("unexpected argument %q (the lots go to standard output)", pos[0]))
	}
	if len(probs) > 0 {
		return cliProblems(stderr, "export", probs...)
	}
	if cliNoFile(*dbPath) {
		return cliProblems(stderr, "export", fmt.Sprintf("--db %s: no such database file", *dbPath))
	}
	db, code, ok := cliOpen(stderr, "export", *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	ctx := context.Background()
	p, err := db.ProcessByName(ctx, *process)
	if err != nil {
		return cliStoreError(stderr, "export", "", err)
	}
	opt := store.ExportOptions{Format: *format}
	loc := p.Location()
	if opt.From, err = cliDate(*from, loc, false); err != nil {
		probs = append(probs, fmt.Sprintf("--from %q: %v", *from, err))
	}
	if opt.To, err = cliDate(*to, loc, true); err != nil {
		probs = append(probs, fmt.Sprintf("--to %q: %v", *to, err))
	}
	if len(probs) > 0 {
		return cliProblems(stderr, "export", probs...)
	}
	// The lots stream out; a failure part-way is reported on stderr with
	// exit status 1.
	bw := bufio.NewWriter(stdout)
	if err := db.Export(ctx, bw, p.ID, opt); err != nil {
		return cliStoreError(stderr, "export", "", err)
	}
	if err := bw.Flush(); err != nil {
		fmt.Fprintf(stderr, "lotwatch export: %v\n", err)
		return exitFail
	}
	return exitOK
}

// cliDate reads YYYY-MM-DD in loc (the start of the day, or with end the
// start of the next day) or an RFC 3339 time. Empty is the zero time.
func cliDate(s string, loc *time.Location, end bool) (time.Time, error) {
	if s == "" {
		return time.Time{}, nil
	}
	if t, err := time.ParseInLocation("2006-01-02", s, loc); err == nil {
		if end {
			t = t.AddDate(0, 0, 1)
		}
		return t, nil
	}
	if t, err := time.Parse(time.RFC3339, s); err == nil {
		return t, nil
	}
	return time.Time{}, fmt.Errorf("want a date YYYY-MM-DD or an RFC 3339 time")
}

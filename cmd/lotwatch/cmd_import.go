package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"golang.org/x/term"

	"lotwatch/store"
)

func init() {
	register(command{
		name:    "import",
		summary: "read a CSV, XLSX or JSON file of lots into a process (all or nothing)",
		run:     runImport,
	})
}

const importHelp = `Usage: lotwatch import --db FILE --process NAME [options] FILE.csv
       lotwatch import --db FILE --process NAME [--sheet NAME] [options] FILE.xlsx
       lotwatch import --db FILE [--process NAME] [options] FILE.json

Reads a CSV file or an XLSX workbook of lots into a process. The whole file is checked first:
if any row is wrong, every problem is listed with its line and nothing is
written. Importing the same file again adds nothing. A lot code already
stored with other values is a problem like any other (exit 2, each one
listed with its line, nothing written), unless --skip-conflicts: then the
other lots are imported, each such lot is listed and left as stored, and
the exit status is 1.

Columns (header names in any letter case, in any order):
  lot        the lot code (required; unique within the process)
  inspected  units inspected (required; a whole number above 0)
  defective  nonconforming units, for p and np charts   } exactly one
  defects    defects found, for u and c charts          } of these two
  time       RFC 3339 (2025-03-05T14:30:00+01:00), or YYYY-MM-DD HH:MM in
             the process's time zone; without it the lot gets the import time
  shift, inspector, note   optional text
  any other column named like one of the process's defect categories holds
  that category's count; any other column is refused (with the nearest
  known name) unless --ignore-columns names it
The fields may be separated by commas, semicolons or tabs (found from the
header line). In a file separated by semicolons a comma in a number is a
decimal comma: counts are whole numbers, so it is refused as a fraction.
Times written day-first or month-first (05.03.2025 14:30, 03/05/2025 14:30)
are read only when the process names its date order (lotwatch process
update --date-order); they are never guessed.
The file may be UTF-8 with or without a byte-order mark, with CRLF line
ends and quoted fields. A leading single quote that lotwatch's export put
before text starting with = + - @ tab or CR is removed again.

An XLSX workbook is read from its first worksheet (or --sheet NAME) with
the same columns in its first row; numbers may be stored as numbers or as
text, times as spreadsheet dates (read in the process's time zone) or as
text. Problems are named FILE:SHEET!ROW.

A JSON file is what "lotwatch export --format json" writes: an object
{"process": {"name", "chart", "categories", "time_zone"}, "lots": [...]},
each lot with lot, time, shift, inspected, defective or defects, categories
(an object of counts), inspector and note; a field left out is empty (a lot
without time gets the import time). Without --process the lots go to the
process the file names. Problems name the line of the file.

Options:
  --db FILE        the lotwatch database file, or a postgres:// URL
  --process NAME   the process the lots belong to
  --create         make the process if it does not exist: a p chart for a
                   defective column, a u chart for defects, its defect
                   categories from the extra columns
  --tz ZONE        time zone of a process made with --create (default UTC,
                   or for JSON the file's)
  --format F       csv, xlsx or json (default: json for a FILE ending in
                   .json, else csv or xlsx as the file's first bytes show)
  --sheet NAME     the worksheet of an XLSX file (default the first)
  --ignore-columns A,B
                   columns of the file to skip on purpose (header names)
  --as NAME        the name recorded in the audit trail (default: your user
                   name on this computer)
  --skip-conflicts import the other lots of a file in which some lot codes
                   are stored with other values; those are listed and left
                   as stored
FILE is the file to read; - reads standard input.

Exit status: 0 when every lot was imported or already stored with the
same values (a summary of lots added and unchanged is printed), 2 for bad
input, lots stored with other values among it (each problem on standard
error as FILE:LINE: column, value and reason; nothing written), 1 when
--skip-conflicts left lots as stored (the summary lists them) or the
database fails. A progress line is shown on a terminal for long files.
`

func runImport(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("import")
	dbPath := fs.String("db", "", "")
	process := fs.String("process", "", "")
	create := fs.Bool("create", false, "")
	tz := fs.String("tz", "", "")
	as := fs.String("as", "", "")
	format := fs.String("format", "", "")
	skip := fs.Bool("skip-conflicts", false, "")
	sheet := fs.String("sheet", "", "")
	ignore := fs.String("ignore-columns", "", "")
	pos, code, done := cliParse(fs, args, importHelp, stdout, stderr)
	if done {
		return code
	}
	if *format == "" {
		*format = "csv"
		if len(pos) > 0 && strings.EqualFold(filepath.Ext(pos[0]), ".json") {
			*format = "json"
		}
	}
	probs := cliRequire("import", "db", *dbPath)
	switch *format {
	case "csv", "xlsx":
		probs = append(probs, cliRequire("import", "process", *process)...)
		if *tz == "" {
			*tz = "UTC"
		}
	case "json":
	default:
		probs = append(probs, fmt.Sprintf("--format %q: want csv, xlsx or json", *format))
	}
	switch len(pos) {
	case 0:
		probs = append(probs, "name the file to read (or - for standard input)")
	case 1:
	default:
		probs = append(probs, fmt.Sprintf("one file at a time: unexpected argument %q", pos[1]))
	}
	if len(probs) > 0 {
		return cliProblems(stderr, "import", probs...)
	}
	file := pos[0]
	in := stdin
	name := file
	if file == "-" {
		name = "stdin"
	} else {
		f, err := os.Open(file)
		if err != nil {
			return cliProblems(stderr, "import", fmt.Sprintf("%s: cannot read the file: %v", file, err))
		}
		defer f.Close()
		in = f
	}
	db, code, ok := cliOpen(stderr, "import", *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	opt := store.ImportOptions{Process: *process, Create: *create, TimeZone: *tz, Format: *format, SkipConflicts: *skip, Sheet: *sheet, Ignore: splitList(*ignore)}
	var progressShown bool
	if f, ok := stderr.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
		last := time.Now()
		opt.Progress = func(rows int, bytes int64) {
			if time.Since(last) < 200*time.Millisecond {
				return
			}
			last = time.Now()
			progressShown = true
			fmt.Fprintf(stderr, "\r%s: %d rows read (%.1f MB)…", name, rows, float64(bytes)/1e6)
		}
	}
	res, err := db.Import(context.Background(), cliActor(*as), in, opt)
	if progressShown {
		fmt.Fprint(stderr, "\r\033[K")
	}
	if err != nil {
		code := cliStoreError(stderr, "import", name, err)
		if storedOtherwise(err) {
			fmt.Fprintln(stderr, "lotwatch import: to import the other lots and leave those as stored, run again with --skip-conflicts")
		}
		if cols := unknownColumns(err); len(cols) > 0 {
			fmt.Fprintf(stderr, "lotwatch import: to skip those columns on purpose, run again with --ignore-columns %q; to read them as a lot column or a category, map them: lotwatch process update --map \"HEADER=COLUMN,...\"\n", strings.Join(cols, ","))
		}
		return code
	}
	if res.Created {
		fmt.Fprintf(stdout, "created process %q: %s chart, categories %v, time zone %s\n", res.Process.Name, res.Process.Chart, res.Process.Categories, res.Process.TimeZone)
	}
	nc := len(res.Conflicts) + res.MoreConflicts
	fmt.Fprintf(stdout, "%s: %d rows, %d added, %d unchanged, %d %s\n", name, res.Rows, res.Added, res.Unchanged, nc, plural(nc, "conflict", "conflicts"))
	for _, c := range res.Conflicts {
		fmt.Fprintf(stdout, "conflict: %s:%d: lot %q is stored with other values (%v); the stored lot is kept\n", name, c.Line, c.Lot, joinFields(c.Fields))
	}
	if res.MoreConflicts > 0 {
		fmt.Fprintf(stdout, "conflict: … and %d more\n", res.MoreConflicts)
	}
	if nc > 0 {
		return exitFail
	}
	return exitOK
}

// storedOtherwise reports whether the refused file has lots stored with
// other values.
func storedOtherwise(err error) bool {
	var ve *store.ValidationError
	if errors.As(err, &ve) {
		for _, p := range ve.Problems {
			if strings.HasPrefix(p.Reason, store.StoredOtherwise) {
				return true
			}
		}
	}
	return false
}

// unknownColumns are the header names of the unknown columns of a
// refused file.
func unknownColumns(err error) []string {
	var ve *store.ValidationError
	var cols []string
	if errors.As(err, &ve) {
		for _, p := range ve.Problems {
			if p.UnknownColumn() {
				cols = append(cols, p.Field)
			}
		}
	}
	return cols
}

// splitList splits a comma-separated list of names, trimmed, leaving out
// empty ones.
func splitList(s string) []string {
	var out []string
	for _, v := range strings.Split(s, ",") {
		if v = strings.TrimSpace(v); v != "" {
			out = append(out, v)
		}
	}
	return out
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}

func joinFields(fs []string) string {
	s := ""
	for i, f := range fs {
		if i > 0 {
			s += ", "
		}
		s += f
	}
	return s
}

package store

import (
	"bufio"
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/csv"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"hash"
	"io"
	"strconv"
	"strings"
	"time"

	"lotwatch/spc"
	"lotwatch/store/lotcsv"
)

// ImportOptions says where a lot file goes.
type ImportOptions struct {
	Process string // process name
	// Create makes the process when it does not exist: p chart for a
	// defective column, u chart for defects, categories from the extra
	// columns, time zone TimeZone (default UTC).
	Create   bool
	TimeZone string
	// MaxProblems caps the problems listed (0 means 100); the rest are
	// counted in ValidationError.More.
	MaxProblems int
	// Progress, if set, is called every few thousand rows with the rows
	// and bytes read so far.
	Progress func(rows int, bytes int64)
	// Format is "csv" (the default: CSV separated by commas, semicolons
	// or tabs, or an XLSX workbook, told apart by the file's first bytes),
	// "xlsx" (the same) or "json" (what Export writes with Format "json";
	// Process may then be empty to take the file's).
	Format string
	// SkipConflicts imports the other lots of a file in which some lot
	// codes are stored with other values, reporting those in
	// ImportResult.Conflicts. Without it such a lot is a problem of the
	// file like any other, and nothing is written.
	SkipConflicts bool
	// Sheet is the worksheet of an XLSX file (default the first).
	Sheet string
	// Ignore names columns of the file to skip on purpose; any other
	// column that is neither a lot column nor a category is refused.
	Ignore []string
}

// ImportResult is what an import did.
type ImportResult struct {
	Process       Process
	Created       bool // the process was made by this import
	Rows          int
	Added         int
	Unchanged     int        // already stored with the same values
	Conflicts     []Conflict // stored with other values (SkipConflicts): reported, left as they are
	MoreConflicts int        // conflicts beyond the cap
	FileSHA256    string
}

type countingReader struct {
	r io.Reader
	n int64
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n += int64(n)
	return n, err
}

// bitset marks lot ids met during an import (to tell a code repeated in
// the file); it costs one bit per stored lot, not per row of the file.
type bitset []uint64

func (b *bitset) set(i int64) bool {
	w := int(i / 64)
	for len(*b) <= w {
		*b = append(*b, 0)
	}
	m := uint64(1) << (i % 64)
	was := (*b)[w]&m != 0
	(*b)[w] |= m
	return was
}

// Import reads a lot file (see package lotcsv for the columns; or JSON,
// see importJSON) into a process in one transaction, streaming: memory does not grow with the
// file. The whole file is validated (lotcsv for the form of each cell,
// ValidateLot for the rules) and any problem gives a *ValidationError with
// every problem and its line (up to the cap) and writes nothing. A lot
// code given twice in the file is a problem. A lot already stored with the
// same values is counted as unchanged (so importing a file again adds
// nothing); stored with other values, it is a problem too, unless
// opt.SkipConflicts: then it is a conflict, reported in the result, and
// the other lots are added. A stored lot is never overwritten. Only the columns the file has are
// compared (a file without a time column does not conflict on time). Lots
// without a time get the time of the import.
func (db *DB) Import(ctx context.Context, actor string, r io.Reader, opt ImportOptions) (ImportResult, error) {
	max := opt.MaxProblems
	if max <= 0 {
		max = 100
	}
	switch opt.Format {
	case "", "csv", "xlsx":
	case "json":
		return db.importJSON(ctx, actor, r, opt, max)
	default:
		return ImportResult{}, invalid(Problem{Field: "format", Value: opt.Format, Reason: "is not csv, xlsx or json"})
	}
	var res ImportResult
	err := db.write(ctx, func(w *wtx) error {
		f := &sheetImport{ctx: ctx, w: w, actor: actor, opt: opt, max: max, h: sha256.New()}
		f.cr = &countingReader{r: io.TeeReader(r, f.h)}
		defer f.close()
		if err := f.open(); err != nil {
			return err
		}
		if err := f.readRows(); err != nil {
			return err
		}
		if err := f.record(); err != nil {
			return err
		}
		res = f.res
		return nil
	})
	if err != nil {
		return ImportResult{}, err
	}
	return res, nil
}

// sheetImport is one CSV or XLSX lot file on its way into a process,
// inside one write transaction: the file is either taken whole or not at
// all.
type sheetImport struct {
	ctx   context.Context
	w     *wtx
	actor string
	opt   ImportOptions
	max   int

	h  hash.Hash       // the file's SHA-256, for the audit trail
	cr *countingReader // bytes read, for progress
	rd *lotcsv.Reader
	ve ValidationError // every problem found, up to max

	p   Process   // the process the lots go into
	a   *lotAdder // nil until the process is known
	cmp compareFields
	met bitset // lot codes met in the file
	res ImportResult
}

// close releases the lot adder, if the process was reached.
func (f *sheetImport) close() {
	if f.a != nil {
		f.a.close()
	}
}

// open finds the process, reads the file's header against it (or, for a
// process to be made, takes the categories from the header) and makes the
// process if asked. A retired process takes no lots.
func (f *sheetImport) open() error {
	p, err := processByName(f.w, f.opt.Process)
	create := false
	if errors.Is(err, ErrNotFound) && f.opt.Create {
		create = true
	} else if err != nil {
		return err
	}
	ropt := p.ReadOptions()
	if create {
		tz := f.opt.TimeZone
		if tz == "" {
			tz = "UTC"
		}
		p = Process{Name: f.opt.Process, TimeZone: tz}
		ropt = lotcsv.Options{CategoriesFromHeader: true, Location: p.Location()}
	}
	if err := f.openReader(ropt); err != nil {
		return err
	}
	if create {
		if p, err = f.createProcess(p); err != nil {
			return err
		}
	} else if !p.Active {
		return errRetired(p)
	}
	f.p, f.res.Process = p, p
	f.a, err = f.w.newLotAdder(f.actor, p)
	if err != nil {
		return err
	}
	f.a.skipConflicts = f.opt.SkipConflicts
	f.cmp = f.comparedFields()
	return nil
}

// openReader reads the file's header: a header the reader cannot match
// (an unknown column, a column missing) is the file's problem, with
// nothing written.
func (f *sheetImport) openReader(ropt lotcsv.Options) error {
	ropt.MaxProblems, ropt.Sheet, ropt.Ignore = f.max, f.opt.Sheet, f.opt.Ignore
	rd, err := lotcsv.NewReader(f.cr, ropt)
	if err != nil {
		var ps lotcsv.Problems
		if errors.As(err, &ps) {
			return &ValidationError{Problems: fileProblems(ps)}
		}
		return err
	}
	f.rd = rd
	return nil
}

// createProcess makes p from the file's columns: a u chart when the file
// counts defects, else a p chart; its categories are the file's extra
// columns.
func (f *sheetImport) createProcess(p Process) (Process, error) {
	p.Chart = spc.ChartP
	if f.rd.CountColumn() == lotcsv.ColDefects {
		p.Chart = spc.ChartU
	}
	p.Categories = append([]string(nil), f.rd.Categories()...)
	p, err := f.w.addActiveProcess(f.actor, p)
	if err != nil {
		return p, err
	}
	f.res.Created = true
	return p, nil
}

// comparedFields are the fields a stored lot is compared on: only those
// the file has, so a file without a time column does not conflict on time.
func (f *sheetImport) comparedFields() compareFields {
	rd := f.rd
	return compareFields{time: rd.Has(lotcsv.ColTime), shift: rd.Has(lotcsv.ColShift), inspector: rd.Has(lotcsv.ColInspector),
		note: rd.Has(lotcsv.ColNote), categories: rd.Categories()}
}

// problem notes a bad row, on its sheet, and reading goes on, so that the
// user sees every bad line of the file at once (up to the cap).
func (f *sheetImport) problem(pr Problem) {
	if pr.Line > 0 && pr.Sheet == "" {
		pr.Sheet = f.rd.Sheet()
	}
	if len(f.ve.Problems) < f.max {
		f.ve.Problems = append(f.ve.Problems, pr)
	} else {
		f.ve.More++
	}
}

// readRows reads the file row by row: each row is checked against the
// rules every lot obeys and placed (added, found unchanged, or a
// conflict); a bad row is noted and reading goes on.
func (f *sheetImport) readRows() error {
	for {
		if err := f.ctx.Err(); err != nil {
			return err
		}
		row, err := f.rd.Next()
		if err == io.EOF {
			return nil
		}
		f.res.Rows++
		if f.opt.Progress != nil && f.res.Rows%8192 == 0 {
			f.opt.Progress(f.res.Rows, f.cr.n)
		}
		var rps lotcsv.Problems
		if errors.As(err, &rps) {
			for _, pr := range rps {
				f.problem(Problem(pr))
			}
			continue
		}
		if err != nil {
			return fmt.Errorf("store: import: %w", err)
		}
		if err := f.readRow(row); err != nil {
			return err
		}
	}
}

// readRow checks one well-formed row against the rules every lot of the
// process obeys, naming the count by the file's column, and places it.
func (f *sheetImport) readRow(row lotcsv.Row) error {
	in := LotInput{Lot: row.Lot, Time: row.Time, Shift: row.Shift, Inspected: row.Inspected, Count: row.Count,
		Categories: row.Categories, Inspector: row.Inspector, Note: row.Note}
	if ps := validateLot(f.p, in, f.w.now); len(ps) > 0 {
		for _, pr := range ps {
			if pr.Field == "defective" || pr.Field == "defects" {
				pr.Field = f.rd.CountColumn()
			}
			pr.Line = row.Line
			f.problem(pr)
		}
		return nil
	}
	return f.a.place(&in, row.Line, f.cmp, &f.met, &f.res, f.problem, f.max)
}

// record ends a file read without a problem: the lots are written with
// one audit entry naming the file by its SHA-256, and one alert for the
// import. Any problem in the file and nothing is written.
func (f *sheetImport) record() error {
	if f.opt.Progress != nil {
		f.opt.Progress(f.res.Rows, f.cr.n)
	}
	if len(f.ve.Problems) > 0 {
		return &f.ve
	}
	res := &f.res
	res.FileSHA256 = hex.EncodeToString(f.h.Sum(nil))
	if err := f.a.finish("import", nil, map[string]any{"file_sha256": res.FileSHA256, "rows": res.Rows,
		"unchanged": res.Unchanged, "conflicts": len(res.Conflicts) + res.MoreConflicts}); err != nil {
		return err
	}
	return f.a.queueAlertImport()
}

func processByName(w *wtx, name string) (Process, error) {
	var id int64
	err := w.QueryRow("SELECT id FROM processes WHERE name = ?", name).Scan(&id)
	if errors.Is(err, sql.ErrNoRows) {
		return Process{}, fmt.Errorf("process %q: %w", name, ErrNotFound)
	}
	if err != nil {
		return Process{}, err
	}
	return processByID(w.Tx, id)
}

// ExportOptions selects what Export writes.
type ExportOptions struct {
	From, To time.Time // from ≤ time < to; zero is open
	Format   string    // "csv" (default) or "json"
}

// Export writes the lots of a process (not voided, in time order) as CSV
// or JSON, streaming.
//
// CSV has the columns lot, time, shift, inspected, defective or defects,
// one per category, inspector and note; times are RFC 3339 in the
// process's time zone with all the digits stored, so Import reads the
// file back to the same lots. A text cell or header name that a
// spreadsheet would run as a formula (starting with = + - @, tab or CR)
// is written with a leading single quote, which lotcsv removes again on import (see
// lotcsv.Neutralise and lotcsv.Restore).
//
// JSON is one object {"process": …, "lots": [ … ]} with the same fields
// per lot ("count" named as the CSV column) and no quoting of formulas.
func (db *DB) Export(ctx context.Context, out io.Writer, processID int64, opt ExportOptions) error {
	p, err := db.Process(ctx, processID)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(out, 64<<10)
	switch opt.Format {
	case "", "csv":
		err = exportCSV(ctx, db, bw, p, opt)
	case "json":
		err = exportJSON(ctx, db, bw, p, opt)
	default:
		return invalid(Problem{Field: "format", Value: opt.Format, Reason: "is not csv or json"})
	}
	if err != nil {
		return err
	}
	return bw.Flush()
}

func exportCSV(ctx context.Context, db *DB, out io.Writer, p Process, opt ExportOptions) error {
	cw := csv.NewWriter(out)
	head := []string{lotcsv.ColLot, lotcsv.ColTime, lotcsv.ColShift, lotcsv.ColInspected, CountField(p.Chart)}
	for _, c := range p.Categories {
		// Names are refused as formulas since they can be made; an older
		// database may still hold one. The reader restores it.
		head = append(head, lotcsv.Neutralise(c))
	}
	head = append(head, lotcsv.ColInspector, lotcsv.ColNote)
	if err := cw.Write(head); err != nil {
		return err
	}
	rec := make([]string, len(head))
	nc := len(p.Categories)
	err := db.EachLot(ctx, p.ID, opt.From, opt.To, func(l Lot) error {
		rec[0] = lotcsv.Neutralise(l.Lot)
		rec[1] = l.Time.Format(time.RFC3339Nano)
		rec[2] = lotcsv.Neutralise(l.Shift)
		rec[3] = strconv.FormatInt(l.Inspected, 10)
		rec[4] = strconv.FormatInt(l.Count, 10)
		for i, c := range p.Categories {
			if n, ok := l.Categories[c]; ok {
				rec[5+i] = strconv.FormatInt(n, 10)
			} else {
				rec[5+i] = ""
			}
		}
		rec[5+nc] = lotcsv.Neutralise(l.Inspector)
		rec[6+nc] = lotcsv.Neutralise(l.Note)
		return cw.Write(rec)
	})
	if err != nil {
		return err
	}
	cw.Flush()
	return cw.Error()
}

type jsonLot struct {
	Lot        string           `json:"lot"`
	Time       string           `json:"time"`
	Shift      string           `json:"shift,omitempty"`
	Inspected  int64            `json:"inspected"`
	Defective  *int64           `json:"defective,omitempty"`
	Defects    *int64           `json:"defects,omitempty"`
	Categories map[string]int64 `json:"categories,omitempty"`
	Inspector  string           `json:"inspector,omitempty"`
	Note       string           `json:"note,omitempty"`
}

func exportJSON(ctx context.Context, db *DB, out io.Writer, p Process, opt ExportOptions) error {
	head, _ := json.Marshal(map[string]any{"name": p.Name, "chart": p.Chart, "categories": p.Categories, "time_zone": p.TimeZone})
	if _, err := fmt.Fprintf(out, "{\"process\":%s,\"lots\":[", head); err != nil {
		return err
	}
	first := true
	err := db.EachLot(ctx, p.ID, opt.From, opt.To, func(l Lot) error {
		jl := jsonLot{Lot: l.Lot, Time: l.Time.Format(time.RFC3339Nano), Shift: l.Shift, Inspected: l.Inspected,
			Categories: l.Categories, Inspector: l.Inspector, Note: l.Note}
		c := l.Count
		if p.Chart.CountsUnits() {
			jl.Defective = &c
		} else {
			jl.Defects = &c
		}
		b, err := json.Marshal(jl)
		if err != nil {
			return err
		}
		if !first {
			if _, err := io.WriteString(out, ","); err != nil {
				return err
			}
		}
		first = false
		_, err = fmt.Fprintf(out, "\n%s", b)
		return err
	})
	if err != nil {
		return err
	}
	_, err = io.WriteString(out, "\n]}\n")
	return err
}

// place adds one valid lot of an import file, or, when its code is stored
// already, counts it unchanged or reports the conflict: a problem of the
// file, or with skipConflicts a conflict in the result (never an
// overwrite). A code seen twice in the file is a problem of the file.
func (a *lotAdder) place(in *LotInput, line int, cmp compareFields, met *bitset, res *ImportResult, problem func(Problem), max int) error {
	id, added, err := a.add(in)
	if err != nil {
		return err
	}
	if added {
		met.set(id)
		res.Added++
		return nil
	}
	s, err := a.stored(in.Lot)
	if err != nil {
		return err
	}
	if met.set(s.ID) {
		problem(Problem{Line: line, Field: "lot", Value: in.Lot, Reason: "appears more than once in the file"})
		return nil
	}
	if d := differs(s, *in, cmp); len(d) > 0 {
		if !a.skipConflicts {
			problem(conflictProblem(line, in.Lot, d))
			return nil
		}
		if len(res.Conflicts) < max {
			res.Conflicts = append(res.Conflicts, Conflict{Line: line, Lot: in.Lot, Fields: d})
		} else {
			res.MoreConflicts++
		}
		return nil
	}
	res.Unchanged++
	return nil
}

// StoredOtherwise begins the reason of a problem that is a lot of a file
// whose code is stored with other values (see ImportOptions.SkipConflicts).
const StoredOtherwise = "is already stored with other values"

// conflictProblem is a lot of a file whose code is stored with other
// values, as a problem of the file.
func conflictProblem(line int, lot string, fields []string) Problem {
	return Problem{Line: line, Field: "lot", Value: lot, Reason: StoredOtherwise + " (" + strings.Join(fields, ", ") +
		"); a stored lot is changed by correcting it, which keeps its history"}
}

// Package lotcsv reads lot files: CSV with one inspected lot per row.
//
// The reader streams (one record in memory at a time), matches header
// names case-insensitively after trimming, accepts UTF-8 with or without a
// byte-order mark, CRLF line ends and quoted fields (also spanning several
// lines), and reports every problem with the physical line number of the
// file. It checks the form of each cell (whole numbers, times, UTF-8); the
// rules for the numbers themselves (inspected > 0, count ≤ inspected, …)
// belong to spc.CheckLot and store.ValidateLot, which callers apply.
//
// Columns:
//
//	lot        required  lot code
//	inspected  required  units inspected (whole number)
//	defective  one of    nonconforming units (p, np charts)
//	defects    the two   defects found (u, c charts)
//	time       optional  RFC 3339, or YYYY-MM-DD HH:MM in Options.Location
//	shift      optional
//	inspector  optional
//	note       optional
//
// Any other column is a count of one defect category when its name is one
// of Options.Categories (or Options.CategoriesFromHeader is set); else it
// is ignored and listed by Ignored. An empty category cell means the count
// was not recorded and the category is left out of Row.Categories.
//
// Spreadsheet formula guard: lotwatch's export prefixes a text cell with a
// single quote (') when a spreadsheet would otherwise run it as a formula
// (see Neutralise). The reader undoes exactly that (see Restore), so an
// exported file reads back to the same values.
package lotcsv

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"lotwatch/spc"
)

// Problem is one thing wrong with a lot file: the physical line of the
// file (1 is the header; 0 when there is no line), the column, the value
// as found and why it is wrong.
type Problem struct {
	Line   int
	Field  string
	Value  string
	Reason string
	// Sheet is the worksheet of a spreadsheet file; Line is then its
	// row number (written SHEET!ROW).
	Sheet string
}

// Where is the place of the problem in the file: "line 5", "Lots!5" for
// a row of a worksheet, or "" when there is no line.
func (p Problem) Where() string {
	switch {
	case p.Line <= 0:
		return ""
	case p.Sheet != "":
		return fmt.Sprintf("%s!%d", p.Sheet, p.Line)
	}
	return fmt.Sprintf("line %d", p.Line)
}

func (p Problem) String() string {
	var b strings.Builder
	if w := p.Where(); w != "" {
		b.WriteString(w + ": ")
	}
	if p.Field != "" {
		b.WriteString(p.Field)
		if p.Value != "" {
			fmt.Fprintf(&b, " %q", p.Value)
		}
		b.WriteString(" ")
	} else if p.Value != "" {
		fmt.Fprintf(&b, "%q ", p.Value)
	}
	b.WriteString(p.Reason)
	return b.String()
}

// Problems is the list of problems of one row (from Next) or of a header
// (from NewReader). It is an error.
type Problems []Problem

func (ps Problems) Error() string {
	s := make([]string, len(ps))
	for i, p := range ps {
		s[i] = p.String()
	}
	return strings.Join(s, "; ")
}

// Options tells the reader what the file should hold.
type Options struct {
	// Chart selects the count column: defective for p and np, defects
	// for u and c. Empty accepts either (exactly one must be present);
	// CountColumn tells which was found.
	Chart spc.Chart
	// Categories are the defect categories of the process. A column with
	// one of these names (case-insensitive) is read as that category's
	// count; Row.Categories uses the spelling given here.
	Categories []string
	// CategoriesFromHeader reads every extra column as a category (for a
	// process created from the file).
	CategoriesFromHeader bool
	// Location is the plant's time zone for times written without an
	// offset (YYYY-MM-DD HH:MM). Nil means UTC.
	Location *time.Location
	// MaxProblems caps the problems kept by the reader (Problems); more
	// are only counted (MoreProblems). 0 means 100.
	MaxProblems int
	// DateOrder reads local dates written day-first (DateDayFirst:
	// 05.03.2024 14:30, 05/03/2024 14:30) or month-first (DateMonthFirst:
	// 03/05/2024 14:30). Empty refuses them: the order is never guessed.
	DateOrder string
	// Columns maps the plant's own header names (any letter case) to
	// lotwatch's columns or to categories of the process, e.g.
	// "Qty inspected" → "inspected".
	Columns map[string]string
	// Ignore names columns to skip on purpose. Any other column that is
	// neither a lotwatch column nor a category is refused, so that no
	// count is dropped by a misspelt header.
	Ignore []string
	// IgnoreUnknown skips every unknown column (for analyze, which reads
	// no categories).
	IgnoreUnknown bool
	// Sheet is the worksheet of a spreadsheet file; empty reads the first.
	Sheet string
}

// The date orders of Options.DateOrder.
const (
	DateDayFirst   = "day-first"
	DateMonthFirst = "month-first"
)

// Row is one lot as read from the file.
type Row struct {
	Line       int       // physical line where the record starts
	Lot        string    // lot code, trimmed
	Time       time.Time // zero when the file has no time column
	Shift      string    // trimmed
	Inspected  int64
	Count      int64            // defective or defects
	Categories map[string]int64 // nil when the file has no category columns
	Inspector  string           // trimmed
	Note       string           // as written
}

// The standard column names.
const (
	ColLot       = "lot"
	ColTime      = "time"
	ColShift     = "shift"
	ColInspected = "inspected"
	ColDefective = "defective"
	ColDefects   = "defects"
	ColInspector = "inspector"
	ColNote      = "note"
)

// Reader reads rows of a lot file.
type Reader struct {
	src  records
	opt  Options
	loc  *time.Location
	cols []column // by position
	has  map[string]bool
	// countCol is ColDefective or ColDefects.
	countCol   string
	categories []string
	ignored    []string
	ncols      int
	done       bool
	// delim is the field separator found in the header (0 for a
	// spreadsheet); a semicolon file writes fractions with a decimal comma.
	delim rune

	problems []Problem
	more     int
}

type colKind int

const (
	kindIgnore colKind = iota
	kindLot
	kindTime
	kindShift
	kindInspected
	kindCount
	kindInspector
	kindNote
	kindCategory
)

type column struct {
	kind colKind
	name string // header name as written (trimmed)
	cat  string // category name for kindCategory
}

var bom = []byte{0xEF, 0xBB, 0xBF}

// records are the rows of a lot file with their place in it.
type records interface {
	// Read returns the next record, io.EOF at the end.
	Read() ([]string, error)
	// Line is the line (or row) where field i of the last record starts.
	Line(i int) int
	// Sheet is the worksheet name of a spreadsheet ("" for CSV).
	Sheet() string
}

// csvRecords are the records of a CSV file.
type csvRecords struct{ cr *csv.Reader }

func (c csvRecords) Read() ([]string, error) { return c.cr.Read() }
func (c csvRecords) Line(i int) int          { l, _ := c.cr.FieldPos(i); return l }
func (c csvRecords) Sheet() string           { return "" }

// delimiters are the field separators a lot file may use, in the order
// they are preferred when a header splits on several.
var delimiters = []rune{',', ';', '\t'}

// NewReader reads the header of a lot file from r: CSV separated by
// commas, semicolons or tabs (found from the header line), or an XLSX
// workbook (found from its first bytes; see NewXLSXReader). A bad header
// is an error of type Problems naming the column.
func NewReader(r io.Reader, opt Options) (*Reader, error) {
	br := bufio.NewReaderSize(r, 64<<10)
	if b, err := br.Peek(len(zipMagic)); err == nil && string(b) == zipMagic {
		return NewXLSXReader(br, opt)
	}
	if b, err := br.Peek(3); err == nil && string(b) == string(bom) {
		br.Discard(3)
	}
	delim, err := headerDelimiter(br)
	if err != nil {
		return nil, err
	}
	cr := csv.NewReader(br)
	cr.Comma = delim
	cr.ReuseRecord = true
	cr.FieldsPerRecord = -1
	return newReader(csvRecords{cr}, delim, opt)
}

// headerDelimiter finds the separator of the header line: the one of
// comma, semicolon and tab found most often outside quotes. A header on
// none of them is a problem that shows the header as read.
func headerDelimiter(br *bufio.Reader) (rune, error) {
	b, _ := br.Peek(br.Size())
	if i := bytes.IndexByte(b, '\n'); i >= 0 {
		b = b[:i]
	}
	line := strings.TrimRight(string(b), "\r")
	counts := map[rune]int{}
	quoted := false
	for _, c := range line {
		if c == '"' {
			quoted = !quoted
		} else if !quoted {
			counts[c]++
		}
	}
	best := delimiters[0]
	for _, d := range delimiters {
		if counts[d] > counts[best] {
			best = d
		}
	}
	if counts[best] > 0 || strings.TrimSpace(line) == "" {
		return best, nil
	}
	shown := strings.ToValidUTF8(line, "\uFFFD")
	if len(shown) > 80 {
		shown = shown[:80] + "…"
	}
	return 0, Problems{{Line: 1, Value: shown, Reason: "is the header, and it does not split into columns: lotwatch tried a comma, a semicolon and a tab as the separator (the header names lot, inspected, and defective or defects)"}}
}

func newReader(src records, delim rune, opt Options) (*Reader, error) {
	rd := &Reader{src: src, opt: opt, loc: opt.Location, has: map[string]bool{}, delim: delim}
	if rd.loc == nil {
		rd.loc = time.UTC
	}
	if rd.opt.MaxProblems <= 0 {
		rd.opt.MaxProblems = 100
	}
	head, err := src.Read()
	if err == io.EOF {
		return nil, rd.stamp(Problems{{Line: 1, Reason: "the file is empty: it needs a header line naming the columns (lot, inspected, defective or defects, …)"}})
	}
	if err != nil {
		return nil, rd.stamp(csvProblem(err))
	}
	if err := rd.header(head); err != nil {
		return nil, rd.stamp(err.(Problems))
	}
	return rd, nil
}

// stamp names the worksheet in problems of a spreadsheet.
func (rd *Reader) stamp(ps Problems) Problems {
	if sh := rd.src.Sheet(); sh != "" {
		for i := range ps {
			ps[i].Sheet = sh
		}
	}
	return ps
}

// Sheet is the worksheet read from a spreadsheet file ("" for CSV).
// Callers naming a row's problems set Problem.Sheet to it.
func (rd *Reader) Sheet() string { return rd.src.Sheet() }

func (rd *Reader) header(head []string) error {
	var ps Problems
	line := rd.src.Line(0)
	cats := map[string]string{}
	for _, c := range rd.opt.Categories {
		cats[strings.ToLower(strings.TrimSpace(c))] = c
	}
	mapped := map[string]string{}
	for from, to := range rd.opt.Columns {
		mapped[strings.ToLower(strings.TrimSpace(from))] = strings.ToLower(strings.TrimSpace(to))
	}
	ignore := map[string]bool{}
	for _, c := range rd.opt.Ignore {
		ignore[strings.ToLower(strings.TrimSpace(c))] = true
	}
	seen := map[string]int{}
	rd.ncols = len(head)
	for i, h := range head {
		if !utf8.ValidString(h) {
			ps = append(ps, Problem{Line: line, Field: fmt.Sprintf("column %d", i+1), Value: strings.ToValidUTF8(h, "\uFFFD"), Reason: "is not valid UTF-8 text"})
			rd.cols = append(rd.cols, column{})
			continue
		}
		name := Restore(strings.TrimSpace(h)) // a guarded category name, as exported
		key := strings.ToLower(name)
		if key == "" {
			ps = append(ps, Problem{Line: line, Field: fmt.Sprintf("column %d", i+1), Reason: "has no name in the header"})
			rd.cols = append(rd.cols, column{})
			continue
		}
		if j, dup := seen[key]; dup {
			ps = append(ps, Problem{Line: line, Field: name, Reason: fmt.Sprintf("appears twice in the header (columns %d and %d)", j+1, i+1)})
			rd.cols = append(rd.cols, column{})
			continue
		}
		ign := ignore[key]
		if to, ok := mapped[key]; ok && !ign {
			key = to
			if j, dup := seen[key]; dup {
				ps = append(ps, Problem{Line: line, Field: name, Value: key, Reason: fmt.Sprintf("is mapped to a column the header already has (column %d)", j+1)})
				rd.cols = append(rd.cols, column{})
				continue
			}
		}
		seen[key] = i
		col := column{name: name}
		if ign {
			rd.ignored = append(rd.ignored, name)
			rd.cols = append(rd.cols, col)
			continue
		}
		switch key {
		case ColLot:
			col.kind = kindLot
		case ColTime:
			col.kind = kindTime
		case ColShift:
			col.kind = kindShift
		case ColInspected:
			col.kind = kindInspected
		case ColDefective, ColDefects:
			col.kind = kindCount
		case ColInspector:
			col.kind = kindInspector
		case ColNote:
			col.kind = kindNote
		default:
			if c, ok := cats[key]; ok {
				col.kind, col.cat = kindCategory, c
			} else if rd.opt.CategoriesFromHeader {
				col.kind, col.cat = kindCategory, name
			}
			switch {
			case col.kind == kindCategory:
				rd.categories = append(rd.categories, col.cat)
			case rd.opt.IgnoreUnknown:
				rd.ignored = append(rd.ignored, name)
			default:
				ps = append(ps, rd.unknown(line, name))
			}
		}
		if col.kind != kindIgnore && col.kind != kindCategory {
			rd.has[key] = true
		}
		rd.cols = append(rd.cols, col)
	}
	for _, req := range []string{ColLot, ColInspected} {
		if !rd.has[req] {
			ps = append(ps, Problem{Line: line, Field: req, Reason: "column is missing from the header"})
		}
	}
	hasDefective, hasDefects := rd.has[ColDefective], rd.has[ColDefects]
	want := ""
	if rd.opt.Chart != "" {
		want = ColDefects
		if rd.opt.Chart.CountsUnits() {
			want = ColDefective
		}
	}
	switch {
	case hasDefective && hasDefects:
		ps = append(ps, Problem{Line: line, Field: ColDefects, Reason: "column is given beside defective: give exactly one count column (defective for p and np charts, defects for u and c charts)"})
	case !hasDefective && !hasDefects:
		if want == "" {
			ps = append(ps, Problem{Line: line, Field: "defective", Reason: "column is missing from the header: give defective (nonconforming units, p and np charts) or defects (u and c charts)"})
		} else {
			ps = append(ps, Problem{Line: line, Field: want, Reason: fmt.Sprintf("column is missing from the header (a %s chart counts %s)", rd.opt.Chart, want)})
		}
	default:
		rd.countCol = ColDefective
		if hasDefects {
			rd.countCol = ColDefects
		}
		if want != "" && want != rd.countCol {
			ps = append(ps, Problem{Line: line, Field: rd.countCol, Reason: fmt.Sprintf("column does not fit a %s chart, which needs a %s column", rd.opt.Chart, want)})
		}
	}
	if len(ps) > 0 {
		return ps
	}
	return nil
}

// unknown is the problem of a column that is neither a lotwatch column
// nor a category of the process: refused, so that a misspelt category
// does not drop its counts, with the nearest known name as a hint.
func (rd *Reader) unknown(line int, name string) Problem {
	known := []string{ColLot, ColTime, ColShift, ColInspected, ColDefective, ColDefects, ColInspector, ColNote}
	known = append(known, rd.opt.Categories...)
	reason := unknownReason
	if near := Nearest(name, known); near != "" {
		reason += fmt.Sprintf(" (did you mean %s?)", near)
	}
	reason += "; rename or map it, or ignore it on purpose"
	return Problem{Line: line, Field: name, Reason: reason}
}

// unknownReason starts the reason of an unknown column's problem.
const unknownReason = "is neither a lotwatch column nor a defect category of the process"

// UnknownColumn reports whether p is the refusal of an unknown column of
// the header (Field is then the column's header name), which a user may
// map or ignore on purpose.
func (p Problem) UnknownColumn() bool { return strings.HasPrefix(p.Reason, unknownReason) }

// Nearest is the name of known closest to name by edit distance (letter
// case aside), when it is close enough to be a likely misspelling: at
// most a third of the letters differ (two at least). "" when none is.
func Nearest(name string, known []string) string {
	a := strings.ToLower(name)
	best, bestD := "", -1
	for _, k := range known {
		d := editDistance(a, strings.ToLower(k))
		if bestD < 0 || d < bestD {
			best, bestD = k, d
		}
	}
	if bestD < 0 || bestD > max(2, utf8.RuneCountInString(a)/3) {
		return ""
	}
	return best
}

// editDistance is the Levenshtein distance between a and b in letters
// (insertions, deletions and substitutions, each counting one).
func editDistance(a, b string) int {
	ra, rb := []rune(a), []rune(b)
	prev := make([]int, len(rb)+1)
	cur := make([]int, len(rb)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(ra); i++ {
		cur[0] = i
		for j := 1; j <= len(rb); j++ {
			cost := 1
			if ra[i-1] == rb[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(rb)]
}

// CountColumn is the count column found: "defective" or "defects".
func (rd *Reader) CountColumn() string { return rd.countCol }

// Has reports whether the file has the standard column name (lower case,
// e.g. "time" or "note"). Callers comparing a row with a stored lot leave
// out what the file does not state.
func (rd *Reader) Has(name string) bool { return rd.has[name] }

// Categories are the category columns found, in file order, spelled as in
// Options.Categories (or as in the header with CategoriesFromHeader).
func (rd *Reader) Categories() []string { return rd.categories }

// Ignored are the header names of the columns the reader skips (named in
// Options.Ignore, or any unknown one with Options.IgnoreUnknown).
func (rd *Reader) Ignored() []string { return rd.ignored }

// Problems are the problems found so far, at most Options.MaxProblems.
func (rd *Reader) Problems() []Problem { return rd.problems }

// MoreProblems counts problems found beyond Options.MaxProblems.
func (rd *Reader) MoreProblems() int { return rd.more }

func (rd *Reader) keep(ps Problems) {
	for _, p := range ps {
		if len(rd.problems) < rd.opt.MaxProblems {
			rd.problems = append(rd.problems, p)
		} else {
			rd.more++
		}
	}
}

// Next returns the next row. At the end it returns io.EOF. A row with bad
// cells returns an error of type Problems (all the row's problems) and
// reading may go on with the next call. A file that cannot be parsed as CSV
// past some point (e.g. an unterminated quote) returns Problems for that
// point and then io.EOF. Any other error is from the underlying reader.
func (rd *Reader) Next() (Row, error) {
	if rd.done {
		return Row{}, io.EOF
	}
	rec, err := rd.src.Read()
	if err == io.EOF {
		rd.done = true
		return Row{}, io.EOF
	}
	if err != nil {
		var pe *csv.ParseError
		if errors.As(err, &pe) {
			rd.done = true
			ps := csvProblem(err)
			rd.keep(ps)
			return Row{}, ps
		}
		return Row{}, err
	}
	line := rd.src.Line(0)
	row := Row{Line: line}
	var ps Problems
	if len(rec) != rd.ncols {
		ps = append(ps, Problem{Line: line, Reason: fmt.Sprintf("has %d fields but the header has %d columns", len(rec), rd.ncols)})
	}
	for i, v := range rec {
		if i >= len(rd.cols) {
			break
		}
		col := rd.cols[i]
		if col.kind == kindIgnore {
			continue
		}
		fl := rd.src.Line(i)
		if !utf8.ValidString(v) {
			ps = append(ps, Problem{Line: fl, Field: col.name, Value: strings.ToValidUTF8(v, "\uFFFD"), Reason: "is not valid UTF-8 text"})
			continue
		}
		switch col.kind {
		case kindLot:
			row.Lot = Restore(strings.TrimSpace(v))
			if row.Lot == "" {
				ps = append(ps, Problem{Line: fl, Field: col.name, Reason: "is empty: every lot needs its lot code"})
			}
		case kindShift:
			row.Shift = Restore(strings.TrimSpace(v))
		case kindInspector:
			row.Inspector = Restore(strings.TrimSpace(v))
		case kindNote:
			row.Note = Restore(v)
		case kindTime:
			t, err := rd.parseTime(v, i)
			if err != nil {
				ps = append(ps, Problem{Line: fl, Field: col.name, Value: v, Reason: err.Error()})
			}
			row.Time = t
		case kindInspected, kindCount:
			n, err := parseCount(v, rd.delim == ';')
			if err != nil {
				ps = append(ps, Problem{Line: fl, Field: col.name, Value: v, Reason: err.Error()})
			}
			if col.kind == kindInspected {
				row.Inspected = n
			} else {
				row.Count = n
			}
		case kindCategory:
			if strings.TrimSpace(v) == "" {
				continue // not recorded
			}
			n, err := parseCount(v, rd.delim == ';')
			if err != nil {
				ps = append(ps, Problem{Line: fl, Field: col.name, Value: v, Reason: err.Error()})
				continue
			}
			if row.Categories == nil {
				row.Categories = make(map[string]int64, len(rd.categories))
			}
			row.Categories[col.cat] = n
		}
	}
	if len(ps) > 0 {
		ps = rd.stamp(ps)
		rd.keep(ps)
		return row, ps
	}
	return row, nil
}

// parseTime reads the time of field i: a spreadsheet date (from an XLSX
// file) or text in the forms of ParseLocalTime.
func (rd *Reader) parseTime(v string, i int) (time.Time, error) {
	if x, ok := rd.src.(*xlsxRecords); ok {
		if t, ok, err := x.date(i, rd.loc); ok {
			return t, err
		}
	}
	return ParseLocalTime(v, rd.loc, rd.opt.DateOrder)
}

func csvProblem(err error) Problems {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		reason := pe.Err.Error()
		if errors.Is(pe.Err, csv.ErrQuote) {
			reason = "has a stray double quote (\") in an unquoted field; quote the whole field and double the quote inside it"
		} else if errors.Is(pe.Err, csv.ErrBareQuote) {
			reason = "has a stray double quote (\") in an unquoted field; quote the whole field and double the quote inside it"
		}
		if errors.Is(pe.Err, csv.ErrQuote) && pe.Line != pe.StartLine {
			reason = fmt.Sprintf("has a quoted field opened on line %d that is never closed", pe.StartLine)
		}
		return Problems{{Line: pe.Line, Field: fmt.Sprintf("byte %d of the line", pe.Column), Reason: reason}}
	}
	return Problems{{Reason: err.Error()}}
}

// ParseCount reads a whole number: optional minus sign and decimal digits
// only, surrounding spaces ignored. Fractions, exponents, thousands
// separators and numbers beyond int64 are errors saying so.
func ParseCount(s string) (int64, error) { return parseCount(s, false) }

// parseCount is ParseCount; with decimalComma (a semicolon-separated
// file, as spreadsheets write where the comma marks fractions) a comma is
// read as a decimal mark and a point as a thousands separator.
func parseCount(s string, decimalComma bool) (int64, error) {
	t := strings.TrimSpace(s)
	if t == "" {
		return 0, errors.New("is empty: a whole number is needed")
	}
	digits := strings.TrimPrefix(t, "-")
	for i := 0; i < len(digits); i++ {
		c := digits[i]
		if c >= '0' && c <= '9' {
			continue
		}
		if decimalComma && i > 0 {
			switch c {
			case ',':
				return 0, errors.New("is not a whole number (no fractions; in a file separated by semicolons the comma is read as a decimal comma)")
			case '.':
				return 0, errors.New("is not a whole number (write it without thousands separators)")
			}
		}
		switch {
		case c == '.' && i > 0:
			return 0, errors.New("is not a whole number (no fractions)")
		case (c == 'e' || c == 'E') && i > 0:
			return 0, errors.New("is not a whole number (no exponents: write all digits)")
		case c == ',' || c == '_' || c == '\'' || c == ' ':
			return 0, errors.New("is not a whole number (write it without thousands separators)")
		}
		return 0, errors.New("is not a whole number")
	}
	if digits == "" {
		return 0, errors.New("is not a whole number")
	}
	n, err := strconv.ParseInt(t, 10, 64)
	if err != nil {
		if errors.Is(err, strconv.ErrRange) {
			return 0, fmt.Errorf("is too large (at most %d)", int64(1<<63-1))
		}
		return 0, errors.New("is not a whole number")
	}
	return n, nil
}

// LocalLayout is the time format without an offset, read in the plant's
// time zone.
const LocalLayout = "2006-01-02 15:04"

// ParseTime reads an RFC 3339 time (with offset) or YYYY-MM-DD HH:MM in loc.
// An empty cell is the zero time.
func ParseTime(s string, loc *time.Location) (time.Time, error) {
	return ParseLocalTime(s, loc, "")
}

// localForms are the day-first layouts (Go reference time: day 2, month
// 1) with points, slashes or hyphens between the parts, one or two digits
// for day, month and hour, with or without seconds.
var localForms = func() []string {
	var out []string
	for _, sep := range []string{".", "/", "-"} {
		for _, sec := range []string{"", ":05"} {
			out = append(out, "2"+sep+"1"+sep+"2006 15:04"+sec)
		}
	}
	return out
}()

// monthFirst turns a day-first layout into the month-first one.
func monthFirst(layout string) string {
	sep := layout[1:2]
	return "1" + sep + "2" + layout[3:]
}

// ParseLocalTime reads an RFC 3339 time (with offset), YYYY-MM-DD HH:MM
// (seconds optional) in loc, and, when order is DateDayFirst or
// DateMonthFirst, the local forms such as 05.03.2024 14:30 or
// 03/05/2024 14:30 in that order. A local form without an order is
// refused: 05/03/2024 is 5 March in one plant and 3 May in another.
// An empty cell is the zero time.
func ParseLocalTime(s string, loc *time.Location, order string) (time.Time, error) {
	t := strings.TrimSpace(s)
	if t == "" {
		return time.Time{}, nil
	}
	if tt, err := time.Parse(time.RFC3339Nano, t); err == nil {
		return tt, nil
	}
	if loc == nil {
		loc = time.UTC
	}
	for _, layout := range []string{LocalLayout, LocalLayout + ":05", "2006-01-02T15:04:05", "2006-01-02T15:04"} {
		if tt, err := time.ParseInLocation(layout, t, loc); err == nil {
			return tt, nil
		}
	}
	for _, layout := range localForms {
		dmy, errD := time.ParseInLocation(layout, t, loc)
		mdy, errM := time.ParseInLocation(monthFirst(layout), t, loc)
		switch {
		case errD != nil && errM != nil:
			continue
		case order == DateDayFirst && errD == nil:
			return dmy, nil
		case order == DateMonthFirst && errM == nil:
			return mdy, nil
		case order == DateDayFirst || order == DateMonthFirst:
			return time.Time{}, fmt.Errorf("is not a date written %s (the process's date order)", order)
		}
		return time.Time{}, errors.New("is a date written day-first or month-first, and lotwatch does not guess which: set the process's date order (day-first or month-first), or write YYYY-MM-DD HH:MM")
	}
	return time.Time{}, errors.New("is not a time: write RFC 3339 (2024-03-05T14:30:00+01:00) or YYYY-MM-DD HH:MM in the plant's time zone")
}

// formulaStart reports whether a spreadsheet would run a cell starting
// with c as a formula (= + - @, tab, carriage return). Source: OWASP,
// "CSV Injection" (common practice, no formal standard).
func formulaStart(c byte) bool {
	switch c {
	case '=', '+', '-', '@', '\t', '\r':
		return true
	}
	return false
}

// guarded reports whether s is quotes followed by a formula start, i.e.
// whether Neutralise must prefix it (so that Restore can tell a prefix
// it added from a quote the user wrote).
func guarded(s string) bool {
	t := strings.TrimLeft(s, "'")
	return t != "" && formulaStart(t[0])
}

// Neutralise prefixes s with a single quote when a spreadsheet would run it
// as a formula: when it starts with = + - @ tab or CR, possibly after
// quotes. Restore(Neutralise(s)) == s for every s.
func Neutralise(s string) string {
	if guarded(s) {
		return "'" + s
	}
	return s
}

// Restore undoes Neutralise: it drops one leading quote when what follows
// is quotes and then a formula start. Any other text is returned unchanged.
func Restore(s string) string {
	if len(s) > 1 && s[0] == '\'' && guarded(s[1:]) {
		return s[1:]
	}
	return s
}

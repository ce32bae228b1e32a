package store

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"hash"
	"io"
	"sort"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"lotwatch/spc"
	"lotwatch/store/lotcsv"
)

// jsonLotIn is one lot of a JSON lot file, as Export writes it; pointers
// tell a field left out from a zero.
type jsonLotIn struct {
	Lot        *string          `json:"lot"`
	Time       *string          `json:"time"`
	Shift      string           `json:"shift"`
	Inspected  *int64           `json:"inspected"`
	Defective  *int64           `json:"defective"`
	Defects    *int64           `json:"defects"`
	Categories map[string]int64 `json:"categories"`
	Inspector  string           `json:"inspector"`
	Note       string           `json:"note"`
}

// jsonProcessIn is the "process" object of a JSON lot file.
type jsonProcessIn struct {
	Name       string   `json:"name"`
	Chart      string   `json:"chart"`
	Categories []string `json:"categories"`
	TimeZone   string   `json:"time_zone"`
}

// lineTracker counts the lines of what a json.Decoder has consumed: it
// notes where the newlines are in the bytes read ahead and forgets them
// once the decoder has passed them, so memory stays with the read-ahead.
type lineTracker struct {
	r       io.Reader
	read    int64   // bytes handed to the decoder
	pending []int64 // offsets of newlines not yet passed
	lines   int     // newlines passed
}

func (lt *lineTracker) Read(p []byte) (int, error) {
	n, err := lt.r.Read(p)
	for i, b := range p[:n] {
		if b == '\n' {
			lt.pending = append(lt.pending, lt.read+int64(i))
		}
	}
	lt.read += int64(n)
	return n, err
}

// lineAt returns the 1-based line of the byte at offset off (offsets only
// grow from call to call).
func (lt *lineTracker) lineAt(off int64) int {
	k := 0
	for k < len(lt.pending) && lt.pending[k] < off {
		k++
	}
	lt.lines += k
	lt.pending = lt.pending[k:]
	return lt.lines + 1
}

// importJSON is Import for the JSON that Export writes:
// {"process": {"name", "chart", "categories", "time_zone"}, "lots": [ … ]},
// each lot with lot, time (RFC 3339), shift, inspected, defective or
// defects, categories, inspector and note. It is read as a stream (the
// token API of encoding/json, one lot at a time). opt.Process may be
// empty: then the file's process name is used. A field left out is the
// empty value (Export leaves out empty ones), but for time, which is then
// the time of the import and not compared with a stored lot.
func (db *DB) importJSON(ctx context.Context, actor string, r io.Reader, opt ImportOptions, max int) (ImportResult, error) {
	var res ImportResult
	err := db.write(ctx, func(w *wtx) error {
		f := newJSONImport(ctx, w, actor, r, opt, max)
		defer f.close()
		if err := f.readFile(); err != nil {
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

// jsonImport is one JSON lot file on its way into a process, inside one
// write transaction: the file is either taken whole or not at all.
type jsonImport struct {
	ctx   context.Context
	w     *wtx
	actor string
	opt   ImportOptions
	max   int

	h   hash.Hash       // the file's SHA-256, for the audit trail
	cr  *countingReader // bytes read, for progress
	lt  *lineTracker    // lines read, for problems
	dec *json.Decoder
	ve  ValidationError // every problem found, up to max

	header  *jsonProcessIn // the file's "process" object, if it came
	sawLots bool
	p       Process   // the process the lots go into
	a       *lotAdder // nil until the process is known
	met     bitset    // lot codes met in the file
	res     ImportResult
}

// newJSONImport starts reading r: the hash and the line count see every
// byte the decoder reads.
func newJSONImport(ctx context.Context, w *wtx, actor string, r io.Reader, opt ImportOptions, max int) *jsonImport {
	f := &jsonImport{ctx: ctx, w: w, actor: actor, opt: opt, max: max, h: sha256.New()}
	f.cr = &countingReader{r: io.TeeReader(r, f.h)}
	f.lt = &lineTracker{r: f.cr}
	f.dec = json.NewDecoder(f.lt)
	return f
}

// close releases the lot adder, if the process was reached.
func (f *jsonImport) close() {
	if f.a != nil {
		f.a.close()
	}
}

// problem notes a bad lot and reading goes on, so that the user sees every
// bad line of the file at once (up to the cap), not one per attempt.
func (f *jsonImport) problem(pr Problem) {
	if len(f.ve.Problems) < f.max {
		f.ve.Problems = append(f.ve.Problems, pr)
	} else {
		f.ve.More++
	}
}

// line is the line the decoder has reached, for a problem of the file's
// shape.
func (f *jsonImport) line() int {
	return f.lt.lineAt(f.dec.InputOffset())
}

// syntax is the problem of a file that is not JSON, on the line of the
// fault; reading stops there.
func (f *jsonImport) syntax(err error) error {
	return jsonSyntaxError(f.lt, f.dec, err)
}

// delim reads the bracket or brace the shape of a lot file wants next:
// anything else means this is not a lot file, and reading stops.
func (f *jsonImport) delim(want json.Delim, what string) error {
	tok, err := f.dec.Token()
	if err != nil {
		return f.syntax(err)
	}
	if d, ok := tok.(json.Delim); !ok || d != want {
		return invalid(Problem{Line: f.line(), Reason: fmt.Sprintf("is not the JSON of a lot file: want %s, found %v", what, tok)})
	}
	return nil
}

// readFile reads the file's one object, its parts in order, and checks
// that nothing follows it and that it had lots at all.
func (f *jsonImport) readFile() error {
	if err := f.delim('{', `an object {"process": …, "lots": […]}`); err != nil {
		return err
	}
	for f.dec.More() {
		tok, err := f.dec.Token()
		if err != nil {
			return f.syntax(err)
		}
		if err := f.readPart(tok); err != nil {
			return err
		}
	}
	if err := f.delim('}', "the end of the file's object"); err != nil {
		return err
	}
	if _, err := f.dec.Token(); err != io.EOF {
		return invalid(Problem{Line: f.line(), Reason: "has more after the end of the file's object"})
	}
	if !f.sawLots {
		return invalid(Problem{Field: "lots", Reason: "is missing: the file has no array of lots"})
	}
	return nil
}

// readPart reads the part of the file named by key: the process header,
// or the lots. A lot file has nothing else.
func (f *jsonImport) readPart(key json.Token) error {
	name, _ := key.(string)
	switch name {
	case "process":
		return f.readHeader()
	case "lots":
		return f.readLotArray()
	}
	return invalid(Problem{Line: f.line(), Field: fmt.Sprint(key), Reason: `is not a part of a lot file (want "process" and "lots")`})
}

// readHeader reads the "process" object. It must come before the lots:
// the lots are checked against the process as they stream past.
func (f *jsonImport) readHeader() error {
	if f.header != nil || f.sawLots {
		return invalid(Problem{Line: f.line(), Field: "process", Reason: `must come once, before "lots"`})
	}
	f.header = &jsonProcessIn{}
	if err := f.dec.Decode(f.header); err != nil {
		return f.syntax(err)
	}
	return nil
}

// readLotArray reaches the process the lots go into, then reads the array
// of lots.
func (f *jsonImport) readLotArray() error {
	if f.sawLots {
		return invalid(Problem{Line: f.line(), Field: "lots", Reason: "is given twice"})
	}
	f.sawLots = true
	if err := f.resolve(); err != nil {
		return err
	}
	if err := f.delim('[', `an array of lots after "lots"`); err != nil {
		return err
	}
	if err := f.readLots(); err != nil {
		return err
	}
	return f.delim(']', `the end of the array of lots`)
}

// resolve finds (or with Create makes) the process once its name is known,
// and refuses a file whose lots were counted for another chart.
func (f *jsonImport) resolve() error {
	name, err := f.processName()
	if err != nil {
		return err
	}
	if f.p, err = f.findProcess(name); err != nil {
		return err
	}
	if h := f.header; h != nil && h.Chart != "" && spc.Chart(h.Chart) != f.p.Chart {
		return invalid(Problem{Field: "chart", Value: h.Chart, Reason: fmt.Sprintf("is not the chart of process %q (%s): its lots are counted otherwise", f.p.Name, f.p.Chart)})
	}
	f.res.Process = f.p
	f.a, err = f.w.newLotAdder(f.actor, f.p)
	if f.a != nil {
		f.a.skipConflicts = f.opt.SkipConflicts
	}
	return err
}

// processName is the process the user named, else the one the file
// names: lots never go into a process nobody named.
func (f *jsonImport) processName() (string, error) {
	name := f.opt.Process
	if name == "" && f.header != nil {
		name = f.header.Name
	}
	if name == "" {
		return "", invalid(Problem{Field: "process", Reason: `is not named: give the process, or put the "process" object before "lots"`})
	}
	return name, nil
}

// findProcess is the active process name; with Create, a process not yet
// there is made from the file's header. A retired process takes no lots.
func (f *jsonImport) findProcess(name string) (Process, error) {
	p, err := processByName(f.w, name)
	switch {
	case errors.Is(err, ErrNotFound) && f.opt.Create:
		return f.createProcess(name)
	case err != nil:
		return p, err
	case !p.Active:
		return p, errRetired(p)
	}
	return p, nil
}

// createProcess makes the process name as the file's header describes it:
// a p chart unless the header says otherwise, the header's categories,
// and the time zone the user gave, else the header's.
func (f *jsonImport) createProcess(name string) (Process, error) {
	p := Process{Name: name, Chart: spc.ChartP, TimeZone: f.opt.TimeZone}
	if h := f.header; h != nil {
		if h.Chart != "" {
			p.Chart = spc.Chart(h.Chart)
		}
		p.Categories = append([]string(nil), h.Categories...)
		if p.TimeZone == "" {
			p.TimeZone = h.TimeZone
		}
	}
	p, err := f.w.addActiveProcess(f.actor, p)
	if err != nil {
		return p, err
	}
	f.res.Created = true
	return p, nil
}

// record ends a file read without a problem: the lots are written with
// one audit entry naming the file by its SHA-256, and one alert for the
// import. Any problem in the file and nothing is written.
func (f *jsonImport) record() error {
	if f.opt.Progress != nil {
		f.opt.Progress(f.res.Rows, f.cr.n)
	}
	if len(f.ve.Problems) > 0 {
		return &f.ve
	}
	res := &f.res
	res.FileSHA256 = hex.EncodeToString(f.h.Sum(nil))
	if err := f.a.finish("import", nil, map[string]any{"file_sha256": res.FileSHA256, "rows": res.Rows, "format": "json",
		"unchanged": res.Unchanged, "conflicts": len(res.Conflicts) + res.MoreConflicts}); err != nil {
		return err
	}
	return f.a.queueAlertImport()
}

// readLots reads the elements of the lots array, one lot at a time: each
// is decoded, checked against the process and placed (added, found
// unchanged, or a conflict); a bad lot is noted and reading goes on.
func (f *jsonImport) readLots() error {
	cmp := allFields(f.p)
	for f.dec.More() {
		if err := f.ctx.Err(); err != nil {
			return err
		}
		var raw json.RawMessage
		if err := f.dec.Decode(&raw); err != nil {
			return f.syntax(err)
		}
		line := f.lt.lineAt(f.dec.InputOffset() - 1)
		f.res.Rows++
		if f.opt.Progress != nil && f.res.Rows%8192 == 0 {
			f.opt.Progress(f.res.Rows, f.cr.n)
		}
		in, ps := f.lotInput(raw)
		if len(ps) > 0 {
			for _, pr := range ps {
				pr.Line = line
				f.problem(pr)
			}
			continue
		}
		if err := f.a.place(&in, line, cmp, &f.met, &f.res, f.problem, f.max); err != nil {
			return err
		}
	}
	return nil
}

// lotInput turns one lot of the file into the lot to store, or says what
// is wrong with it: first its JSON, then its fields, then the rules every
// lot obeys (counts within the lot, a known shift, …).
func (f *jsonImport) lotInput(raw json.RawMessage) (LotInput, []Problem) {
	jl, ps := decodeJSONLot(raw)
	if len(ps) > 0 {
		return LotInput{}, ps
	}
	in, ps := jsonLotInput(jl, f.p)
	if len(ps) > 0 {
		return in, ps
	}
	return in, jsonLotRuleProblems(f.p, in, f.w.now)
}

// decodeJSONLot reads one lot object. A field of the wrong kind, a field
// a lot does not have, or text that would not be stored as sent is a
// problem naming the field.
func decodeJSONLot(raw json.RawMessage) (jsonLotIn, []Problem) {
	var jl jsonLotIn
	ld := json.NewDecoder(bytes.NewReader(raw))
	ld.DisallowUnknownFields()
	if err := ld.Decode(&jl); err != nil {
		var te *json.UnmarshalTypeError
		switch {
		case errors.As(err, &te):
			return jl, []Problem{{Field: te.Field, Reason: fmt.Sprintf("must be a %s (the file has a %s)", jsonKind(te.Type.Kind().String()), te.Value)}}
		case strings.HasPrefix(err.Error(), "json: unknown field "):
			field := strings.Trim(strings.TrimPrefix(err.Error(), "json: unknown field "), `"`)
			return jl, []Problem{{Field: field, Reason: "is not a field of a lot (lot, time, shift, inspected, defective or defects, categories, inspector, note)"}}
		default:
			return jl, []Problem{{Reason: "is not a lot: " + strings.TrimPrefix(err.Error(), "json: ")}}
		}
	}
	if reason := JSONTextProblem(raw); reason != "" {
		return jl, []Problem{{Field: jsonTextField(raw), Reason: reason}}
	}
	return jl, nil
}

// jsonCountFields names the count a lot of p gives (defective on a chart
// that counts units, defects on one that counts defects) and the one it
// must not give.
func jsonCountFields(p Process) (count, other string) {
	if p.Chart.CountsUnits() {
		return "defective", "defects"
	}
	return "defects", "defective"
}

// jsonLotInput fills the lot to store from the file's lot: the lot code,
// the inspected count and the chart's count must be there, the time is
// read in the process's time zone, and the count of the other kind of
// chart is refused rather than dropped.
func jsonLotInput(jl jsonLotIn, p Process) (LotInput, []Problem) {
	var ps []Problem
	in := LotInput{Shift: jl.Shift, Categories: jl.Categories, Inspector: jl.Inspector, Note: jl.Note}
	if jl.Lot == nil {
		ps = append(ps, Problem{Field: "lot", Reason: "is missing: every lot needs its lot code"})
	} else {
		in.Lot = *jl.Lot
	}
	if jl.Time != nil {
		t, err := lotcsv.ParseTime(*jl.Time, p.Location())
		if err != nil {
			ps = append(ps, Problem{Field: "time", Value: *jl.Time, Reason: err.Error()})
		}
		in.Time = t
	}
	if jl.Inspected == nil {
		ps = append(ps, Problem{Field: "inspected", Reason: "is missing"})
	} else {
		in.Inspected = *jl.Inspected
	}
	countField, otherField := jsonCountFields(p)
	count, other := jl.Defective, jl.Defects
	if countField == "defects" {
		count, other = jl.Defects, jl.Defective
	}
	switch {
	case other != nil:
		ps = append(ps, Problem{Field: otherField, Value: fmt.Sprint(*other), Reason: fmt.Sprintf("is not counted on the %s chart of process %q: give %s", p.Chart, p.Name, countField)})
	case count == nil:
		ps = append(ps, Problem{Field: countField, Reason: "is missing"})
	default:
		in.Count = *count
	}
	return in, ps
}

// jsonLotRuleProblems checks in against the rules every lot of p obeys,
// naming each field as the file names it: the count by the chart's field,
// a category as categories.NAME.
func jsonLotRuleProblems(p Process, in LotInput, now time.Time) []Problem {
	countField, _ := jsonCountFields(p)
	var ps []Problem
	for _, pr := range validateLot(p, in, now) {
		switch pr.Field {
		case "defective", "defects":
			pr.Field = countField
		case "lot", "time", "shift", "inspected", "inspector", "note":
		default: // a category
			pr.Field = "categories." + pr.Field
		}
		ps = append(ps, pr)
	}
	return ps
}

// JSONTextProblem says why the strings of the JSON text raw cannot be
// stored as sent, or returns "". encoding/json turns bytes that are not
// UTF-8 and unpaired UTF-16 surrogate escapes (\ud800 alone) into U+FFFD,
// as RFC 8259 §8.2 allows; stored, the text would differ from what was
// sent without a word. raw must be valid JSON (json.Valid), so that a
// backslash can only be an escape inside a string. The API and the JSON
// import both refuse such text.
func JSONTextProblem(raw []byte) string {
	if !utf8.Valid(raw) {
		return "is not valid UTF-8 text (RFC 8259 §8.1)"
	}
	hex4 := func(at int) (rune, bool) {
		if at+4 > len(raw) {
			return 0, false
		}
		n, err := strconv.ParseUint(string(raw[at:at+4]), 16, 32)
		return rune(n), err == nil
	}
	for i := 0; i < len(raw); i++ {
		if raw[i] != '\\' {
			continue
		}
		i++ // the escaped character; only \u is followed by more
		if i >= len(raw) || raw[i] != 'u' {
			continue
		}
		r, ok := hex4(i + 1)
		if !ok {
			continue // json.Valid has checked every escape
		}
		i += 4
		if r < 0xd800 || r >= 0xe000 {
			continue
		}
		if r < 0xdc00 && i+2 < len(raw) && raw[i+1] == '\\' && raw[i+2] == 'u' {
			if lo, ok := hex4(i + 3); ok && lo >= 0xdc00 && lo < 0xe000 {
				i += 6 // a high and a low surrogate: one character
				continue
			}
		}
		return fmt.Sprintf("contains \\u%04x, half of a UTF-16 surrogate pair without its other half, which is not text (RFC 8259 §8.2)", r)
	}
	return ""
}

// jsonTextField names the field of the lot object raw whose text
// JSONTextProblem refuses ("" when it is not one field's).
func jsonTextField(raw json.RawMessage) string {
	var m map[string]json.RawMessage
	if json.Unmarshal(raw, &m) != nil {
		return ""
	}
	names := make([]string, 0, len(m))
	for k := range m {
		names = append(names, k)
	}
	sort.Strings(names)
	for _, k := range names {
		if JSONTextProblem(m[k]) != "" {
			return k
		}
	}
	return ""
}

// jsonSyntaxError is the problem of a lot file that dec cannot read,
// on the line of the fault.
func jsonSyntaxError(lt *lineTracker, dec *json.Decoder, err error) error {
	line := lt.lineAt(dec.InputOffset())
	var se *json.SyntaxError
	if errors.As(err, &se) {
		line = lt.lineAt(se.Offset - 1)
	}
	if err == io.EOF || errors.Is(err, io.ErrUnexpectedEOF) {
		err = errors.New("the file ends early")
	}
	return invalid(Problem{Line: line, Reason: "is not the JSON of a lot file: " + strings.TrimPrefix(err.Error(), "json: ")})
}

func jsonKind(k string) string {
	switch k {
	case "int64":
		return "whole number"
	case "string":
		return "text"
	case "map":
		return "object of category counts"
	}
	return k
}

package store

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"sort"
	"strconv"
	"strings"
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
		res = ImportResult{}
		h := sha256.New()
		cr := &countingReader{r: io.TeeReader(r, h)}
		lt := &lineTracker{r: cr}
		dec := json.NewDecoder(lt)
		ve := &ValidationError{}
		problem := func(pr Problem) {
			if len(ve.Problems) < max {
				ve.Problems = append(ve.Problems, pr)
			} else {
				ve.More++
			}
		}
		syntax := func(err error) error { return jsonSyntaxError(lt, dec, err) }
		delim := func(want json.Delim, what string) error {
			tok, err := dec.Token()
			if err != nil {
				return syntax(err)
			}
			if d, ok := tok.(json.Delim); !ok || d != want {
				return invalid(Problem{Line: lt.lineAt(dec.InputOffset()), Reason: fmt.Sprintf("is not the JSON of a lot file: want %s, found %v", what, tok)})
			}
			return nil
		}
		if err := delim('{', `an object {"process": …, "lots": […]}`); err != nil {
			return err
		}
		var (
			p       Process
			a       *lotAdder
			header  *jsonProcessIn
			sawLots bool
			met     bitset
		)
		defer func() {
			if a != nil {
				a.close()
			}
		}()
		// resolve finds (or with Create makes) the process once its name
		// is known: from the options, else from the file.
		resolve := func() error {
			name := opt.Process
			if name == "" && header != nil {
				name = header.Name
			}
			if name == "" {
				return invalid(Problem{Field: "process", Reason: `is not named: give the process, or put the "process" object before "lots"`})
			}
			var err error
			p, err = processByName(w, name)
			switch {
			case errors.Is(err, ErrNotFound) && opt.Create:
				p = Process{Name: name, Chart: spc.ChartP, TimeZone: opt.TimeZone}
				if header != nil {
					if header.Chart != "" {
						p.Chart = spc.Chart(header.Chart)
					}
					p.Categories = append([]string(nil), header.Categories...)
					if p.TimeZone == "" {
						p.TimeZone = header.TimeZone
					}
				}
				if p, err = w.addActiveProcess(actor, p); err != nil {
					return err
				}
				res.Created = true
			case err != nil:
				return err
			case !p.Active:
				return errRetired(p)
			}
			if header != nil && header.Chart != "" && spc.Chart(header.Chart) != p.Chart {
				return invalid(Problem{Field: "chart", Value: header.Chart, Reason: fmt.Sprintf("is not the chart of process %q (%s): its lots are counted otherwise", p.Name, p.Chart)})
			}
			res.Process = p
			a, err = w.newLotAdder(actor, p)
			if a != nil {
				a.skipConflicts = opt.SkipConflicts
			}
			return err
		}
		for dec.More() {
			tok, err := dec.Token()
			if err != nil {
				return syntax(err)
			}
			key, _ := tok.(string)
			switch key {
			case "process":
				if header != nil || sawLots {
					return invalid(Problem{Line: lt.lineAt(dec.InputOffset()), Field: "process", Reason: `must come once, before "lots"`})
				}
				header = &jsonProcessIn{}
				if err := dec.Decode(header); err != nil {
					return syntax(err)
				}
			case "lots":
				if sawLots {
					return invalid(Problem{Line: lt.lineAt(dec.InputOffset()), Field: "lots", Reason: "is given twice"})
				}
				sawLots = true
				if err := resolve(); err != nil {
					return err
				}
				if err := delim('[', `an array of lots after "lots"`); err != nil {
					return err
				}
				if err := importJSONLots(ctx, w, dec, lt, p, a, &met, &res, problem, max, opt.Progress, cr); err != nil {
					return err
				}
				if err := delim(']', `the end of the array of lots`); err != nil {
					return err
				}
			default:
				return invalid(Problem{Line: lt.lineAt(dec.InputOffset()), Field: fmt.Sprint(tok), Reason: `is not a part of a lot file (want "process" and "lots")`})
			}
		}
		if err := delim('}', "the end of the file's object"); err != nil {
			return err
		}
		if _, err := dec.Token(); err != io.EOF {
			return invalid(Problem{Line: lt.lineAt(dec.InputOffset()), Reason: "has more after the end of the file's object"})
		}
		if !sawLots {
			return invalid(Problem{Field: "lots", Reason: "is missing: the file has no array of lots"})
		}
		if opt.Progress != nil {
			opt.Progress(res.Rows, cr.n)
		}
		if len(ve.Problems) > 0 {
			return ve
		}
		res.FileSHA256 = hex.EncodeToString(h.Sum(nil))
		if err := a.finish("import", nil, map[string]any{"file_sha256": res.FileSHA256, "rows": res.Rows, "format": "json",
			"unchanged": res.Unchanged, "conflicts": len(res.Conflicts) + res.MoreConflicts}); err != nil {
			return err
		}
		return a.queueAlertImport()
	})
	if err != nil {
		return ImportResult{}, err
	}
	return res, nil
}

// importJSONLots reads the elements of the lots array.
func importJSONLots(ctx context.Context, w *wtx, dec *json.Decoder, lt *lineTracker, p Process, a *lotAdder, met *bitset,
	res *ImportResult, problem func(Problem), max int, progress func(int, int64), cr *countingReader) error {
	countField, otherField := "defects", "defective"
	if p.Chart.CountsUnits() {
		countField, otherField = "defective", "defects"
	}
	cmp := allFields(p)
	loc := p.Location()
	for dec.More() {
		if err := ctx.Err(); err != nil {
			return err
		}
		var raw json.RawMessage
		if err := dec.Decode(&raw); err != nil {
			return jsonSyntaxError(lt, dec, err)
		}
		line := lt.lineAt(dec.InputOffset() - 1)
		res.Rows++
		if progress != nil && res.Rows%8192 == 0 {
			progress(res.Rows, cr.n)
		}
		var jl jsonLotIn
		ld := json.NewDecoder(bytes.NewReader(raw))
		ld.DisallowUnknownFields()
		if err := ld.Decode(&jl); err != nil {
			var te *json.UnmarshalTypeError
			switch {
			case errors.As(err, &te):
				problem(Problem{Line: line, Field: te.Field, Reason: fmt.Sprintf("must be a %s (the file has a %s)", jsonKind(te.Type.Kind().String()), te.Value)})
			case strings.HasPrefix(err.Error(), "json: unknown field "):
				f := strings.Trim(strings.TrimPrefix(err.Error(), "json: unknown field "), `"`)
				problem(Problem{Line: line, Field: f, Reason: "is not a field of a lot (lot, time, shift, inspected, defective or defects, categories, inspector, note)"})
			default:
				problem(Problem{Line: line, Reason: "is not a lot: " + strings.TrimPrefix(err.Error(), "json: ")})
			}
			continue
		}
		if reason := JSONTextProblem(raw); reason != "" {
			problem(Problem{Line: line, Field: jsonTextField(raw), Reason: reason})
			continue
		}
		var ps []Problem
		in := LotInput{Shift: jl.Shift, Categories: jl.Categories, Inspector: jl.Inspector, Note: jl.Note}
		if jl.Lot == nil {
			ps = append(ps, Problem{Field: "lot", Reason: "is missing: every lot needs its lot code"})
		} else {
			in.Lot = *jl.Lot
		}
		if jl.Time != nil {
			t, err := lotcsv.ParseTime(*jl.Time, loc)
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
		if len(ps) == 0 {
			for _, pr := range validateLot(p, in, w.now) {
				switch pr.Field {
				case "defective", "defects":
					pr.Field = countField
				case "lot", "time", "shift", "inspected", "inspector", "note":
				default: // a category
					pr.Field = "categories." + pr.Field
				}
				ps = append(ps, pr)
			}
		}
		if len(ps) > 0 {
			for _, pr := range ps {
				pr.Line = line
				problem(pr)
			}
			continue
		}
		if err := a.place(&in, line, cmp, met, res, problem, max); err != nil {
			return err
		}
	}
	return nil
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

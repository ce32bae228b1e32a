package web

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"regexp"
	"strconv"
	"strings"
	"time"

	"lotwatch/store"
)

// maxPostLots is the most lots one request may carry.
const maxPostLots = 10000

// lotFields are the fields a posted lot may have. "defective" (p, np
// charts) and "defects" (u, c charts) are two names for the count; a lot
// carries one of them.
var lotFields = map[string]bool{
	"lot": true, "inspected": true, "defective": true, "defects": true, "time": true,
	"shift": true, "inspector": true, "note": true, "categories": true,
}

// jsonInteger is a JSON number without fraction or exponent.
var jsonInteger = regexp.MustCompile(`^-?(0|[1-9][0-9]*)$`)

// lotProblems collects what is wrong with posted lots: the first
// maxAPIProblems of them, and a count of the rest.
type lotProblems struct {
	array bool // the body was an array: problems carry the index
	list  []apiProblem
	more  int
}

func (lp *lotProblems) add(index int, field, value, reason string) {
	if len(lp.list) >= maxAPIProblems {
		lp.more++
		return
	}
	p := apiProblem{Field: field, Value: value, Reason: reason}
	if lp.array {
		i := index
		p.Index = &i
	}
	lp.list = append(lp.list, p)
}

// Error makes the problems a refusal of the request as bad input (400):
// the API answers with the list (fail).
func (lp *lotProblems) Error() string { return lp.message() }

func (lp *lotProblems) Unwrap() error { return store.ErrInvalid }

// any reports whether a problem was found.
func (lp *lotProblems) any() bool { return len(lp.list) > 0 }

// answer is the error answer listing the problems.
func (lp *lotProblems) answer() apiError {
	return apiError{Error: lp.message(), Problems: lp.list, More: lp.more}
}

// message is the problems in one line, each naming the lot and field,
// ending with how many more there are beyond those listed.
func (lp *lotProblems) message() string {
	var b strings.Builder
	b.WriteString("invalid lot")
	if len(lp.list) > 1 || lp.array {
		b.WriteString("s; nothing was stored")
	} else {
		b.WriteString("; nothing was stored")
	}
	for i, p := range lp.list {
		if i == 0 {
			b.WriteString(": ")
		} else {
			b.WriteString("; ")
		}
		if p.Index != nil {
			fmt.Fprintf(&b, "[%d].", *p.Index)
		}
		b.WriteString(p.Field)
		if p.Value != "" {
			fmt.Fprintf(&b, " %q", p.Value)
		}
		b.WriteString(" ")
		b.WriteString(p.Reason)
	}
	if lp.more > 0 {
		fmt.Fprintf(&b, "; … and %d more", lp.more)
	}
	return b.String()
}

// decodeLots reads one lot object or an array of them. Times without a
// zone are in loc. A body that cannot be read at all is an error; lots
// with bad fields come back as problems, all of them at once.
func decodeLots(body io.Reader, loc *time.Location) ([]store.LotInput, *lotProblems, error) {
	raw, err := io.ReadAll(body)
	if err != nil {
		return nil, nil, fmt.Errorf("reading the request body: %w", err)
	}
	raw = bytes.TrimSpace(raw)
	if len(raw) == 0 {
		return nil, nil, errors.New("the request body is empty; send a lot object or an array of them")
	}
	if !json.Valid(raw) {
		return nil, nil, errors.New("the request body is not valid JSON")
	}
	lp := &lotProblems{}
	var items []json.RawMessage
	switch raw[0] {
	case '[':
		lp.array = true
		if err := json.Unmarshal(raw, &items); err != nil {
			return nil, nil, fmt.Errorf("the request body: %w", err)
		}
		if len(items) == 0 {
			return nil, nil, errors.New("the array of lots is empty")
		}
		if len(items) > maxPostLots {
			return nil, nil, fmt.Errorf("%d lots in one request; send at most %d", len(items), maxPostLots)
		}
	case '{':
		items = []json.RawMessage{raw}
	default:
		return nil, nil, errors.New("the request body must be a lot object or an array of lot objects")
	}
	out := make([]store.LotInput, len(items))
	for i, it := range items {
		out[i] = decodeLot(i, it, loc, lp)
	}
	return out, lp, nil
}

// decodeLot reads one lot object, strictly: unknown or repeated fields,
// strings where numbers belong and fractions where whole numbers belong
// are problems naming the field.
func decodeLot(i int, raw json.RawMessage, loc *time.Location, lp *lotProblems) store.LotInput {
	var in store.LotInput
	dec := json.NewDecoder(bytes.NewReader(raw))
	tok, err := dec.Token()
	if d, ok := tok.(json.Delim); err != nil || !ok || d != '{' {
		lp.add(i, "lot", truncate(string(raw)), "each lot must be a JSON object")
		return in
	}
	seen := map[string]bool{}
	var haveCount string
	for dec.More() {
		tok, err := dec.Token()
		if err != nil {
			lp.add(i, "lot", "", "cannot read the object: "+err.Error())
			return in
		}
		key := tok.(string)
		var v json.RawMessage
		if err := dec.Decode(&v); err != nil {
			lp.add(i, key, "", "cannot read the value: "+err.Error())
			return in
		}
		if !lotFields[key] {
			lp.add(i, key, "", "is not a lot field (known: lot, inspected, defective or defects, time, shift, inspector, note, categories)")
			continue
		}
		if seen[key] {
			lp.add(i, key, "", "is given twice")
			continue
		}
		seen[key] = true
		switch key {
		case "lot", "shift", "inspector", "note":
			s, ok := jsonString(v)
			if !ok {
				lp.add(i, key, truncate(string(v)), "must be a string")
				continue
			}
			if problem := store.JSONTextProblem(v); problem != "" {
				lp.add(i, key, truncate(s), problem)
				continue
			}
			switch key {
			case "lot":
				in.Lot = s
			case "shift":
				in.Shift = s
			case "inspector":
				in.Inspector = s
			case "note":
				in.Note = s
			}
		case "inspected":
			n, ok := jsonInt(v)
			if !ok {
				lp.add(i, key, truncate(string(v)), "must be a whole number (a JSON integer)")
				continue
			}
			in.Inspected = n
		case "defective", "defects":
			if haveCount != "" {
				lp.add(i, key, "", "give either \"defective\" or \"defects\", not both")
				continue
			}
			haveCount = key
			n, ok := jsonInt(v)
			if !ok {
				lp.add(i, key, truncate(string(v)), "must be a whole number (a JSON integer)")
				continue
			}
			in.Count = n
		case "time":
			s, ok := jsonString(v)
			if !ok {
				lp.add(i, key, truncate(string(v)), "must be a string with an RFC 3339 time")
				continue
			}
			t, err := parseLotTime(s, loc)
			if err != nil {
				lp.add(i, key, s, err.Error())
				continue
			}
			in.Time = t
		case "categories":
			cats, problem := jsonCategories(v)
			if problem != "" {
				lp.add(i, key, truncate(string(v)), problem)
				continue
			}
			in.Categories = cats
		}
	}
	if !seen["lot"] {
		lp.add(i, "lot", "", "is missing")
	}
	if !seen["inspected"] {
		lp.add(i, "inspected", "", "is missing")
	}
	if haveCount == "" {
		lp.add(i, "defective", "", "is missing (or \"defects\" for u and c charts)")
	}
	return in
}

// parseLotTime accepts an RFC 3339 time, or a local date and time
// (YYYY-MM-DDTHH:MM[:SS], a space also allowed) or a date in the process's
// time zone.
func parseLotTime(s string, loc *time.Location) (time.Time, error) {
	if t, err := time.Parse(time.RFC3339Nano, s); err == nil {
		return t, nil
	}
	for _, layout := range []string{"2006-01-02T15:04:05", "2006-01-02 15:04:05", "2006-01-02T15:04", "2006-01-02 15:04", time.DateOnly} {
		if t, err := time.ParseInLocation(layout, s, loc); err == nil {
			return t, nil
		}
	}
	return time.Time{}, errors.New("is not an RFC 3339 time (2006-01-02T15:04:05Z07:00) or a local YYYY-MM-DD HH:MM")
}

func jsonString(v json.RawMessage) (string, bool) {
	if len(v) == 0 || v[0] != '"' {
		return "", false
	}
	var s string
	if err := json.Unmarshal(v, &s); err != nil {
		return "", false
	}
	return s, true
}

func jsonInt(v json.RawMessage) (int64, bool) {
	if !jsonInteger.Match(v) {
		return 0, false
	}
	n, err := strconv.ParseInt(string(v), 10, 64)
	return n, err == nil
}

func jsonCategories(v json.RawMessage) (map[string]int64, string) {
	if len(v) == 0 || v[0] != '{' {
		return nil, "must be an object of category name to whole number, e.g. {\"scratch\": 2}"
	}
	var m map[string]json.RawMessage
	if err := json.Unmarshal(v, &m); err != nil {
		return nil, "cannot be read: " + err.Error()
	}
	out := make(map[string]int64, len(m))
	for k, raw := range m {
		n, ok := jsonInt(raw)
		if !ok {
			return nil, fmt.Sprintf("category %q: %s must be a whole number", k, truncate(string(raw)))
		}
		out[k] = n
	}
	return out, ""
}

func truncate(s string) string {
	if len(s) > 60 {
		return s[:57] + "..."
	}
	return s
}

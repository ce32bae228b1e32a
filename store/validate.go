package store

import (
	"errors"
	"fmt"
	"sort"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"

	"lotwatch/spc"
)

// This file holds what the store accepts as a lot, and the text rules
// that lots share with processes, limit sets, users and reasons. The
// counts of a lot are checked by spc.CheckLot, the one count rule of
// every entry point (the command line's analyze uses it directly).

// maxFuture is how far ahead of now a lot time may lie (clock skew
// between an inspection station and the server; common practice, no
// source).
const maxFuture = 24 * time.Hour

var earliest = time.Date(1970, 1, 2, 0, 0, 0, 0, time.UTC)

// CountField is the name of the count field for the chart: "defective"
// for p and np, "defects" for u and c.
func CountField(c spc.Chart) string {
	if c.CountsUnits() {
		return "defective"
	}
	return "defects"
}

// ValidateLot is the one validation routine for a lot, shared by the form,
// the API and import: the counts by spc.CheckLot; each category count
// must be one of the process's categories, not negative and, for p and
// np, at most the number inspected; text fields must be clean UTF-8 (lot
// code, shift and inspector without surrounding spaces or control
// characters); the time must not be before 1970 nor more than a day ahead.
// Problems name the field as the lot file's column does.
func ValidateLot(p Process, in LotInput) []Problem {
	return validateLot(p, in, time.Now())
}

func validateLot(p Process, in LotInput, now time.Time) []Problem {
	var ps []Problem
	if in.Lot == "" {
		ps = append(ps, Problem{Field: "lot", Reason: "is empty: every lot needs its lot code"})
	} else {
		ps = append(ps, checkText("lot", in.Lot, 100, true)...)
	}
	ps = append(ps, checkText("shift", in.Shift, 100, true)...)
	ps = append(ps, checkText("inspector", in.Inspector, 100, true)...)
	ps = append(ps, checkText("note", in.Note, 4000, false)...)
	if err := spc.CheckLot(p.Chart, in.Inspected, in.Count); err != nil {
		var fe *spc.FieldError
		if errors.As(err, &fe) {
			ps = append(ps, Problem{Field: fe.Field, Value: fe.Value, Reason: fe.Reason})
		} else {
			ps = append(ps, Problem{Field: CountField(p.Chart), Reason: err.Error()})
		}
	}
	if !in.Time.IsZero() {
		switch {
		case in.Time.Before(earliest):
			ps = append(ps, Problem{Field: "time", Value: in.Time.Format(time.RFC3339), Reason: "is before 1970"})
		case in.Time.After(now.Add(maxFuture)):
			ps = append(ps, Problem{Field: "time", Value: in.Time.Format(time.RFC3339), Reason: "is more than a day in the future"})
		}
	}
	if len(in.Categories) > 0 {
		names := make([]string, 0, len(in.Categories))
		for c := range in.Categories {
			names = append(names, c)
		}
		sort.Strings(names)
		for _, c := range names {
			n := in.Categories[c]
			known := false
			for _, pc := range p.Categories {
				if pc == c {
					known = true
					break
				}
			}
			switch {
			case !known:
				ps = append(ps, Problem{Field: c, Value: fmt.Sprint(n), Reason: fmt.Sprintf("is not a defect category of process %q (it has: %s)", p.Name, strings.Join(p.Categories, ", "))})
			case n < 0:
				ps = append(ps, Problem{Field: c, Value: fmt.Sprint(n), Reason: "must not be negative"})
			case p.Chart.CountsUnits() && n > in.Inspected && in.Inspected > 0:
				ps = append(ps, Problem{Field: c, Value: fmt.Sprint(n), Reason: fmt.Sprintf("is more than the %d units inspected", in.Inspected)})
			}
		}
	}
	return ps
}

// isFormat reports an invisible Unicode format character (category Cf:
// U+200B zero-width space, U+202E right-to-left override, U+00AD soft
// hyphen, …): in a code or a name it makes two different texts look
// the same.
func isFormat(r rune) bool { return unicode.Is(unicode.Cf, r) }

// formatProblem names the first format character of v.
func formatProblem(field, v string) Problem {
	var r rune
	if i := strings.IndexFunc(v, isFormat); i >= 0 {
		r, _ = utf8.DecodeRuneInString(v[i:])
	}
	return Problem{Field: field, Value: v, Reason: fmt.Sprintf("must not contain invisible format characters (here %U), which make two texts look the same", r)}
}

// checkText checks a text field: valid UTF-8, at most max bytes, no NUL;
// when trimmed (codes and names) also no surrounding spaces, control
// characters or invisible format characters.
func checkText(field, v string, max int, trimmed bool) []Problem {
	switch {
	case !utf8.ValidString(v):
		return []Problem{{Field: field, Value: strings.ToValidUTF8(v, "\uFFFD"), Reason: "is not valid UTF-8 text"}}
	case len(v) > max:
		return []Problem{{Field: field, Value: v[:32] + "…", Reason: fmt.Sprintf("is longer than %d bytes", max)}}
	case trimmed && strings.TrimSpace(v) != v:
		return []Problem{{Field: field, Value: v, Reason: "must not start or end with spaces"}}
	case trimmed && strings.IndexFunc(v, unicode.IsControl) >= 0:
		return []Problem{{Field: field, Value: v, Reason: "must not contain control characters (tabs, line breaks)"}}
	case trimmed && strings.IndexFunc(v, isFormat) >= 0:
		return []Problem{formatProblem(field, v)}
	case strings.IndexByte(v, 0) >= 0:
		return []Problem{{Field: field, Value: strings.ReplaceAll(v, "\x00", `\0`), Reason: "must not contain NUL characters"}}
	}
	return nil
}

// checkReason checks the reason a user gives for a change: not empty
// (empty completes the message), and clean text of at most 4000 bytes,
// like a note.
func checkReason(reason, empty string) []Problem {
	if strings.TrimSpace(reason) == "" {
		return []Problem{{Field: "reason", Reason: "is empty: " + empty}}
	}
	return checkText("reason", reason, 4000, false)
}

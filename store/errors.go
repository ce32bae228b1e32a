package store

import (
	"errors"
	"fmt"
	"strings"

	"lotwatch/store/lotcsv"
)

// Sentinel errors. Errors returned by the store wrap one of them where it
// applies; test with errors.Is.
var (
	ErrNotFound       = errors.New("not found")
	ErrConflict       = errors.New("conflict")
	ErrInvalid        = errors.New("invalid input")
	ErrBadCredentials = errors.New("unknown user or wrong password")
	ErrClosed         = errors.New("store is closed")
	// ErrNewerSchema is returned by Open for a database written by a newer
	// lotwatch.
	ErrNewerSchema = errors.New("database was written by a newer lotwatch")
)

// Problem is one thing wrong with an input: the line of a file (0 if
// none), the field, the value as given and why it is wrong. A problem the
// lot file reader finds (lotcsv.Problem, with the same fields) becomes one
// by conversion, so that problems of a file and of its values are listed
// together.
type Problem struct {
	Line   int
	Field  string
	Value  string
	Reason string
	// Sheet is the worksheet of a spreadsheet file; Line is then its row.
	Sheet string
}

// String is the problem as one line, written as the lot file reader
// writes its own: `line 3: inspected "0" must be …` (`Lots!3: …` for a
// row of a worksheet).
func (p Problem) String() string { return lotcsv.Problem(p).String() }

// Where is the place of the problem in the file: "line 5", "Lots!5", or
// "" when there is no line.
func (p Problem) Where() string { return lotcsv.Problem(p).Where() }

// UnknownColumn reports whether p refuses a column of the file that is
// neither a lot column nor a category (see lotcsv.Problem.UnknownColumn).
func (p Problem) UnknownColumn() bool { return lotcsv.Problem(p).UnknownColumn() }

// fileProblems are the lot file reader's problems as the store's.
func fileProblems(ps lotcsv.Problems) []Problem {
	out := make([]Problem, len(ps))
	for i, p := range ps {
		out[i] = Problem(p)
	}
	return out
}

// ValidationError lists every problem of an input. errors.Is(err,
// ErrInvalid) holds. More counts problems left out of Problems beyond a
// cap (for long files).
type ValidationError struct {
	Problems []Problem
	More     int
}

func (e *ValidationError) Error() string {
	var b strings.Builder
	for i, p := range e.Problems {
		if i > 0 {
			b.WriteString("\n")
		}
		b.WriteString(p.String())
	}
	if e.More > 0 {
		fmt.Fprintf(&b, "\n… and %d more", e.More)
	}
	return b.String()
}

// Is makes errors.Is(err, ErrInvalid) true.
func (e *ValidationError) Is(target error) bool { return target == ErrInvalid }

// ConflictError is a lot code already stored with other values.
type ConflictError struct {
	Conflicts []Conflict
}

// Conflict is one lot whose code is already stored with different values.
type Conflict struct {
	Line   int // file line, 0 if none
	Lot    string
	Fields []string // the fields that differ (e.g. "inspected", "note", "category dent", "voided")
}

func (c Conflict) String() string {
	s := fmt.Sprintf("lot %q is already stored with other values (%s)", c.Lot, strings.Join(c.Fields, ", "))
	if c.Line > 0 {
		s = fmt.Sprintf("line %d: %s", c.Line, s)
	}
	return s
}

func (e *ConflictError) Error() string {
	s := make([]string, len(e.Conflicts))
	for i, c := range e.Conflicts {
		s[i] = c.String()
	}
	return strings.Join(s, "\n")
}

// Is makes errors.Is(err, ErrConflict) true.
func (e *ConflictError) Is(target error) bool { return target == ErrConflict }

func invalid(ps ...Problem) error { return &ValidationError{Problems: ps} }

package lotcsv

import (
	"bytes"
	"errors"
	"io"
	"strings"
	"testing"
	"time"
	"unicode/utf8"

	"lotwatch/spc"
)

// fuzzCharts are the chart settings FuzzReader tries; "" accepts either
// count column.
var fuzzCharts = []spc.Chart{"", spc.ChartP, spc.ChartNP, spc.ChartU, spc.ChartC}

// FuzzReader feeds arbitrary bytes to the reader. Whatever the file, the
// reader must not panic or loop, and what it returns must keep its
// promises: a header problem or rows; every row without problems has a
// lot code, clean UTF-8 text and a line after the header; every problem
// has a reason, a line that is not before the previous row's, and a
// value that is valid UTF-8 (it is printed to the user).
func FuzzReader(f *testing.F) {
	for _, s := range []string{
		"lot,inspected,defective\nA1,100,2\n",
		"\xEF\xBB\xBFLot , Inspected,DEFECTS, dent\r\nA1,10,3,1\r\nA2,10,0,\r\n",
		"lot,time,shift,inspected,defective,note\nA1,2025-03-05T14:30:00+01:00,early,50,1,\"a, \"\"b\"\"\nc\"\n",
		"lot,time,inspected,defective\nA1,2025-03-05 14:30,50,1\nA2,yesterday,50,1\n",
		"lot,inspected,defective\n'=HYPERLINK(1),10,1\n''-2,10,1\n",
		"lot,inspected,defective\nA1,1e3,1\nA2,1.5,1\nA3,-4,1\nA4,9223372036854775808,1\nA5,1 000,0\n",
		"lot,inspected,defective,defects\n",
		"lot,lot,inspected\n",
		"lot,inspected,defective\nA1,10,\"1\n",
		"lot,inspected,defective\n\xff\xfe,10,1\n",
		"",
		"\n\n\n",
		"lot;inspected;defective;dent\nA1;2,5;0;1\nA2;1.250;0;\n",
		"lot\tinspected\tdefects\nA1\t10\t1\n",
		"lot|inspected|defective\nA1|10|1\n",
		"lot,time,inspected,defective,dnet\nA1,05.03.2024 14:30,10,1,1\n",
		"PK\x03\x04not a workbook",
	} {
		f.Add([]byte(s), uint8(0), true)
	}
	f.Fuzz(func(t *testing.T, data []byte, chart uint8, fromHeader bool) {
		opt := Options{Chart: fuzzCharts[int(chart)%len(fuzzCharts)], Categories: []string{"dent", "Scratch"},
			CategoriesFromHeader: fromHeader, Location: time.UTC, MaxProblems: 5}
		rd, err := NewReader(bytes.NewReader(data), opt)
		if err != nil {
			var ps Problems
			if !errors.As(err, &ps) || len(ps) == 0 {
				t.Fatalf("NewReader error %T %v is not a list of problems", err, err)
			}
			checkProblems(t, ps)
			return
		}
		if c := rd.CountColumn(); c != ColDefective && c != ColDefects {
			t.Fatalf("header accepted without a count column (%q)", c)
		}
		rows, kept := 0, 0
		last := 1
		for i := 0; ; i++ {
			if i > len(data)+1 {
				t.Fatalf("more records than bytes: the reader does not advance")
			}
			row, err := rd.Next()
			if err == io.EOF {
				break
			}
			var ps Problems
			if errors.As(err, &ps) {
				if len(ps) == 0 {
					t.Fatal("an empty list of problems was returned as an error")
				}
				checkProblems(t, ps)
				kept += len(ps)
				continue
			}
			if err != nil {
				t.Fatalf("Next: unexpected error %T %v from an in-memory reader", err, err)
			}
			rows++
			if row.Line <= last-1 || row.Line < 2 {
				t.Fatalf("row line %d after line %d (the header is line 1)", row.Line, last)
			}
			last = row.Line
			if row.Lot == "" {
				t.Fatalf("line %d: a row without problems has no lot code", row.Line)
			}
			for name, s := range map[string]string{"lot": row.Lot, "shift": row.Shift, "inspector": row.Inspector, "note": row.Note} {
				if !utf8.ValidString(s) {
					t.Fatalf("line %d: %s %q is not valid UTF-8 but was passed on", row.Line, name, s)
				}
			}
			for c := range row.Categories {
				known := false
				for _, k := range rd.Categories() {
					known = known || k == c
				}
				if !known {
					t.Fatalf("line %d: category %q is not among the columns %v", row.Line, c, rd.Categories())
				}
			}
		}
		if got := len(rd.Problems()) + rd.MoreProblems(); got != kept {
			t.Fatalf("reader counts %d problems, rows returned %d", got, kept)
		}
		if len(rd.Problems()) > opt.MaxProblems {
			t.Fatalf("%d problems kept, cap %d", len(rd.Problems()), opt.MaxProblems)
		}
		// A second Next after io.EOF stays at io.EOF.
		if _, err := rd.Next(); err != io.EOF {
			t.Fatalf("Next after the end: %v", err)
		}
		_ = rows
	})
}

func checkProblems(t *testing.T, ps Problems) {
	t.Helper()
	for _, p := range ps {
		if p.Reason == "" {
			t.Fatalf("problem without a reason: %+v", p)
		}
		if p.Line < 0 {
			t.Fatalf("problem with line %d: %+v", p.Line, p)
		}
		if !utf8.ValidString(p.Value) || !utf8.ValidString(p.Field) {
			t.Fatalf("problem text is not valid UTF-8: %+v", p)
		}
	}
}

// FuzzNeutralise: Restore undoes Neutralise for every text, and what
// Neutralise writes never starts with a character a spreadsheet would run
// as a formula (= + - @ tab CR; OWASP "CSV Injection").
func FuzzNeutralise(f *testing.F) {
	for _, s := range []string{"", "=1+1", "'=1", "''+x", "@SUM(A1)", "-", "\t=", "plain", "'", "'''"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		n := Neutralise(s)
		if Restore(n) != s {
			t.Fatalf("Restore(Neutralise(%q)) = %q", s, Restore(n))
		}
		if n != "" && strings.ContainsRune("=+-@\t\r", rune(n[0])) {
			t.Fatalf("Neutralise(%q) = %q starts a formula", s, n)
		}
	})
}

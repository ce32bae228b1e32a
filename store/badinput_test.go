package store

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
)

// badInputBase is what the store holds before each case of the battery:
// two lots of a p chart with the categories dent and scratch.
const badInputBase = "lot,time,shift,inspected,defective,dent,scratch,inspector,note\n" +
	"S1,2025-03-03T06:10:00Z,early,200,4,3,1,kim,\n" +
	"S2,2025-03-03T14:05:00Z,late,180,2,,2,lee,rework\n"

// head is the header the battery's rows use unless a case gives its own.
const head = "lot,time,inspected,defective,dent,inspector,note\n"

// want is one problem a case expects: the line, the field, a part of the
// value as reported and a part of the reason. An empty value or reason,
// and the field "*", are not checked.
type want struct {
	line   int
	field  string
	value  string
	reason string
}

// TestImportBadInput is the bad-input battery for lot files (store.Import,
// which `lotwatch import` calls). Each refused file must give a
// *ValidationError whose problems name the line, the column and the value,
// and must change nothing: the export of the process and the audit trail
// are byte for byte the same before and after. Files that are valid but
// unusual (BOM, CRLF, formula-like text, markup, SQL, huge counts) must be
// stored verbatim and exported safely. Sources: RFC 4180 for the CSV
// grammar; RFC 3339 for times; OWASP "CSV Injection" for the formula
// guard (common practice, no formal standard); the limits of 100 bytes for
// codes and 4000 for notes and of one day into the future are lotwatch's
// own (store.ValidateLot).
func TestImportBadInput(t *testing.T) {
	mb := strings.Repeat("x", 1<<20)
	cases := []struct {
		name string
		file string
		want []want // problems expected (all must be present); nil: the file is accepted
		// check runs on an accepted file.
		check func(t *testing.T, db *DB, p Process, res ImportResult)
	}{
		// The file as a whole and its header.
		{name: "empty file", file: "", want: []want{{1, "", "", "empty"}}},
		{name: "only a byte-order mark", file: "\xEF\xBB\xBF", want: []want{{1, "", "", "empty"}}},
		{name: "only blank lines", file: "\n\n\n", want: []want{{1, "", "", "empty"}}},
		{name: "header only", file: head, check: addedNone},
		{name: "lot column missing", file: "time,inspected,defective\n2025-03-05 10:00,10,1\n", want: []want{{1, "lot", "", "missing"}}},
		{name: "inspected column missing", file: "lot,defective\nA1,1\n", want: []want{{1, "inspected", "", "missing"}}},
		{name: "count column missing", file: "lot,inspected\nA1,10\n", want: []want{{1, "defective", "", "missing"}}},
		{name: "both count columns", file: "lot,inspected,defective,defects\nA1,10,1,1\n", want: []want{{1, "defects", "", "exactly one"}}},
		{name: "defects on a p chart", file: "lot,inspected,defects\nA1,10,1\n", want: []want{{1, "defects", "", "does not fit a p chart"}}},
		{name: "column given twice", file: "lot,inspected,inspected,defective\nA1,10,10,1\n", want: []want{{1, "inspected", "", "twice"}}},
		{name: "column twice in other case", file: "Lot,LOT,inspected,defective\nA1,A1,10,1\n", want: []want{{1, "LOT", "", "twice"}}},
		{name: "misspelled inspected", file: "lot,inspectd,defective\nA1,10,1\n", want: []want{{1, "inspected", "", "missing"}}},
		{name: "misspelled defective", file: "lot,inspected,defectve\nA1,10,1\n", want: []want{{1, "defective", "", "missing"}}},
		{name: "column without a name", file: "lot,inspected,,defective\nA1,10,x,1\n", want: []want{{1, "column 3", "", "no name"}}},
		{name: "header not UTF-8", file: "lot,insp\xe9cted,defective\nA1,10,1\n", want: []want{{1, "column 2", "insp\uFFFDcted", "UTF-8"}}},

		// Encoding and line ends.
		{name: "lot code not UTF-8", file: head + "A\xff1,2025-03-05 10:00,10,1,,,\n", want: []want{{2, "lot", "A\uFFFD1", "UTF-8"}}},
		{name: "note in Latin-1", file: head + "A1,2025-03-05 10:00,10,1,,,caf\xe9\n", want: []want{{2, "note", "caf\uFFFD", "UTF-8"}}},
		{name: "inspector in UTF-16", file: head + "A1,2025-03-05 10:00,10,1,,\xff\xfek\x00,\n", want: []want{{2, "inspector", "", "UTF-8"}}},
		{name: "BOM and CRLF accepted", file: "\xEF\xBB\xBF" + strings.ReplaceAll(head+"A1,2025-03-05 10:00,10,1,1,ode,\"two\nlines\"\n", "\n", "\r\n"),
			check: func(t *testing.T, db *DB, p Process, res ImportResult) {
				l := lotNamed(t, db, p, "A1")
				// RFC 4180: CRLF ends a record; inside a quoted field
				// encoding/csv reads CRLF as LF.
				if l.Inspected != 10 || l.Count != 1 || l.Inspector != "ode" || l.Note != "two\nlines" || l.Categories["dent"] != 1 {
					t.Errorf("stored %+v", l.LotInput)
				}
			}},

		// Long cells.
		{name: "1 MB note", file: head + "A1,2025-03-05 10:00,10,1,,," + mb + "\n", want: []want{{2, "note", "xxxx", "longer than 4000 bytes"}}},
		{name: "1 MB lot code", file: head + mb + ",2025-03-05 10:00,10,1,,,\n", want: []want{{2, "lot", "xxxx", "longer than 100 bytes"}}},
		{name: "1 MB count", file: head + "A1,2025-03-05 10:00," + strings.Repeat("9", 1<<20) + ",1,,,\n", want: []want{{2, "inspected", "999", "too large"}}},

		// Numbers.
		{name: "10^12 inspected refused", file: head + "A1,2025-03-05 10:00,1000000000000,1,,,\n", want: []want{{2, "inspected", "1000000000000", "more than 10000000"}}},
		{name: "10^7 inspected accepted", file: head + "A1,2025-03-05 10:00,10000000,9999999,,,\n",
			check: func(t *testing.T, db *DB, p Process, res ImportResult) {
				if l := lotNamed(t, db, p, "A1"); l.Inspected != 10_000_000 || l.Count != 9_999_999 {
					t.Errorf("stored %d/%d, want 9999999/10000000", l.Count, l.Inspected)
				}
			}},
		{name: "inspected one beyond int64", file: head + "A1,2025-03-05 10:00,9223372036854775808,1,,,\n", want: []want{{2, "inspected", "9223372036854775808", "too large"}}},
		{name: "defective far beyond int64", file: head + "A1,2025-03-05 10:00,10,100000000000000000000000,,,\n", want: []want{{2, "defective", "100000000000000000000000", "too large"}}},
		{name: "negative inspected", file: head + "A1,2025-03-05 10:00,-10,1,,,\n", want: []want{{2, "inspected", "-10", "greater than 0"}}},
		{name: "negative defective", file: head + "A1,2025-03-05 10:00,10,-1,,,\n", want: []want{{2, "defective", "-1", "negative"}}},
		{name: "negative category", file: head + "A1,2025-03-05 10:00,10,1,-1,,\n", want: []want{{2, "dent", "-1", "negative"}}},
		{name: "fraction inspected", file: head + "A1,2025-03-05 10:00,10.5,1,,,\n", want: []want{{2, "inspected", "10.5", "fractions"}}},
		{name: "fraction defective", file: head + "A1,2025-03-05 10:00,10,0.5,,,\n", want: []want{{2, "defective", "0.5", "fractions"}}},
		{name: "fraction category", file: head + "A1,2025-03-05 10:00,10,1,0.5,,\n", want: []want{{2, "dent", "0.5", "fractions"}}},
		{name: "exponent", file: head + "A1,2025-03-05 10:00,1e3,1,,,\n", want: []want{{2, "inspected", "1e3", "exponents"}}},
		{name: "exponent with sign", file: head + "A1,2025-03-05 10:00,10,1E+00,,,\n", want: []want{{2, "defective", "1E+00", "exponents"}}},
		{name: "thousands separator", file: head + "A1,2025-03-05 10:00,\"1,000\",1,,,\n", want: []want{{2, "inspected", "1,000", "thousands separators"}}},
		{name: "hexadecimal", file: head + "A1,2025-03-05 10:00,0x10,1,,,\n", want: []want{{2, "inspected", "0x10", "not a whole number"}}},
		{name: "plus sign", file: head + "A1,2025-03-05 10:00,+10,1,,,\n", want: []want{{2, "inspected", "+10", "not a whole number"}}},
		{name: "empty inspected", file: head + "A1,2025-03-05 10:00,,1,,,\n", want: []want{{2, "inspected", "", "empty"}}},
		{name: "defective more than inspected", file: head + "A1,2025-03-05 10:00,10,11,,,\n", want: []want{{2, "defective", "11", "more than the 10 units inspected"}}},
		{name: "nothing inspected", file: head + "A1,2025-03-05 10:00,0,0,,,\n", want: []want{{2, "inspected", "0", "greater than 0"}}},
		{name: "category more than inspected", file: head + "A1,2025-03-05 10:00,10,1,11,,\n", want: []want{{2, "dent", "11", "more than the 10 units inspected"}}},

		// Times.
		{name: "not a time", file: head + "A1,yesterday,10,1,,,\n", want: []want{{2, "time", "yesterday", "not a time"}}},
		{name: "30 February", file: head + "A1,2025-02-30 10:00,10,1,,,\n", want: []want{{2, "time", "2025-02-30 10:00", "not a time"}}},
		{name: "offset out of range", file: head + "A1,2025-03-05T10:00:00+25:00,10,1,,,\n", want: []want{{2, "time", "+25:00", "not a time"}}},
		{name: "far future", file: head + "A1,2999-01-01T00:00:00Z,10,1,,,\n", want: []want{{2, "time", "2999-01-01", "future"}}},
		{name: "before 1970", file: head + "A1,1969-12-31T23:00:00Z,10,1,,,\n", want: []want{{2, "time", "1969-12-31", "before 1970"}}},

		// Lot codes and duplicates.
		{name: "empty lot code", file: head + ",2025-03-05 10:00,10,1,,,\n", want: []want{{2, "lot", "", "empty"}}},
		{name: "tab in lot code", file: head + "\"A\t1\",2025-03-05 10:00,10,1,,,\n", want: []want{{2, "lot", "A\t1", "control characters"}}},
		{name: "NUL in note", file: head + "A1,2025-03-05 10:00,10,1,,,a\x00b\n", want: []want{{2, "note", `a\0b`, "NUL"}}},
		{name: "lot twice in the file", file: head + "A1,2025-03-05 10:00,10,1,,,\nA1,2025-03-05 10:00,10,1,,,\n", want: []want{{3, "lot", "A1", "more than once"}}},
		{name: "stored lot again, same values", file: badInputBase, check: func(t *testing.T, db *DB, p Process, res ImportResult) {
			if res.Added != 0 || res.Unchanged != 2 || len(res.Conflicts) != 0 {
				t.Errorf("result %+v, want 2 unchanged", res)
			}
		}},
		{name: "stored lot again, other values", file: strings.Replace(badInputBase, "200,4,3,1,kim", "200,5,3,1,kim", 1),
			want: []want{{2, "lot", "S1", "already stored with other values (count)"}}},

		// The form of the CSV.
		{name: "too few fields", file: head + "A1,2025-03-05 10:00,10\n", want: []want{{2, "", "", "has 3 fields but the header has 7"}}},
		{name: "too many fields", file: head + "A1,2025-03-05 10:00,10,1,,,,extra\n", want: []want{{2, "", "", "has 8 fields"}}},
		{name: "quote never closed", file: head + "A1,2025-03-05 10:00,10,1,,,\"open\nA2,2025-03-05 10:00,10,1,,,\n", want: []want{{3, "*", "", "opened on line 2 that is never closed"}}},
		{name: "stray quote", file: head + "A1,2025-03-05 10:00,10,1,,,say \"hi\"\n", want: []want{{2, "*", "", "stray double quote"}}},
		{name: "one bad row among good ones", file: head + "A1,2025-03-05 10:00,10,1,,,\nA2,2025-03-05 11:00,10,1,,,\nA3,2025-03-05 12:00,10,12,,,\nA4,2025-03-05 13:00,10,1,,,\n",
			want: []want{{4, "defective", "12", "more than"}}},
		{name: "every problem of a row", file: head + ",soon,ten,-1,x,,\n", want: []want{{2, "lot", "", "empty"}, {2, "time", "soon", "not a time"},
			{2, "inspected", "ten", "not a whole number"}, {2, "dent", "x", "not a whole number"}}},

		// Text that a spreadsheet, a browser or SQL would act on: stored
		// verbatim, neutralised in the export, and read back the same.
		{name: "formula-like cells", file: head + "=1+1,2025-03-05 10:00,10,1,,@kim,-2+3\n+A2,2025-03-05 11:00,10,1,,'=x,\"=HYPERLINK(\"\"http://evil.example\"\")\"\n",
			check: func(t *testing.T, db *DB, p Process, res ImportResult) {
				// A leading quote before a formula start is the export's own
				// guard and is read back without it (lotcsv.Restore).
				a1, a2 := lotNamed(t, db, p, "=1+1"), lotNamed(t, db, p, "+A2")
				if a1.Inspector != "@kim" || a1.Note != "-2+3" || a2.Inspector != "=x" || a2.Note != `=HYPERLINK("http://evil.example")` {
					t.Errorf("stored %+v and %+v, want the text as written", a1.LotInput, a2.LotInput)
				}
				out := exportOf(t, db, p)
				for _, cell := range []string{"'=1+1", "'@kim", "'-2+3", "'+A2", ",'=x,", `"'=HYPERLINK(""http://evil.example"")"`} {
					if !strings.Contains(out, cell) {
						t.Errorf("export lacks the neutralised cell %s:\n%s", cell, out)
					}
				}
				for _, line := range strings.Split(out, "\n") {
					for _, cell := range strings.Split(line, ",") {
						if cell != "" && strings.ContainsRune("=+-@", rune(cell[0])) {
							t.Errorf("export cell %q would run as a formula", cell)
						}
					}
				}
				roundTrip(t, p, out)
			}},
		{name: "markup in names and notes", file: head + "<b>L1</b>,2025-03-05 10:00,10,1,,<img src=x onerror=alert(1)>,<script>alert('x')</script>\n",
			check: func(t *testing.T, db *DB, p Process, res ImportResult) {
				l := lotNamed(t, db, p, "<b>L1</b>")
				if l.Inspector != "<img src=x onerror=alert(1)>" || l.Note != "<script>alert('x')</script>" {
					t.Errorf("stored %+v, want the text as written", l.LotInput)
				}
			}},
		{name: "SQL in names and notes", file: head + "\"L1'); DROP TABLE lots;--\",2025-03-05 10:00,10,1,,O'Brien,' OR '1'='1\n",
			check: func(t *testing.T, db *DB, p Process, res ImportResult) {
				l := lotNamed(t, db, p, "L1'); DROP TABLE lots;--")
				if l.Inspector != "O'Brien" || l.Note != "' OR '1'='1" {
					t.Errorf("stored %+v, want the text as written", l.LotInput)
				}
				if n := len(lotsOf(t, db, p)); n != 3 {
					t.Errorf("%d lots after the import, want 3 (the table must be intact)", n)
				}
			}},
	}
	if len(cases) < 40 {
		t.Fatalf("the battery has %d cases; it promises at least 40", len(cases))
	}
	forEachBackend(t, func(t *testing.T, open opener) {
		for _, c := range cases {
			t.Run(c.name, func(t *testing.T) {
				db, p := badInputDB(t, open)
				before, auditBefore := exportOf(t, db, p), auditOf(t, db)
				res, err := db.Import(context.Background(), "tester", strings.NewReader(c.file), ImportOptions{Process: p.Name})
				if c.want == nil {
					if err != nil {
						t.Fatalf("a valid file was refused: %v", err)
					}
					c.check(t, db, p, res)
					return
				}
				var ve *ValidationError
				if !errors.As(err, &ve) || !errors.Is(err, ErrInvalid) {
					t.Fatalf("error %T %v, want a *ValidationError", err, err)
				}
				for _, w := range c.want {
					if !hasProblem(ve.Problems, w) {
						t.Errorf("no problem like %+v among:\n%v", w, ve)
					}
				}
				for _, pr := range ve.Problems {
					if pr.Line == 0 {
						t.Errorf("problem without a line: %v", pr)
					}
				}
				if after := exportOf(t, db, p); after != before {
					t.Errorf("a refused file changed the stored lots:\nbefore %q\nafter  %q", before, after)
				}
				if a := auditOf(t, db); a != auditBefore {
					t.Errorf("a refused file changed the audit trail: %s, was %s", a, auditBefore)
				}
			})
		}
	})
}

// TestImportManyProblemsCapped: a long bad file lists the first 100
// problems with their lines and counts the rest, and writes nothing.
func TestImportManyProblemsCapped(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, p := badInputDB(t, open)
		before := exportOf(t, db, p)
		var b strings.Builder
		b.WriteString(head)
		for i := range 150 {
			fmt.Fprintf(&b, "Q%d,2025-03-05 10:00,10,%d,,,\n", i, 11+i)
		}
		_, err := db.Import(context.Background(), "tester", strings.NewReader(b.String()), ImportOptions{Process: p.Name})
		var ve *ValidationError
		if !errors.As(err, &ve) || len(ve.Problems) != 100 || ve.More != 50 {
			t.Fatalf("error %v, want 100 problems and 50 more", err)
		}
		if pr := ve.Problems[99]; pr.Line != 101 || pr.Value != "110" {
			t.Errorf("100th problem %v, want line 101 value 110", pr)
		}
		if !strings.HasSuffix(err.Error(), "… and 50 more") {
			t.Errorf("message does not say how many more: …%s", err.Error()[len(err.Error())-40:])
		}
		if exportOf(t, db, p) != before {
			t.Error("a refused file changed the stored lots")
		}
	})
}

// TestImportUnknownProcess: a file for a process that does not exist is
// refused (not created) unless asked, and nothing is written.
func TestImportUnknownProcess(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := badInputDB(t, open)
		_, err := db.Import(context.Background(), "tester", strings.NewReader(head+"A1,2025-03-05 10:00,10,1,,,\n"), ImportOptions{Process: "no such line"})
		if !errors.Is(err, ErrNotFound) || !strings.Contains(err.Error(), "no such line") {
			t.Fatalf("error %v, want not found naming the process", err)
		}
		ps, _ := db.Processes(context.Background(), true)
		if len(ps) != 1 {
			t.Errorf("%d processes, want 1", len(ps))
		}
	})
}

// TestAddLotsBadInput: the same rules through AddLots (the API and the
// form): every problem names the lot's position and field, and a refused
// batch stores nothing.
func TestAddLotsBadInput(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, p := badInputDB(t, open)
		before, auditBefore := exportOf(t, db, p), auditOf(t, db)
		future := time.Now().Add(48 * time.Hour)
		cases := []struct {
			in   LotInput
			want want
		}{
			{LotInput{Lot: "A", Inspected: 0, Count: 0}, want{1, "inspected", "0", "greater than 0"}},
			{LotInput{Lot: "A", Inspected: 10, Count: 11}, want{1, "defective", "11", "more than"}},
			{LotInput{Lot: "A", Inspected: 10, Count: -1}, want{1, "defective", "-1", "negative"}},
			{LotInput{Lot: "A", Inspected: -1 << 63, Count: 0}, want{1, "inspected", "-9223372036854775808", "greater than 0"}},
			{LotInput{Lot: "", Inspected: 10, Count: 1}, want{1, "lot", "", "empty"}},
			{LotInput{Lot: " A", Inspected: 10, Count: 1}, want{1, "lot", " A", "spaces"}},
			{LotInput{Lot: "A\nB", Inspected: 10, Count: 1}, want{1, "lot", "A\nB", "control"}},
			{LotInput{Lot: "A", Inspected: 10, Count: 1, Note: "\xff"}, want{1, "note", "\uFFFD", "UTF-8"}},
			{LotInput{Lot: "A", Inspected: 10, Count: 1, Time: future}, want{1, "time", "", "future"}},
			{LotInput{Lot: "A", Inspected: 10, Count: 1, Time: time.Date(1900, 1, 1, 0, 0, 0, 0, time.UTC)}, want{1, "time", "1900", "before 1970"}},
			{LotInput{Lot: "A", Inspected: 10, Count: 1, Categories: map[string]int64{"paint": 1}}, want{1, "paint", "1", "not a defect category"}},
			{LotInput{Lot: "S1", Inspected: 200, Count: 5}, want{}}, // conflict with the stored S1
		}
		for _, c := range cases {
			_, err := db.AddLots(context.Background(), "tester", p.ID, []LotInput{{Lot: "OK1", Inspected: 10, Count: 1}, c.in})
			if c.want.field == "" {
				var ce *ConflictError
				if !errors.As(err, &ce) || ce.Conflicts[0].Line != 2 || ce.Conflicts[0].Lot != "S1" {
					t.Errorf("%+v: error %v, want a conflict at 2 naming S1", c.in, err)
				}
				continue
			}
			c.want.line = 2
			var ve *ValidationError
			if !errors.As(err, &ve) || !hasProblem(ve.Problems, c.want) {
				t.Errorf("%+v: error %v, want %+v", c.in, err, c.want)
			}
		}
		if exportOf(t, db, p) != before || auditOf(t, db) != auditBefore {
			t.Error("refused batches changed the store")
		}
	})
}

func badInputDB(t *testing.T, open opener) (*DB, Process) {
	t.Helper()
	db, _ := open(t)
	p, err := db.AddProcess(context.Background(), "tester", Process{Name: "weld", Chart: spc.ChartP, Categories: []string{"dent", "scratch"}, TimeZone: "UTC"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Import(context.Background(), "tester", strings.NewReader(badInputBase), ImportOptions{Process: "weld"}); err != nil {
		t.Fatal(err)
	}
	return db, p
}

func hasProblem(ps []Problem, w want) bool {
	for _, p := range ps {
		if p.Line == w.line && (p.Field == w.field || w.field == "*") && strings.Contains(p.Value, w.value) && strings.Contains(p.Reason, w.reason) {
			return true
		}
	}
	return false
}

func exportOf(t *testing.T, db *DB, p Process) string {
	t.Helper()
	var b bytes.Buffer
	if err := db.Export(context.Background(), &b, p.ID, ExportOptions{}); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

// auditOf is the audit trail's length and head hash.
func auditOf(t *testing.T, db *DB) string {
	t.Helper()
	chk, err := db.VerifyAudit(context.Background())
	if err != nil || !chk.OK {
		t.Fatalf("audit trail: %+v %v", chk, err)
	}
	return fmt.Sprintf("%d entries, head %s", chk.Entries, chk.Head)
}

func lotsOf(t *testing.T, db *DB, p Process) []Lot {
	t.Helper()
	lots, err := db.Lots(context.Background(), p.ID, time.Time{}, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	return lots
}

func lotNamed(t *testing.T, db *DB, p Process, code string) Lot {
	t.Helper()
	for _, l := range lotsOf(t, db, p) {
		if l.Lot == code {
			return l
		}
	}
	t.Fatalf("lot %q is not stored", code)
	return Lot{}
}

func addedNone(t *testing.T, db *DB, p Process, res ImportResult) {
	if res.Added != 0 || res.Rows != 0 {
		t.Errorf("result %+v, want nothing read or added", res)
	}
}

// roundTrip imports an export into a fresh database and exports again:
// the two exports must be the same bytes.
func roundTrip(t *testing.T, p Process, out string) {
	t.Helper()
	db2, err := Open(filepath.Join(t.TempDir(), "again.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer db2.Close()
	p2, err := db2.AddProcess(context.Background(), "tester", Process{Name: p.Name, Chart: p.Chart, Categories: p.Categories, TimeZone: p.TimeZone})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db2.Import(context.Background(), "tester", strings.NewReader(out), ImportOptions{Process: p.Name}); err != nil {
		t.Fatalf("the export does not import back: %v", err)
	}
	if again := exportOf(t, db2, p2); again != out {
		t.Errorf("export → import → export differs:\n%s\n%s", out, again)
	}
}

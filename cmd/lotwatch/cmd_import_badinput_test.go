package main

import (
	"fmt"
	"lotwatch/store/storetest"
	"strings"
	"testing"
)

// TestCLIImportBadInput is the bad-input battery of `lotwatch import`,
// run in-process through run() on a database in a temporary directory.
// Every refused file exits with status 2 (exitUsage), prints nothing on
// standard output, and prints one line on standard error per problem, as
// FILE:LINE: column C, value "V": reason; the export of the process and
// the audit trail (entries and last hash, `lotwatch audit verify`) are
// the same before and after. The number rules are those of spc.CheckLot
// (0 < n ≤ spc.MaxInspected = 10^7, 0 ≤ d ≤ n on a p chart) and of the
// lot file: whole numbers in plain decimal digits.
func TestCLIImportBadInput(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "weld", "--categories", "dent,burr", "--as", "qa"); code != exitOK {
		t.Fatal(errs)
	}
	good := writeFile(t, dir, "good.csv", "lot,time,inspected,defective,dent\nS1,2026-03-02 07:00,200,3,2\nS2,2026-03-02 15:00,180,1,1\n")
	if code, out, errs := runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "qa", good); code != exitOK {
		t.Fatalf("good file: exit %d %q %q", code, out, errs)
	}
	state := func() string {
		t.Helper()
		c1, exported, e1 := runCLI(t, "", "export", "--db", db, "--process", "weld")
		c2, audit, e2 := runCLI(t, "", "audit", "verify", "--db", db)
		if c1 != exitOK || c2 != exitOK {
			t.Fatalf("export %d %q, audit %d %q", c1, e1, c2, e2)
		}
		return exported + audit
	}
	type problem struct {
		line          int
		column, value string
		reason        string
	}
	head := "lot,inspected,defective\n"
	cases := []struct {
		name, file string
		want       []problem
	}{
		{"fraction", head + "B1,1.5,0\n", []problem{{2, "inspected", "1.5", "whole number"}}},
		{"exponent", head + "B1,1e3,0\n", []problem{{2, "inspected", "1e3", "whole number"}}},
		{"thousands separator", head + "B1,\"1,000\",0\n", []problem{{2, "inspected", "1,000", "whole number"}}},
		{"negative count", head + "B1,100,-1\n", []problem{{2, "defective", "-1", "negative"}}},
		{"d more than n", head + "B1,10,11\n", []problem{{2, "defective", "11", "more than the 10 units inspected"}}},
		{"inspected 10^12", head + "B1,1000000000000,0\n", []problem{{2, "inspected", "1000000000000", "more than 10000000"}}},
		{"one beyond int64", head + "B1,9223372036854775808,0\n", []problem{{2, "inspected", "9223372036854775808", "too large"}}},
		{"category above n", "lot,inspected,defective,dent\nB1,10,1,11\n", []problem{{2, "dent", "11", "more than the 10 units inspected"}}},
		{"time 30 February", "lot,time,inspected,defective\nB1,2026-02-30 10:00,100,1\n", []problem{{2, "time", "2026-02-30 10:00", "is not a time"}}},
		{"time far future", "lot,time,inspected,defective\nB1,2099-01-01 10:00,100,1\n", []problem{{2, "time", "2099-01-01T10:00:00Z", "more than a day in the future"}}},
		{"empty lot code", head + ",100,1\n", []problem{{2, "lot", "", "empty"}}},
		{"code twice in the file", head + "B1,100,1\nB1,100,1\n", []problem{{3, "lot", "B1", "more than once"}}},
		{"one bad row among good ones", head + "G1,100,1\nG2,100,1\nG3,100,abc\nG4,100,2\n", []problem{{4, "defective", "abc", "whole number"}}},
		{"a problem on each of three rows", head + "B1,100,x\nB2,0,0\nB3,100,101\n",
			[]problem{{2, "defective", "x", "whole number"}, {3, "inspected", "0", "greater than 0"}, {4, "defective", "101", "more than the 100 units"}}},
	}
	if len(cases) < 10 {
		t.Fatalf("the battery has %d cases; it promises at least 10", len(cases))
	}
	for i, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			file := writeFile(t, dir, fmt.Sprintf("bad%02d.csv", i), c.file)
			before := state()
			code, out, errs := runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "qa", file)
			if code != exitUsage {
				t.Errorf("exit %d, want %d (bad input)", code, exitUsage)
			}
			if out != "" {
				t.Errorf("standard output %q, want nothing", out)
			}
			lines := strings.Split(strings.TrimSuffix(errs, "\n"), "\n")
			if len(lines) != len(c.want) {
				t.Fatalf("%d lines on standard error, want %d:\n%s", len(lines), len(c.want), errs)
			}
			for k, w := range c.want {
				where := fmt.Sprintf("%s:%d: column %s", file, w.line, w.column)
				if w.value != "" {
					where += fmt.Sprintf(", value %q", w.value)
				}
				if !strings.Contains(lines[k], where) || !strings.Contains(lines[k], w.reason) {
					t.Errorf("line %d: %q, want it to contain %q and %q", k+1, lines[k], where, w.reason)
				}
			}
			if after := state(); after != before {
				t.Errorf("a refused import changed the store:\n%s\nwas\n%s", after, before)
			}
		})
	}
}

package lotcsv

import (
	"errors"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
)

// The same lots written with a comma, a semicolon and a tab read to the
// same rows (the delimiter is found from the header line).
func TestDelimiters(t *testing.T) {
	rows := [][]string{
		{"lot", "time", "inspected", "defective", "scratch", "note"},
		{"A1", "2024-03-05 14:30", "100", "3", "1", "a, b; c"},
		{"A2", "2024-03-05 15:00", "80", "0", "", "plain"},
	}
	write := func(sep string) string {
		var b strings.Builder
		for _, r := range rows {
			for i, v := range r {
				if i > 0 {
					b.WriteString(sep)
				}
				if strings.ContainsAny(v, ",;\t") {
					v = `"` + v + `"`
				}
				b.WriteString(v)
			}
			b.WriteString("\r\n")
		}
		return b.String()
	}
	opt := Options{Chart: spc.ChartP, Categories: []string{"scratch"}}
	want, ps := readAll(t, write(","), opt)
	if len(ps) > 0 || len(want) != 2 {
		t.Fatalf("comma file: %d rows, problems %v", len(want), ps)
	}
	for _, sep := range []string{";", "\t"} {
		got, ps := readAll(t, write(sep), opt)
		if len(ps) > 0 || len(got) != len(want) {
			t.Errorf("separator %q: %d rows, problems %v", sep, len(got), ps)
			continue
		}
		for i := range got {
			g, w := got[i], want[i]
			if g.Lot != w.Lot || !g.Time.Equal(w.Time) || g.Inspected != w.Inspected || g.Count != w.Count ||
				g.Note != w.Note || g.Categories["scratch"] != w.Categories["scratch"] || len(g.Categories) != len(w.Categories) {
				t.Errorf("separator %q row %d: %+v, want %+v", sep, i, g, w)
			}
		}
	}
}

// A header that splits on none of the delimiters is shown as read, and
// the message says which delimiters were tried.
func TestHeaderWithoutDelimiter(t *testing.T) {
	_, err := NewReader(strings.NewReader("lot|inspected|defective\nA1|10|1\n"), Options{})
	var ps Problems
	if !errors.As(err, &ps) || len(ps) != 1 {
		t.Fatalf("err %v, want one problem", err)
	}
	p := ps[0]
	if p.Line != 1 || p.Value != "lot|inspected|defective" ||
		!strings.Contains(p.Reason, "comma") || !strings.Contains(p.Reason, "semicolon") || !strings.Contains(p.Reason, "tab") {
		t.Errorf("problem %+v", p)
	}
}

// In a semicolon file, a comma in a count is a decimal comma (a fraction,
// refused as a fraction) and a point a thousands separator; in a comma
// file a point is a fraction. Both are refused, each with its reason.
func TestDecimalComma(t *testing.T) {
	cases := []struct {
		src, value, reason string
	}{
		{"lot;inspected;defective\nA1;2,5;0\n", "2,5", "decimal comma"},
		{"lot;inspected;defective\nA1;1.250;0\n", "1.250", "thousands separators"},
		{"lot,inspected,defective\nA1,2.5,0\n", "2.5", "no fractions"},
		{"lot,inspected,defective\nA1,\"1,250\",0\n", "1,250", "thousands separators"},
	}
	for _, c := range cases {
		rows, ps := readAll(t, c.src, Options{})
		if len(rows) != 0 || len(ps) != 1 || ps[0].Value != c.value || ps[0].Field != "inspected" || !strings.Contains(ps[0].Reason, c.reason) {
			t.Errorf("%q: rows %v problems %v, want %q refused for %q", c.src, rows, ps, c.value, c.reason)
		}
	}
}

// Day-first and month-first local dates are read only in the order the
// process names; without one they are refused, never guessed.
func TestDateOrder(t *testing.T) {
	berlin, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	// 5 March 2024 14:30 in Berlin is CET, UTC+1 (IANA tz database).
	march5 := time.Date(2024, 3, 5, 13, 30, 0, 0, time.UTC)
	cases := []struct {
		in, order string
		want      time.Time // zero: refused
	}{
		{"05.03.2024 14:30", DateDayFirst, march5},
		{"5.3.2024 14:30", DateDayFirst, march5},
		{"05/03/2024 14:30:00", DateDayFirst, march5},
		{"03/05/2024 14:30", DateMonthFirst, march5},
		{"3-5-2024 14:30", DateMonthFirst, march5},
		{"05/03/2024 14:30", "", time.Time{}},
		{"13/05/2024 14:30", DateMonthFirst, time.Time{}}, // no month 13
		{"2024-03-05 14:30", "", march5},
		{"2024-03-05 14:30:00", DateMonthFirst, march5},
	}
	for _, c := range cases {
		got, err := ParseLocalTime(c.in, berlin, c.order)
		if c.want.IsZero() {
			if err == nil {
				t.Errorf("%q order %q: read as %v, want refused", c.in, c.order, got)
			}
			continue
		}
		if err != nil || !got.Equal(c.want) {
			t.Errorf("%q order %q: %v, %v; want %v", c.in, c.order, got, err, c.want)
		}
	}
	_, err = ParseLocalTime("05/03/2024 14:30", berlin, "")
	if err == nil || !strings.Contains(err.Error(), "day-first or month-first") {
		t.Errorf("no order: %v", err)
	}
}

// An unknown column is refused with the nearest known name; a column map
// reads the plant's own headers.
func TestUnknownAndMappedColumns(t *testing.T) {
	_, err := NewReader(strings.NewReader("lot,inspected,defective,discolor\n"), Options{Categories: []string{"discolour", "scratch"}})
	var ps Problems
	if !errors.As(err, &ps) || len(ps) != 1 || ps[0].Field != "discolor" || !strings.Contains(ps[0].Reason, "did you mean discolour?") {
		t.Fatalf("err %v", err)
	}
	_, err = NewReader(strings.NewReader("lot,inspected,defective,weather\n"), Options{Categories: []string{"discolour"}})
	if !errors.As(err, &ps) || len(ps) != 1 || strings.Contains(ps[0].Reason, "did you mean") {
		t.Errorf("far name: %v", err)
	}
	src := "Batch;Qty inspected;Rejects;Disc.\nB1;100;4;2\n"
	rows, ps := readAll(t, src, Options{Chart: spc.ChartP, Categories: []string{"discolour"},
		Columns: map[string]string{"batch": "lot", "QTY INSPECTED": "inspected", "rejects": "defective", "disc.": "discolour"}})
	if len(ps) > 0 || len(rows) != 1 || rows[0].Lot != "B1" || rows[0].Inspected != 100 || rows[0].Count != 4 || rows[0].Categories["discolour"] != 2 {
		t.Errorf("mapped: %+v %v", rows, ps)
	}
	_, err = NewReader(strings.NewReader("lot,Batch,inspected,defective\n"), Options{Columns: map[string]string{"batch": "lot"}})
	if !errors.As(err, &ps) || ps[0].Field != "Batch" {
		t.Errorf("map onto a column the header has: %v", err)
	}
}

// Nearest against hand-counted edit distances (Levenshtein, 1966).
func TestNearest(t *testing.T) {
	known := []string{"lot", "inspected", "defective", "defects", "discolour", "scratch"}
	cases := []struct{ in, want string }{
		{"discolor", "discolour"}, // one insertion
		{"Inspectd", "inspected"}, // one insertion
		{"defect", "defects"},     // one insertion
		{"scratches", "scratch"},  // two insertions
		{"weather", ""},           // none close
		{"lt", "lot"},
	}
	for _, c := range cases {
		if got := Nearest(c.in, known); got != c.want {
			t.Errorf("Nearest(%q) = %q, want %q", c.in, got, c.want)
		}
	}
	if d := editDistance("kitten", "sitting"); d != 3 { // the textbook example, from memory
		t.Errorf("kitten/sitting: %d", d)
	}
}

package lotcsv

import (
	"errors"
	"io"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
)

// readAll reads every row and every problem of a file.
func readAll(t *testing.T, src string, opt Options) ([]Row, []Problem) {
	t.Helper()
	rd, err := NewReader(strings.NewReader(src), opt)
	if err != nil {
		t.Fatalf("NewReader: %v", err)
	}
	var rows []Row
	var ps []Problem
	for {
		row, err := rd.Next()
		if err == io.EOF {
			break
		}
		var rp Problems
		if errors.As(err, &rp) {
			ps = append(ps, rp...)
			continue
		}
		if err != nil {
			t.Fatalf("Next: %v", err)
		}
		rows = append(rows, row)
	}
	return rows, ps
}

// The CSV grammar is RFC 4180 (quoted fields, doubled quotes, CRLF line
// breaks, line breaks inside quoted fields); the byte-order mark is the
// Unicode Standard's U+FEFF encoded in UTF-8 (EF BB BF).
func TestReadBOMCRLFQuoted(t *testing.T) {
	src := "\xEF\xBB\xBF Lot ,INSPECTED,Defective,Time,note,scratch\r\n" +
		"A1,100,3,2024-03-05 14:30,\"two\nlines\",1\r\n" +
		"\"A,2\",200,0,2024-03-05T15:00:00+02:00,\"say \"\"hi\"\"\",\r\n" +
		"A3,50,1,,plain,2\r\n"
	berlin, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	rows, ps := readAll(t, src, Options{Chart: spc.ChartP, Categories: []string{"Scratch"}, Location: berlin})
	if len(ps) != 0 {
		t.Fatalf("problems: %v", ps)
	}
	if len(rows) != 3 {
		t.Fatalf("got %d rows, want 3", len(rows))
	}
	// Physical lines: header 1, A1 on 2-3 (quoted note spans two lines), A,2 on 4.
	wantLines := []int{2, 4, 5}
	for i, r := range rows {
		if r.Line != wantLines[i] {
			t.Errorf("row %d: line %d, want %d", i, r.Line, wantLines[i])
		}
	}
	if rows[0].Note != "two\nlines" || rows[1].Lot != "A,2" || rows[1].Note != `say "hi"` {
		t.Errorf("fields: %+v", rows[:2])
	}
	// 14:30 in Berlin on 5 March 2024 is CET (UTC+1): 13:30 UTC.
	if got := rows[0].Time.UTC(); !got.Equal(time.Date(2024, 3, 5, 13, 30, 0, 0, time.UTC)) {
		t.Errorf("local time read as %v", got)
	}
	if got := rows[1].Time.UTC(); !got.Equal(time.Date(2024, 3, 5, 13, 0, 0, 0, time.UTC)) {
		t.Errorf("RFC 3339 time read as %v", got)
	}
	if !rows[2].Time.IsZero() {
		t.Errorf("empty time read as %v", rows[2].Time)
	}
	if rows[0].Categories["Scratch"] != 1 || rows[1].Categories != nil || rows[2].Categories["Scratch"] != 2 {
		t.Errorf("categories: %v %v %v", rows[0].Categories, rows[1].Categories, rows[2].Categories)
	}
}

func TestHeaderProblems(t *testing.T) {
	cases := []struct {
		name, head string
		chart      spc.Chart
		field      string
	}{
		{"missing lot", "inspected,defective", "", "lot"},
		{"missing inspected", "lot,defective", "", "inspected"},
		{"missing count", "lot,inspected", "", "defective"},
		{"missing count for u", "lot,inspected", spc.ChartU, "defects"},
		{"both counts", "lot,inspected,defective,defects", "", "defects"},
		{"wrong count for p", "lot,inspected,defects", spc.ChartP, "defects"},
		{"wrong count for c", "lot,inspected,defective", spc.ChartC, "defective"},
		{"duplicate", "lot,inspected,defective,LOT", "", "LOT"},
		{"empty name", "lot,,inspected,defective", "", "column 2"},
		{"bad utf8", "lot,inspected,defective,\xff", "", "column 4"},
	}
	for _, c := range cases {
		_, err := NewReader(strings.NewReader(c.head+"\n"), Options{Chart: c.chart})
		var ps Problems
		if !errors.As(err, &ps) {
			t.Errorf("%s: err %v, want Problems", c.name, err)
			continue
		}
		found := false
		for _, p := range ps {
			if p.Field == c.field && p.Line == 1 {
				found = true
			}
		}
		if !found {
			t.Errorf("%s: problems %v do not name %q on line 1", c.name, ps, c.field)
		}
	}
	if _, err := NewReader(strings.NewReader(""), Options{}); err == nil {
		t.Error("empty file accepted")
	}
	for _, opt := range []Options{{Ignore: []string{"COLOUR"}}, {IgnoreUnknown: true}} {
		rd, err := NewReader(strings.NewReader("lot,inspected,defects,colour\n"), opt)
		if err != nil {
			t.Fatal(err)
		}
		if rd.CountColumn() != "defects" || len(rd.Ignored()) != 1 || rd.Ignored()[0] != "colour" {
			t.Errorf("CountColumn %q, Ignored %v", rd.CountColumn(), rd.Ignored())
		}
	}
	rd, err := NewReader(strings.NewReader("lot,inspected,defects,Colour\n"), Options{CategoriesFromHeader: true})
	if err != nil {
		t.Fatal(err)
	}
	if c := rd.Categories(); len(c) != 1 || c[0] != "Colour" {
		t.Errorf("Categories from header: %v", c)
	}
}

// Row problems name the physical line, the column and the value.
func TestRowProblems(t *testing.T) {
	src := "lot,inspected,defective,time,dent\n" +
		"A1,1.5,0,,\n" + // line 2
		"A2,1e3,0,,\n" + // line 3
		"A3,\"1,000\",0,,\n" + // line 4
		"A4,99999999999999999999,0,,\n" + // line 5
		"A5,10,x,,\n" + // line 6
		"A6,10,1,yesterday,\n" + // line 7
		"A7,10,1,,-\n" + // line 8
		",10,1,,\n" + // line 9
		"A9,10,\n" + // line 10: short row, empty defective
		"\"B\n1\",10,1,,\xff\n" + // lines 11-12; bad UTF-8 on line 12
		"A10,,1,,\n" // line 13
	_, ps := readAll(t, src, Options{Categories: []string{"dent"}})
	want := []struct {
		line  int
		field string
		value string
	}{
		{2, "inspected", "1.5"},
		{3, "inspected", "1e3"},
		{4, "inspected", "1,000"},
		{5, "inspected", "99999999999999999999"},
		{6, "defective", "x"},
		{7, "time", "yesterday"},
		{8, "dent", "-"},
		{9, "lot", ""},
		{10, "", ""},
		{10, "defective", ""},
		{12, "dent", "\uFFFD"},
		{13, "inspected", ""},
	}
	if len(ps) != len(want) {
		t.Fatalf("got %d problems, want %d: %v", len(ps), len(want), ps)
	}
	for i, w := range want {
		p := ps[i]
		if p.Line != w.line || p.Field != w.field || p.Value != w.value || p.Reason == "" {
			t.Errorf("problem %d: %+v, want line %d field %q value %q", i, p, w.line, w.field, w.value)
		}
	}
	if !strings.Contains(ps[3].Reason, "too large") || !strings.Contains(ps[2].Reason, "thousands") ||
		!strings.Contains(ps[1].Reason, "exponent") || !strings.Contains(ps[0].Reason, "fraction") {
		t.Errorf("reasons do not say what is wrong: %v", ps[:4])
	}
}

func TestUnterminatedQuoteStops(t *testing.T) {
	src := "lot,inspected,defective\nA1,10,1\n\"A2,10,1\nA3,10,1\n"
	rows, ps := readAll(t, src, Options{})
	if len(rows) != 1 || len(ps) != 1 || ps[0].Line == 0 {
		t.Errorf("rows %v problems %v", rows, ps)
	}
}

func TestMaxProblems(t *testing.T) {
	var b strings.Builder
	b.WriteString("lot,inspected,defective\n")
	for i := 0; i < 10; i++ {
		b.WriteString("A,x,1\n")
	}
	rd, err := NewReader(strings.NewReader(b.String()), Options{MaxProblems: 3})
	if err != nil {
		t.Fatal(err)
	}
	for {
		if _, err := rd.Next(); err == io.EOF {
			break
		}
	}
	if len(rd.Problems()) != 3 || rd.MoreProblems() != 7 {
		t.Errorf("kept %d, more %d; want 3 and 7", len(rd.Problems()), rd.MoreProblems())
	}
}

// The formula guard follows OWASP "CSV Injection" (cells starting with
// = + - @ tab CR); Restore must undo exactly what Neutralise adds.
func TestNeutraliseRestore(t *testing.T) {
	cases := []struct{ in, out string }{
		{"=SUM(A1)", "'=SUM(A1)"},
		{"+1", "'+1"},
		{"-1", "'-1"},
		{"@x", "'@x"},
		{"\tx", "'\tx"},
		{"\rx", "'\rx"},
		{"'=x", "''=x"},
		{"'abc", "'abc"},
		{"'", "'"},
		{"", ""},
		{"plain", "plain"},
		{"a=b", "a=b"},
	}
	for _, c := range cases {
		if got := Neutralise(c.in); got != c.out {
			t.Errorf("Neutralise(%q) = %q, want %q", c.in, got, c.out)
		}
		if got := Restore(Neutralise(c.in)); got != c.in {
			t.Errorf("Restore(Neutralise(%q)) = %q", c.in, got)
		}
	}
}

func TestParseCount(t *testing.T) {
	cases := []struct {
		in   string
		want int64
		ok   bool
	}{
		{"0", 0, true}, {" 42 ", 42, true}, {"-3", -3, true},
		{"9223372036854775807", 9223372036854775807, true},
		{"9223372036854775808", 0, false}, {"1.0", 0, false}, {"2E2", 0, false},
		{"1_000", 0, false}, {"", 0, false}, {"-", 0, false}, {"0x10", 0, false}, {"+", 0, false},
	}
	for _, c := range cases {
		got, err := ParseCount(c.in)
		if (err == nil) != c.ok || got != c.want {
			t.Errorf("ParseCount(%q) = %d, %v", c.in, got, err)
		}
	}
}

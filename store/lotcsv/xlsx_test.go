package lotcsv

import (
	"bytes"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/xuri/excelize/v2"

	"lotwatch/spc"
)

// workbook builds an XLSX file in memory: each sheet a list of rows of
// cell values (string, int, float64 or time.Time, nil for an empty cell).
// A time.Time is stored as a spreadsheet date with a date-time format.
func workbook(t *testing.T, sheets map[string][][]any, order ...string) []byte {
	t.Helper()
	f := excelize.NewFile()
	defer f.Close()
	style, err := f.NewStyle(&excelize.Style{NumFmt: 22}) // m/d/yy h:mm, a built-in format
	if err != nil {
		t.Fatal(err)
	}
	for i, name := range order {
		if i == 0 {
			if err := f.SetSheetName("Sheet1", name); err != nil {
				t.Fatal(err)
			}
		} else if _, err := f.NewSheet(name); err != nil {
			t.Fatal(err)
		}
		for r, row := range sheets[name] {
			for c, v := range row {
				if v == nil {
					continue
				}
				cell, _ := excelize.CoordinatesToCellName(c+1, r+1)
				if err := f.SetCellValue(name, cell, v); err != nil {
					t.Fatal(err)
				}
				if _, ok := v.(time.Time); ok {
					f.SetCellStyle(name, cell, cell, style)
				}
			}
		}
	}
	var b bytes.Buffer
	if err := f.Write(&b); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// A worksheet with numbers stored as numbers and as text, times as
// spreadsheet dates and as text, reads to the same rows as the CSV file
// with the same lots.
func TestXLSXReadsLikeCSV(t *testing.T) {
	berlin, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	csvSrc := "lot,time,inspected,defective,scratch,note\n" +
		"A1,2024-03-05 14:30,100,3,1,first\n" +
		"1002,2024-07-01 06:05,80,0,,\"=cmd\"\n"
	opt := Options{Chart: spc.ChartP, Categories: []string{"scratch"}, Location: berlin}
	want, ps := readAll(t, csvSrc, opt)
	if len(ps) > 0 {
		t.Fatal(ps)
	}
	// The wall clock of the spreadsheet date is read in the process's zone.
	wall := time.Date(2024, 3, 5, 14, 30, 0, 0, time.UTC)
	xl := workbook(t, map[string][][]any{
		"Notes": {{"not lots"}},
		"Lots": {
			{"Lot", "Time", "Inspected", "Defective", "Scratch", "Note"},
			{"A1", wall, 100, "3", 1, "first"},
			{nil},
			{1002, "2024-07-01 06:05", "80", 0, nil, "=cmd"},
		},
	}, "Lots", "Notes")
	rd, err := NewReader(bytes.NewReader(xl), opt)
	if err != nil {
		t.Fatal(err)
	}
	if rd.Sheet() != "Lots" {
		t.Errorf("sheet %q, want the first, Lots", rd.Sheet())
	}
	var got []Row
	for {
		row, err := rd.Next()
		if err != nil {
			if err.Error() != "EOF" {
				t.Fatal(err)
			}
			break
		}
		got = append(got, row)
	}
	if len(got) != len(want) {
		t.Fatalf("%d rows, want %d", len(got), len(want))
	}
	for i := range got {
		g, w := got[i], want[i]
		if g.Lot != w.Lot || !g.Time.Equal(w.Time) || g.Inspected != w.Inspected || g.Count != w.Count ||
			g.Note != w.Note || g.Categories["scratch"] != w.Categories["scratch"] || len(g.Categories) != len(w.Categories) {
			t.Errorf("row %d: %+v, want %+v", i, g, w)
		}
	}
	if got[0].Line != 2 || got[1].Line != 4 {
		t.Errorf("rows %d and %d, want 2 and 4 (row 3 is empty)", got[0].Line, got[1].Line)
	}
	rd, err = NewReader(bytes.NewReader(xl), Options{Sheet: "Notes"})
	var hps Problems
	if !errors.As(err, &hps) || hps[0].Sheet != "Notes" || hps[0].Line != 1 {
		t.Errorf("sheet Notes: %v", err)
	}
	_, err = NewReader(bytes.NewReader(xl), Options{Sheet: "Nope"})
	if !errors.As(err, &hps) || hps[0].Value != "Nope" || !strings.Contains(hps[0].Reason, "Lots, Notes") {
		t.Errorf("unknown sheet: %v", err)
	}
}

// The bad-input battery of CSV, kept in a worksheet: each problem names
// the sheet, the row, the column header and the value.
func TestXLSXBadInput(t *testing.T) {
	xl := workbook(t, map[string][][]any{"Lots": {
		{"lot", "time", "inspected", "defective"},
		{"F1", nil, 2.5, 0},                    // a fraction stored as a number
		{"F2", nil, "2.5", 0},                  // a fraction stored as text
		{"F3", nil, "ten", 0},                  // not a number
		{"F4", nil, 1e20, 0},                   // beyond a whole int64
		{"F5", "yesterday", 10, 0},             // not a time
		{"F6", "05/03/2024 14:30", 10, 0},      // day or month first: not guessed
		{"F7", 0.5, 10, 0},                     // a time of day without a date
		{"", nil, 10, 0},                       // no lot code
		{"F9", nil, 10, "\xff"},                // the workbook keeps U+FFFD for a bad byte
		{"F10", nil, 10, 1, "extra"},           // more cells than columns
		{"F11", nil, -3, 0},                    // left to CheckLot: read
		{"'=SUM(1)", nil, 10, 0},               // formula guard undone
		{"F13", nil, "9223372036854775808", 0}, // just beyond int64
	}}, "Lots")
	rd, err := NewReader(bytes.NewReader(xl), Options{})
	if err != nil {
		t.Fatal(err)
	}
	var rows []Row
	byRow := map[int]Problem{}
	for {
		row, err := rd.Next()
		var ps Problems
		if errors.As(err, &ps) {
			for _, p := range ps {
				if p.Sheet != "Lots" {
					t.Errorf("problem %v does not name the sheet", p)
				}
				byRow[p.Line] = p
			}
			continue
		}
		if err != nil {
			break
		}
		rows = append(rows, row)
	}
	want := map[int]struct{ field, value, reason string }{
		2:  {"inspected", "2.5", "no fractions"},
		3:  {"inspected", "2.5", "no fractions"},
		4:  {"inspected", "ten", "not a whole number"},
		5:  {"inspected", "100000000000000000000", "too large"},
		6:  {"time", "yesterday", "not a time"},
		7:  {"time", "05/03/2024 14:30", "does not guess"},
		8:  {"time", "0.5", "not a spreadsheet date"},
		9:  {"lot", "", "is empty"},
		10: {"defective", "\uFFFD", "not a whole number"},
		11: {"", "", "has 5 fields but the header has 4 columns"},
		14: {"inspected", "9223372036854775808", "too large"},
	}
	for line, w := range want {
		p, ok := byRow[line]
		if !ok {
			t.Errorf("Lots!%d: no problem, want %s %q %s", line, w.field, w.value, w.reason)
			continue
		}
		if p.Field != w.field || !strings.EqualFold(p.Value, w.value) || !strings.Contains(p.Reason, w.reason) {
			t.Errorf("Lots!%d: %v, want %s %q …%s…", line, p, w.field, w.value, w.reason)
		}
	}
	if len(byRow) != len(want) {
		t.Errorf("problems on rows %v, want %d rows", byRow, len(want))
	}
	if len(rows) != 2 || rows[0].Inspected != -3 || rows[1].Lot != "=SUM(1)" {
		t.Errorf("rows read: %+v", rows)
	}
	if s := byRow[2].String(); !strings.HasPrefix(s, "Lots!2: inspected") {
		t.Errorf("problem written %q", s)
	}
}

// A file that starts like a ZIP archive but is not a workbook is a
// problem, not a crash.
func TestXLSXBroken(t *testing.T) {
	_, err := NewReader(strings.NewReader(zipMagic+"garbage"), Options{})
	var ps Problems
	if !errors.As(err, &ps) || !strings.Contains(ps[0].Reason, "XLSX") {
		t.Errorf("err %v", err)
	}
}

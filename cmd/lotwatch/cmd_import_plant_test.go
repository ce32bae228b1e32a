package main

import (
	"bytes"
	"encoding/csv"
	"lotwatch/store/storetest"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/xuri/excelize/v2"
)

// csvToXLSX writes the records of a comma CSV file as the first worksheet
// "Lots" of a workbook, the way a spreadsheet keeps them: whole numbers
// and decimal fractions as numbers, times of the form YYYY-MM-DD HH:MM as
// spreadsheet dates when asDates is set, the rest as text.
func csvToXLSX(t *testing.T, src string, asDates bool) []byte {
	t.Helper()
	cr := csv.NewReader(strings.NewReader(src))
	cr.FieldsPerRecord = -1
	recs, err := cr.ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	f := excelize.NewFile()
	defer f.Close()
	if err := f.SetSheetName("Sheet1", "Lots"); err != nil {
		t.Fatal(err)
	}
	dateStyle, _ := f.NewStyle(&excelize.Style{NumFmt: 22})
	whole := regexp.MustCompile(`^-?[0-9]{1,15}$`)
	fraction := regexp.MustCompile(`^-?[0-9]+\.[0-9]+$`)
	for r, rec := range recs {
		for c, v := range rec {
			cell, _ := excelize.CoordinatesToCellName(c+1, r+1)
			var val any = v
			switch {
			case r == 0:
			case whole.MatchString(v):
				val, _ = strconv.ParseInt(v, 10, 64)
			case fraction.MatchString(v):
				val, _ = strconv.ParseFloat(v, 64)
			case asDates && len(v) == 16 && v[4] == '-' && v[10] == ' ':
				if tm, err := timeParseUTC(v); err == nil {
					val = tm
					defer f.SetCellStyle("Lots", cell, cell, dateStyle)
				}
			}
			if v == "" {
				continue
			}
			if err := f.SetCellValue("Lots", cell, val); err != nil {
				t.Fatal(err)
			}
		}
	}
	var b bytes.Buffer
	if err := f.Write(&b); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// Exact contract of issue 15: a file kept as XLSX, or as CSV separated by
// semicolons or tabs, imports exactly as the comma CSV with the same rows
// (same export afterwards), times included.
func TestCLIImportPlantFormats(t *testing.T) {
	dir := t.TempDir()
	rows := [][]string{
		{"lot", "time", "shift", "inspected", "defective", "dent", "burr", "inspector", "note"},
		{"W1", "2026-03-02 07:00", "early", "200", "3", "2", "1", "kim", "first, of the week; or so"},
		{"W2", "2026-03-02 15:30", "late", "180", "0", "", "", "lee", ""},
		{"W3", "2026-03-03 07:05", "early", "220", "5", "4", "0", "kim", "=not a formula"},
	}
	join := func(sep string) string {
		var b strings.Builder
		for _, r := range rows {
			for i, v := range r {
				if i > 0 {
					b.WriteString(sep)
				}
				if strings.ContainsAny(v, ",;") {
					v = `"` + v + `"`
				}
				b.WriteString(v)
			}
			b.WriteString("\r\n")
		}
		return b.String()
	}
	comma, semicolon, tab := join(","), join(";"), join("\t")
	files := map[string]string{
		"comma.csv":     writeFile(t, dir, "comma.csv", comma),
		"semicolon.csv": writeFile(t, dir, "semicolon.csv", semicolon),
		"tab.csv":       writeFile(t, dir, "tab.csv", tab),
		"text.xlsx":     writeFile(t, dir, "text.xlsx", string(csvToXLSX(t, comma, false))),
		"dates.xlsx":    writeFile(t, dir, "dates.xlsx", string(csvToXLSX(t, comma, true))),
	}
	export := func(name string) string {
		t.Helper()
		db := storetest.DB(t)
		if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "weld", "--categories", "dent,burr", "--tz", "Europe/Berlin", "--as", "qa"); code != exitOK {
			t.Fatal(errs)
		}
		code, out, errs := runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "qa", files[name])
		if code != exitOK || !strings.Contains(out, "3 added") {
			t.Fatalf("%s: exit %d %q %q", name, code, out, errs)
		}
		code, exported, errs := runCLI(t, "", "export", "--db", db, "--process", "weld")
		if code != exitOK {
			t.Fatal(errs)
		}
		return exported
	}
	want := export("comma.csv")
	if !strings.Contains(want, "2026-03-02T07:00:00+01:00") || !strings.Contains(want, "first, of the week; or so") {
		t.Fatalf("comma export: %s", want)
	}
	for _, name := range []string{"semicolon.csv", "tab.csv", "text.xlsx", "dates.xlsx"} {
		if got := export(name); got != want {
			t.Errorf("%s exports\n%s\nwant (as the comma file)\n%s", name, got, want)
		}
	}
	// analyze reads the same files to the same chart.
	_, wantChart, _ := runCLI(t, "", "analyze", "--format", "json", files["comma.csv"])
	for _, name := range []string{"semicolon.csv", "tab.csv", "text.xlsx", "dates.xlsx"} {
		code, got, errs := runCLI(t, "", "analyze", "--format", "json", files[name])
		if code != exitOK || got != wantChart {
			t.Errorf("analyze %s: exit %d %q\n%s\nwant\n%s", name, code, errs, got, wantChart)
		}
	}
}

// The bad-input battery of CSV, kept in an XLSX worksheet: refused with
// exit 2, nothing written, each problem named FILE:SHEET!ROW with the
// column header and the value.
func TestCLIImportXLSXBadInput(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "weld", "--categories", "dent,burr", "--as", "qa"); code != exitOK {
		t.Fatal(errs)
	}
	head := "lot,inspected,defective\n"
	cases := []struct {
		name, file, want string
	}{
		{"fraction stored as 2.5", head + "B1,2.5,0\n", `Lots!2: column inspected, value "2.5": is not a whole number (no fractions)`},
		{"exponent as text", head + "B1,1e3,0\n", `Lots!2: column inspected, value "1e3"`},
		{"negative count", head + "B1,100,-1\n", `Lots!2: column defective, value "-1"`},
		{"d more than n", head + "B1,10,11\n", `Lots!2: column defective, value "11": is more than the 10 units inspected`},
		{"inspected 10^12", head + "B1,1000000000000,0\n", `Lots!2: column inspected, value "1000000000000"`},
		{"time 30 February", "lot,time,inspected,defective\nB1,2026-02-30 10:00,100,1\n", `Lots!2: column time, value "2026-02-30 10:00": is not a time`},
		{"empty lot code", head + ",100,1\n", `Lots!2: column lot: is empty`},
		{"code twice", head + "B1,100,1\nB1,100,1\n", `Lots!3: column lot, value "B1"`},
		{"misspelt category", "lot,inspected,defective,dnet\nB1,100,1,1\n", `Lots!1: column dnet: is neither a lotwatch column nor a defect category of the process (did you mean dent?)`},
		{"missing column", "lot,defective\nB1,1\n", `Lots!1: column inspected: column is missing`},
	}
	before := func() string {
		_, exported, _ := runCLI(t, "", "export", "--db", db, "--process", "weld")
		_, audit, _ := runCLI(t, "", "audit", "verify", "--db", db)
		return exported + audit
	}()
	for i, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			file := writeFile(t, dir, "bad"+strconv.Itoa(i)+".xlsx", string(csvToXLSX(t, c.file, false)))
			code, out, errs := runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "qa", file)
			if code != exitUsage || out != "" {
				t.Errorf("exit %d, output %q; want %d and nothing", code, out, exitUsage)
			}
			if !strings.Contains(errs, file+":"+c.want) {
				t.Errorf("standard error\n%s\nwant %q", errs, file+":"+c.want)
			}
		})
	}
	_, exported, _ := runCLI(t, "", "export", "--db", db, "--process", "weld")
	_, audit, _ := runCLI(t, "", "audit", "verify", "--db", db)
	if exported+audit != before {
		t.Errorf("refused imports changed the store")
	}
}

// An unknown column (a misspelt category) is refused by default with the
// nearest known name, and nothing is written; --ignore-columns skips it
// on purpose.
func TestCLIImportUnknownColumn(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "paint", "--categories", "discolour,run", "--as", "qa"); code != exitOK {
		t.Fatal(errs)
	}
	file := writeFile(t, dir, "lots.csv", "lot,inspected,defective,discolor\nP1,100,2,2\n")
	code, out, errs := runCLI(t, "", "import", "--db", db, "--process", "paint", "--as", "qa", file)
	if code != exitUsage || out != "" || !strings.Contains(errs, file+":1: column discolor: ") || !strings.Contains(errs, "did you mean discolour?") {
		t.Fatalf("exit %d %q %q", code, out, errs)
	}
	_, exported, _ := runCLI(t, "", "export", "--db", db, "--process", "paint")
	if strings.Contains(exported, "P1") {
		t.Fatal("the refused file was written")
	}
	code, out, errs = runCLI(t, "", "import", "--db", db, "--process", "paint", "--as", "qa", "--ignore-columns", "Discolor", file)
	if code != exitOK || !strings.Contains(out, "1 added") {
		t.Fatalf("with --ignore-columns: exit %d %q %q", code, out, errs)
	}
}

func timeParseUTC(s string) (time.Time, error) { return time.Parse("2006-01-02 15:04", s) }

// A process keeps the plant's own headers (process update --map, kept in
// the audit trail) and its date order; import reads the plant's file with
// them as it is kept.
func TestCLIColumnMapAndDateOrder(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "weld", "--categories", "dent", "--tz", "Europe/Berlin", "--as", "qa"); code != exitOK {
		t.Fatal(errs)
	}
	plant := writeFile(t, dir, "plant.csv", "Batch;Date;Qty inspected;Rejects;Dents\nB1;05.03.2026 14:30;200;3;2\n")
	code, _, errs := runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "qa", plant)
	if code != exitUsage || !strings.Contains(errs, "column Batch: is neither") {
		t.Fatalf("without a map: exit %d %q", code, errs)
	}
	bad := []struct{ m, want string }{
		{"Rejects", `"Rejects" is not HEADER=COLUMN`},
		{"Rejects=defects", `maps to "defects", which is not one of`}, // a p chart counts defective
		{"lot=inspected", "is already a column lotwatch reads"},
		{"Dent=dent", "is already a column lotwatch reads"},
		{"Rejects=colour", `maps to "colour"`},
	}
	for _, b := range bad {
		code, _, errs := runCLI(t, "", "process", "update", "--db", db, "--name", "weld", "--map", b.m, "--reason", "plant headers", "--as", "qa")
		if code != exitUsage || !strings.Contains(errs, b.want) {
			t.Errorf("--map %q: exit %d %q, want %q", b.m, code, errs, b.want)
		}
	}
	code, out, errs := runCLI(t, "", "process", "update", "--db", db, "--name", "weld", "--as", "qa", "--reason", "the plant's own headers",
		"--map", "Batch=lot, Date=time, Qty inspected=inspected, Rejects=Defective, Dents=dent")
	if code != exitOK {
		t.Fatalf("--map: exit %d %q %q", code, out, errs)
	}
	code, _, errs = runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "qa", plant)
	if code != exitUsage || !strings.Contains(errs, `column Date, value "05.03.2026 14:30"`) || !strings.Contains(errs, "does not guess") {
		t.Fatalf("without a date order: exit %d %q", code, errs)
	}
	if code, _, errs := runCLI(t, "", "process", "update", "--db", db, "--name", "weld", "--as", "qa", "--reason", "dates are day-first", "--date-order", "day-first"); code != exitOK {
		t.Fatal(errs)
	}
	code, out, errs = runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "qa", plant)
	if code != exitOK || !strings.Contains(out, "1 added") {
		t.Fatalf("with the map: exit %d %q %q", code, out, errs)
	}
	_, exported, _ := runCLI(t, "", "export", "--db", db, "--process", "weld")
	// 14:30 on 5 March 2026 in Berlin is CET, UTC+1 (IANA tz database).
	if !strings.Contains(exported, "B1,2026-03-05T14:30:00+01:00,,200,3,2,,") {
		t.Errorf("export:\n%s", exported)
	}
	// analyze --process reads the plant's file through the same map.
	if code, _, errs := runCLI(t, "", "analyze", plant); code != exitUsage || !strings.Contains(errs, "lot column is missing") {
		t.Errorf("analyze without --process: exit %d %q", code, errs)
	}
	if code, out, errs := runCLI(t, "", "analyze", "--db", db, "--process", "weld", "--format", "csv", plant); code != exitOK || !strings.Contains(out, "B1,200,3,") {
		t.Errorf("analyze --process: exit %d %q %q", code, out, errs)
	}
	_, list, _ := runCLI(t, "", "process", "list", "--db", db, "--format", "json")
	if !strings.Contains(list, `"Qty inspected": "inspected"`) || !strings.Contains(list, `"Rejects": "defective"`) || !strings.Contains(list, `"date_order": "day-first"`) {
		t.Errorf("process list: %s", list)
	}
	if code, out, errs := runCLI(t, "", "audit", "verify", "--db", db); code != exitOK {
		t.Errorf("audit verify: %d %q %q", code, out, errs)
	}
}

package store

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"testing"
	"time"

	"lotwatch/spc"
)

// formulaNames are category names a spreadsheet would run as formulas
// (OWASP, "CSV Injection"; the examples of a probe of the server).
var formulaNames = []string{"=HYPERLINK(x)", "+cmd|' /C calc'!A0", "@SUM(1)", "-2+3", "'=1+1"}

// TestCategoryNamesAreNotFormulas: such names are refused when a process
// is made or changed.
func TestCategoryNamesAreNotFormulas(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		for _, name := range formulaNames {
			_, err := db.AddProcess(ctx, "qe", Process{Name: "P " + name, Chart: spc.ChartP, Categories: []string{"scratch", name}, Active: true})
			if !errors.Is(err, ErrInvalid) {
				t.Errorf("AddProcess with category %q: %v, want ErrInvalid", name, err)
			}
		}
	})
}

// TestExportGuardsHeaderCells: a category name stored before such names
// were refused is written to the CSV header with the same guard as the
// cells (a leading single quote), and the file imports back unchanged.
func TestExportGuardsHeaderCells(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p, err := db.AddProcess(ctx, "qe", Process{Name: "paint", Chart: spc.ChartP, Categories: []string{"scratch"}, Active: true})
		if err != nil {
			t.Fatal(err)
		}
		cats, _ := json.Marshal(append([]string{"scratch"}, formulaNames...))
		if _, err := db.w.Exec("UPDATE processes SET categories = ? WHERE id = ?", string(cats), p.ID); err != nil {
			t.Fatal(err)
		}
		at := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
		in := LotInput{Lot: "A1", Time: at, Inspected: 100, Count: 3, Categories: map[string]int64{"scratch": 1, "=HYPERLINK(x)": 1, "@SUM(1)": 1}}
		if _, err := db.AddLots(ctx, "qe", p.ID, []LotInput{in}); err != nil {
			t.Fatal(err)
		}
		var out bytes.Buffer
		if err := db.Export(ctx, &out, p.ID, ExportOptions{}); err != nil {
			t.Fatal(err)
		}
		head, err := csv.NewReader(bytes.NewReader(out.Bytes())).Read()
		if err != nil {
			t.Fatal(err)
		}
		for _, cell := range head {
			switch cell[0] {
			case '=', '+', '-', '@':
				t.Errorf("header cell %q would run as a formula", cell)
			}
		}
		res, err := db.Import(ctx, "qe", bytes.NewReader(out.Bytes()), ImportOptions{Process: "paint"})
		if err != nil {
			t.Fatalf("the export does not import back: %v\n%s", err, out.String())
		}
		if res.Added != 0 || res.Unchanged != 1 {
			t.Errorf("import of the export: %+v, want the lot unchanged", res)
		}
	})
}

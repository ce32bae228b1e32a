package lotcsv

import (
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/xuri/excelize/v2"
)

// zipMagic starts every XLSX file (a ZIP archive).
const zipMagic = "PK\x03\x04"

// xlsxRecords are the rows of one worksheet, read as the cells' stored
// values (a number as its digits, whatever the cell's display format).
type xlsxRecords struct {
	f        *excelize.File
	sheet    string
	rows     [][]string
	next     int // index in rows of the next row to read
	row      int // row number of the last row read (1-based)
	width    int // columns of the header
	date1904 bool
}

// NewXLSXReader reads a lot file kept as an XLSX workbook: the worksheet
// Options.Sheet, or the first one. The first row that is not empty is the
// header, with the same columns as a CSV file; empty rows are skipped.
// Numbers may be stored as numbers or as text; a time may be a
// spreadsheet date, read as the wall clock in Options.Location. Problems
// name the sheet and row (Problem.Sheet). The whole worksheet is read into
// memory (spreadsheets hold at most about a million rows); the workbook is
// closed when the last row has been read.
func NewXLSXReader(r io.Reader, opt Options) (*Reader, error) {
	f, err := excelize.OpenReader(r)
	if err != nil {
		return nil, Problems{{Reason: fmt.Sprintf("is not a readable XLSX workbook: %v", err)}}
	}
	sheets := f.GetSheetList()
	if len(sheets) == 0 {
		f.Close()
		return nil, Problems{{Reason: "the workbook has no worksheet"}}
	}
	sheet := sheets[0]
	if opt.Sheet != "" {
		sheet = ""
		for _, s := range sheets {
			if s == opt.Sheet {
				sheet = s
			}
		}
		if sheet == "" {
			f.Close()
			return nil, Problems{{Field: "sheet", Value: opt.Sheet, Reason: fmt.Sprintf("is not a worksheet of the workbook (it has %s)", strings.Join(sheets, ", "))}}
		}
	}
	rows, err := f.GetRows(sheet, excelize.Options{RawCellValue: true})
	if err != nil {
		f.Close()
		return nil, Problems{{Sheet: sheet, Reason: fmt.Sprintf("the worksheet cannot be read: %v", err)}}
	}
	x := &xlsxRecords{f: f, sheet: sheet, rows: rows}
	if props, err := f.GetWorkbookProps(); err == nil && props.Date1904 != nil {
		x.date1904 = *props.Date1904
	}
	rd, err := newReader(x, 0, opt)
	if err != nil {
		f.Close()
	}
	return rd, err
}

// Read returns the next row that has a cell with text, as many fields as
// the header has (empty cells at the end are not stored by spreadsheets).
func (x *xlsxRecords) Read() ([]string, error) {
	for x.next < len(x.rows) {
		rec := x.rows[x.next]
		x.next++
		x.row = x.next
		if blank(rec) {
			continue
		}
		if x.width == 0 {
			for len(rec) > 0 && strings.TrimSpace(rec[len(rec)-1]) == "" {
				rec = rec[:len(rec)-1]
			}
			x.width = len(rec)
		}
		for len(rec) > x.width && rec[len(rec)-1] == "" {
			rec = rec[:len(rec)-1]
		}
		for len(rec) < x.width {
			rec = append(rec, "")
		}
		return rec, nil
	}
	x.f.Close() // the temporary files of a large workbook
	return nil, io.EOF
}

func blank(rec []string) bool {
	for _, v := range rec {
		if strings.TrimSpace(v) != "" {
			return false
		}
	}
	return true
}

func (x *xlsxRecords) Line(int) int  { return x.row }
func (x *xlsxRecords) Sheet() string { return x.sheet }

// date reads field i of the last row when it is stored as a number, a
// spreadsheet date (days since the workbook's epoch); its wall clock is
// read in loc. ok is false for text, which is read as written.
func (x *xlsxRecords) date(i int, loc *time.Location) (t time.Time, ok bool, err error) {
	cell, err := excelize.CoordinatesToCellName(i+1, x.row)
	if err != nil {
		return time.Time{}, false, nil
	}
	typ, err := x.f.GetCellType(x.sheet, cell)
	if err != nil || (typ != excelize.CellTypeNumber && typ != excelize.CellTypeUnset) {
		return time.Time{}, false, nil
	}
	v, _ := x.f.GetCellValue(x.sheet, cell, excelize.Options{RawCellValue: true})
	serial, perr := strconv.ParseFloat(strings.TrimSpace(v), 64)
	if perr != nil {
		return time.Time{}, false, nil
	}
	if math.IsNaN(serial) || serial < 1 || serial > 2958465 { // 2958465 is 9999-12-31
		return time.Time{}, true, fmt.Errorf("is a number, not a spreadsheet date with a day (%v)", serial)
	}
	d, err := excelize.ExcelDateToTime(serial, x.date1904)
	if err != nil {
		return time.Time{}, true, fmt.Errorf("is not a spreadsheet date: %v", err)
	}
	return time.Date(d.Year(), d.Month(), d.Day(), d.Hour(), d.Minute(), d.Second(), 0, loc), true, nil
}

package store

import (
	"context"
	"errors"
	"path/filepath"
	"strconv"
	"testing"
	"time"
	"unicode/utf8"

	"lotwatch/spc"
)

var fuzzChartList = []spc.Chart{spc.ChartP, spc.ChartNP, spc.ChartU, spc.ChartC}

// FuzzValidateLot checks the one validation rule for lots against the
// promises made for it, on arbitrary field values:
//   - it never panics, and every problem names a field and gives a reason,
//     with printable (UTF-8) text;
//   - a count the chart's rule (spc.CheckLot) refuses is always refused;
//   - a lot it accepts is stored by AddLots and read back unchanged, field
//     for field (nothing a user logged is altered); one it refuses is
//     refused by AddLots too and stores nothing.
func FuzzValidateLot(f *testing.F) {
	f.Add("A-1", "early", "kim", "ok", int64(100), int64(2), int64(0), uint8(0), int64(1), true)
	f.Add("", "", "", "", int64(0), int64(0), int64(0), uint8(1), int64(0), false)
	f.Add(" A ", "x\ty", "k\x00", "<script>alert(1)</script>", int64(10), int64(11), int64(-1), uint8(0), int64(-1), true)
	f.Add("=cmd|' /C calc'!A0", "+1", "@x", "-2", int64(1_000_000_000_000), int64(999_999_999_999), int64(1e18), uint8(2), int64(5), true)
	f.Add("\xff\xfe", "ok", "ok", "\xc3\x28", int64(9223372036854775807), int64(9223372036854775807), int64(-1<<63), uint8(3), int64(0), false)
	f.Add("'; DROP TABLE lots; --", "night", "O'Brien", "Robert'); DROP TABLE lots;--", int64(5), int64(5), int64(1700000000e9), uint8(1), int64(6), true)
	db, procs := fuzzProcesses(f)
	f.Fuzz(func(t *testing.T, lot, shift, inspector, note string, inspected, count, unixNano int64, chart uint8, dent int64, withDent bool) {
		p := Process{ID: 1, Name: "fuzz", Chart: fuzzChartList[int(chart)%len(fuzzChartList)], Categories: []string{"dent"}, TimeZone: "UTC", Active: true}
		in := LotInput{Lot: lot, Shift: shift, Inspector: inspector, Note: note, Inspected: inspected, Count: count}
		if unixNano != 0 {
			in.Time = time.Unix(0, unixNano)
		}
		if withDent {
			in.Categories = map[string]int64{"dent": dent}
		}
		ps := ValidateLot(p, in)
		for _, pr := range ps {
			if pr.Field == "" || pr.Reason == "" {
				t.Fatalf("problem without a field or reason: %+v", pr)
			}
			if !utf8.ValidString(pr.Value) || !utf8.ValidString(pr.String()) {
				t.Fatalf("problem text is not valid UTF-8: %q", pr.String())
			}
		}
		if err := spc.CheckLot(p.Chart, inspected, count); err != nil {
			var fe *spc.FieldError
			if !errors.As(err, &fe) {
				t.Fatalf("CheckLot error %T is not a *FieldError", err)
			}
			found := false
			for _, pr := range ps {
				found = found || pr.Field == fe.Field
			}
			if !found {
				t.Fatalf("CheckLot refuses %s (%v) but ValidateLot does not: %v", fe.Field, err, ps)
			}
		}
		dp := procs[p.Chart]
		before := fuzzStored(t, db, dp.ID)
		stored, err := db.AddLots(context.Background(), "fuzz", dp.ID, []LotInput{in})
		if len(ps) > 0 {
			if err == nil {
				t.Fatalf("ValidateLot refuses (%v) but AddLots stored the lot", ps)
			}
			if after := fuzzStored(t, db, dp.ID); after != before {
				t.Fatalf("a refused lot changed the store: %s lots, were %s", after, before)
			}
			return
		}
		if errors.Is(err, ErrConflict) {
			return // the fuzzer sent the same code with other values before
		}
		if err != nil {
			t.Fatalf("ValidateLot accepts the lot but AddLots fails: %v", err)
		}
		got, err := db.LotByID(context.Background(), stored[0].ID)
		if err != nil {
			t.Fatal(err)
		}
		if got.Lot != in.Lot || got.Shift != in.Shift || got.Inspector != in.Inspector || got.Note != in.Note ||
			got.Inspected != in.Inspected || got.Count != in.Count || (!in.Time.IsZero() && !got.Time.Equal(in.Time)) ||
			(withDent && got.Categories["dent"] != dent) {
			t.Fatalf("stored lot differs from the one logged:\n got %+v\nwant %+v", got.LotInput, in)
		}
	})
}

// fuzzProcesses opens one database for the whole fuzzing process (one per
// input would make each input cost a schema build) with one process per
// chart.
func fuzzProcesses(f *testing.F) (*DB, map[spc.Chart]Process) {
	db, err := Open(filepath.Join(f.TempDir(), "fuzz.db"))
	if err != nil {
		f.Fatal(err)
	}
	f.Cleanup(func() { db.Close() })
	ps := map[spc.Chart]Process{}
	for _, c := range fuzzChartList {
		p, err := db.AddProcess(context.Background(), "fuzz", Process{Name: "fuzz-" + string(c), Chart: c, Categories: []string{"dent"}, TimeZone: "UTC"})
		if err != nil {
			f.Fatal(err)
		}
		ps[c] = p
	}
	return db, ps
}

func fuzzStored(t *testing.T, db *DB, pid int64) string {
	var n, maxID int64
	if err := db.r.QueryRow("SELECT COUNT(*), COALESCE(MAX(revision*1000000000+id), 0) FROM lots WHERE process_id = ?", pid).Scan(&n, &maxID); err != nil {
		t.Fatal(err)
	}
	return strconv.FormatInt(n, 10) + "/" + strconv.FormatInt(maxID, 10)
}

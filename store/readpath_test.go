package store

import (
	"context"
	"fmt"
	"math/rand/v2"
	"reflect"
	"testing"
	"time"

	"lotwatch/spc"
)

// TestReadPathsAgree checks the read paths (Lots and EachLot,
// which read the covering index lots_read and decode each stored form of
// category counts once, and the charts' LotCounts and
// LotCountsAddedAfter) against LotByID, which reads the table's row:
// every field of every lot (its counts only for the charts' reads),
// over many shifts, inspectors, notes and category counts, with
// corrections and voids among them. The reference is the row as stored
// (a property of the store itself; no outside source applies).
func TestReadPathsAgree(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		ctx := context.Background()
		db, _ := open(t)
		p, err := db.AddProcess(ctx, "t", Process{Name: "read paths", Chart: spc.ChartP, Method: spc.MethodSigma, K: 3,
			Rules: "we", Categories: []string{"a", "b", "c"}, TimeZone: "Europe/Berlin", Active: true})
		if err != nil {
			t.Fatal(err)
		}
		rng := rand.New(rand.NewPCG(7, 11))
		start := time.Date(2026, 3, 1, 6, 0, 0, 0, time.UTC)
		var in []LotInput
		for i := 0; i < 3000; i++ {
			n := int64(50 + rng.IntN(200))
			d := int64(rng.IntN(6))
			cats := map[string]int64{"a": int64(rng.IntN(3)), "b": int64(rng.IntN(2))}
			if rng.IntN(4) == 0 {
				cats = nil // not recorded
			}
			note := ""
			if rng.IntN(5) == 0 {
				note = fmt.Sprintf("note %d", rng.IntN(40))
			}
			in = append(in, LotInput{Lot: fmt.Sprintf("R%05d", i), Time: start.Add(time.Duration(i) * 17 * time.Minute),
				Shift: fmt.Sprintf("shift %d", rng.IntN(90)), Inspected: n, Count: d, Categories: cats,
				Inspector: fmt.Sprintf("badge %d", rng.IntN(7)), Note: note})
		}
		stored, err := db.AddLots(ctx, "t", p.ID, in)
		if err != nil {
			t.Fatal(err)
		}
		for i := 0; i < 100; i++ {
			l := stored[rng.IntN(len(stored))]
			c := l.LotInput
			c.Count = (c.Count + 1) % 5
			c.Note = "corrected"
			if _, err := db.CorrectLot(ctx, "t", "recount", l.ID, c); err != nil {
				t.Fatal(err)
			}
		}
		for i := 0; i < 20; i++ {
			if err := db.VoidLot(ctx, "t", "wrong line", stored[5+i*137].ID); err != nil {
				t.Fatal(err)
			}
		}
		lots, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		var walked []Lot
		if err := db.EachLot(ctx, p.ID, time.Time{}, time.Time{}, func(l Lot) error {
			l.Categories = cloneCounts(l.Categories)
			walked = append(walked, l)
			return nil
		}); err != nil {
			t.Fatal(err)
		}
		counts, err := db.LotCounts(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		added, err := db.LotCountsAddedAfter(ctx, p.ID, stored[999].ID)
		if err != nil {
			t.Fatal(err)
		}
		if len(lots) != len(walked) || len(lots) != len(stored)-20 || len(counts) != len(lots) {
			t.Fatalf("Lots %d, EachLot %d, LotCounts %d", len(lots), len(walked), len(counts))
		}
		if want := len(stored) - 1000 - 12; len(added) != want { // voided after lot 1000: 5+i*137 > 999 for i ≥ 8
			t.Fatalf("LotCountsAddedAfter: %d lots, want %d", len(added), want)
		}
		for i, l := range added {
			if !sameLot(l, countsOf(lots[len(lots)-len(added)+i])) {
				t.Fatalf("LotCountsAddedAfter: lot %s read as\n%+v", l.Lot, l)
			}
		}
		for i, l := range lots {
			ref, err := db.LotByID(ctx, l.ID)
			if err != nil {
				t.Fatal(err)
			}
			for _, got := range []Lot{l, walked[i]} {
				if !sameLot(got, ref) {
					t.Fatalf("lot %s read as\n%+v\nstored\n%+v", l.Lot, got, ref)
				}
			}
			if !sameLot(counts[i], countsOf(ref)) {
				t.Fatalf("LotCounts: lot %s read as\n%+v\nstored\n%+v", l.Lot, counts[i], ref)
			}
		}
	})
}

// countsOf is what LotCounts reads of a lot: the rest left empty.
func countsOf(l Lot) Lot {
	return Lot{ID: l.ID, ProcessID: l.ProcessID, LotInput: LotInput{Lot: l.Lot, Time: l.Time, Shift: l.Shift,
		Inspected: l.Inspected, Count: l.Count, Categories: l.Categories}}
}

func cloneCounts(m map[string]int64) map[string]int64 {
	if m == nil {
		return nil
	}
	out := make(map[string]int64, len(m))
	for k, v := range m {
		out[k] = v
	}
	return out
}

// sameLot compares two reads of a lot, times by instant.
func sameLot(a, b Lot) bool {
	if !a.Time.Equal(b.Time) || !a.Recorded.Equal(b.Recorded) {
		return false
	}
	a.Time, b.Time, a.Recorded, b.Recorded = time.Time{}, time.Time{}, time.Time{}, time.Time{}
	if len(a.Categories) == 0 && len(b.Categories) == 0 {
		a.Categories, b.Categories = nil, nil
	}
	return reflect.DeepEqual(a, b)
}

package store

import (
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
)

// LotsVersion moves with every write a chart is drawn from, Rewrites only
// with those that change stored lots or how they are judged; refused and
// repeated writes move nothing. LotCountsAddedAfter returns the lots added
// since a given id.
func TestLotsVersion(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, path := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		t0 := time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC)
		want := func(step string, version, rewrites int64) {
			t.Helper()
			v, err := db.LotsVersion(ctx, p.ID)
			if err != nil || v != (LotsVersion{version, rewrites}) {
				t.Errorf("after %s: %+v %v, want {%d %d}", step, v, err, version, rewrites)
			}
		}
		want("nothing", 0, 0)
		in := []LotInput{{Lot: "A1", Time: t0, Inspected: 10, Count: 1}, {Lot: "A2", Time: t0.Add(time.Hour), Inspected: 10}}
		got, err := db.AddLots(ctx, "a", p.ID, in)
		if err != nil {
			t.Fatal(err)
		}
		want("add", 1, 0)
		db.AddLots(ctx, "a", p.ID, in) // repeated: nothing new
		want("repeat", 1, 0)
		db.AddLots(ctx, "a", p.ID, []LotInput{{Lot: "A1", Time: t0, Inspected: 10, Count: 2}}) // conflict
		want("conflict", 1, 0)
		fix := in[0]
		fix.Count = 0
		if _, err := db.CorrectLot(ctx, "a", "recount", got[0].ID, fix); err != nil {
			t.Fatal(err)
		}
		want("correct", 2, 1)
		if err := db.VoidLot(ctx, "a", "wrong", got[1].ID); err != nil {
			t.Fatal(err)
		}
		want("void", 3, 2)
		if _, err := db.FreezeLimitSet(ctx, "a", LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.1, Reason: "r"}); err != nil {
			t.Fatal(err)
		}
		want("freeze", 4, 3)
		p.Rules = "nelson"
		if _, err := db.UpdateProcess(ctx, "a", "rules", p); err != nil {
			t.Fatal(err)
		}
		want("update", 5, 4)

		// A second connection to the file (another program) writes: seen,
		// and the audit chain goes on from the entry that program wrote.
		other := openAgain(t, path)
		if _, err := other.Import(ctx, "b", strings.NewReader("lot,time,inspected,defective\nB1,2025-03-01T05:00:00Z,10,1\n"), ImportOptions{Process: "press"}); err != nil {
			t.Fatal(err)
		}
		want("import elsewhere", 6, 4)
		if _, err := db.AddLots(ctx, "a", p.ID, []LotInput{{Lot: "A3", Time: t0.Add(2 * time.Hour), Inspected: 10}}); err != nil {
			t.Fatal(err)
		}
		want("add after", 7, 4)
		if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK {
			t.Fatalf("audit: %+v %v", chk, err)
		}
		added, err := db.LotCountsAddedAfter(ctx, p.ID, got[1].ID)
		if err != nil || len(added) != 2 || added[0].Lot != "B1" || added[1].Lot != "A3" {
			t.Fatalf("added after %d: %+v %v", got[1].ID, added, err)
		}
	})
}

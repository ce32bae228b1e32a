package store

import (
	"context"
	"fmt"
	"testing"
	"time"

	"lotwatch/spc"
)

// TestFileSizeGrows: the size monitoring reports is that of the database
// on either backend (the file and its log, or the schema's tables on
// PostgreSQL), so it is above zero and rises as lots are stored.
func TestFileSizeGrows(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		ctx := context.Background()
		db, _ := open(t)
		p := addProcess(t, db, "size", spc.ChartP)
		before, err := db.FileSize()
		if err != nil || before <= 0 {
			t.Fatalf("FileSize of a new database: %d, %v", before, err)
		}
		in := make([]LotInput, 2000)
		start := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
		for i := range in {
			in[i] = LotInput{Lot: fmt.Sprintf("S%05d", i), Time: start.Add(time.Duration(i) * time.Hour), Inspected: 200, Count: int64(i % 7)}
		}
		if _, err := db.AddLots(ctx, "t", p.ID, in); err != nil {
			t.Fatal(err)
		}
		after, err := db.FileSize()
		if err != nil || after <= before {
			t.Errorf("FileSize after 2000 lots: %d (%v), before %d", after, err, before)
		}
	})
}

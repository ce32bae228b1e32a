package store

import (
	"errors"
	"fmt"
	"sync"
	"testing"
	"time"

	"lotwatch/spc"
)

// Lots posted at once are committed together, each post in its own
// savepoint; when one of them fails (a conflict) the others' lots are
// stored once, the failing one gets its own error, and the audit trail,
// written at the batch's end, holds only the posts that stayed.
func TestBatchWithAFailingJob(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		t0 := time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC)
		if _, err := db.AddLots(ctx, "a", p.ID, []LotInput{{Lot: "X", Time: t0, Inspected: 10, Count: 1}}); err != nil {
			t.Fatal(err)
		}
		var sizes []int
		db.OnCommit(func(_ time.Duration, writes int) { sizes = append(sizes, writes) })

		// Hold the writer until all the posts wait in its queue, so that
		// they make one batch.
		hold, held := make(chan struct{}), make(chan struct{})
		go db.write(ctx, func(*wtx) error { close(held); <-hold; return nil })
		<-held
		const posts = 6
		errs := make([]error, posts)
		var wg sync.WaitGroup
		for i := range posts {
			wg.Add(1)
			go func() {
				defer wg.Done()
				in := LotInput{Lot: fmt.Sprintf("L%d", i), Time: t0.Add(time.Duration(i+1) * time.Hour), Inspected: 10, Count: 1}
				if i == 3 {
					in = LotInput{Lot: "X", Time: t0, Inspected: 10, Count: 2} // X is stored with 1
				}
				_, errs[i] = db.AddLots(ctx, "a", p.ID, []LotInput{in})
			}()
		}
		for len(db.jobs) < posts {
			time.Sleep(time.Millisecond)
		}
		close(hold)
		wg.Wait()

		if len(sizes) < 2 || sizes[1] != posts {
			t.Errorf("batches of %v writes, want the %d posts in one", sizes, posts)
		}
		for i, err := range errs {
			if want := i == 3; errors.Is(err, ErrConflict) != want || (!want && err != nil) {
				t.Errorf("post %d: %v", i, err)
			}
		}
		lots, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil || len(lots) != posts {
			t.Fatalf("%d lots stored (%v), want X and the 5 others", len(lots), err)
		}
		if lots[0].Lot != "X" || lots[0].Count != 1 {
			t.Errorf("X stored as %+v", lots[0])
		}
		entries := 2 + posts - 1 // the process, X, the others
		if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK || chk.Entries != entries {
			t.Errorf("audit: %+v %v, want %d entries that hold", chk, err, entries)
		}
	})
}

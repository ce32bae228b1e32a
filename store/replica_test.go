package store

import (
	"errors"
	"fmt"
	"reflect"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store/storetest"
)

// TestReadReplica, on the test server's streaming replica (.ci/postgres):
// the reads of lots are answered by the replica once it has replayed the
// process's latest change, by the primary while replay is held back or
// the replica cannot be read, and every answer equals the primary's.
func TestReadReplica(t *testing.T) {
	db, u := openPostgresTemp(t)
	repURL := storetest.ReplicaOf(t, u)
	plain := openAgain(t, u) // the same database without a replica
	p := addProcess(t, db, "press", spc.ChartP)
	t0 := time.Date(2026, 11, 2, 6, 0, 0, 0, time.UTC)
	add := func(i int) {
		t.Helper()
		in := LotInput{Lot: fmt.Sprintf("A%d", i), Time: t0.Add(time.Duration(i) * time.Hour), Inspected: 50, Count: int64(i % 3)}
		if _, err := db.AddLots(ctx, "a", p.ID, []LotInput{in}); err != nil {
			t.Fatal(err)
		}
	}
	for i := range 3 {
		add(i)
	}
	if err := db.UseReplica(repURL); err != nil {
		t.Fatal(err)
	}
	// read reads through the replica and checks the answer against the
	// primary's; it returns which way the read went.
	read := func(step string) ReplicaReads {
		t.Helper()
		before, _ := db.ReplicaReads()
		got, err := db.LotCounts(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatalf("%s: %v", step, err)
		}
		want, err := plain.LotCounts(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s: read %d lots, the primary holds %d", step, len(got), len(want))
		}
		after, _ := db.ReplicaReads()
		return ReplicaReads{after.Replica - before.Replica, after.Lagging - before.Lagging, after.Failed - before.Failed}
	}
	// caughtUp reads until the replica answers (it replays within
	// milliseconds; 30 s allows for a loaded machine).
	caughtUp := func(step string) {
		t.Helper()
		for start := time.Now(); time.Since(start) < 30*time.Second; time.Sleep(20 * time.Millisecond) {
			if d := read(step); d.Replica == 1 {
				return
			}
		}
		t.Fatalf("%s: the replica never answered", step)
	}
	caughtUp("caught up")
	added, err := db.LotCountsAddedAfter(ctx, p.ID, 0)
	if err != nil || len(added) != 3 {
		t.Errorf("lots added after 0: %d %v, want 3", len(added), err)
	}

	// Replay held back: the lot just added is read all the same, from
	// the primary.
	release := storetest.HoldReplay(t, repURL)
	add(3)
	if d := read("replay paused"); d != (ReplicaReads{Lagging: 1}) {
		t.Errorf("replay paused: %+v, want the primary to answer because the replica lags", d)
	}
	release()
	caughtUp("replay resumed")

	// The replica cannot be read: the primary answers, and goes on
	// answering alone for a while although the replica is back.
	db.replica.db.Close()
	if d := read("replica closed"); d != (ReplicaReads{Failed: 1}) {
		t.Errorf("replica closed: %+v, want the primary to answer because the replica failed", d)
	}
	db.replica.db = openAgain(t, u).r
	if d := read("replica back, resting"); d != (ReplicaReads{Failed: 1}) {
		t.Errorf("replica back within its rest: %+v, want the primary to answer alone", d)
	}
	db.replica.restUntil.Store(0)
	if d := read("replica back, rested"); d != (ReplicaReads{Replica: 1}) {
		t.Errorf("replica back after its rest: %+v, want it to answer", d)
	}
}

// TestUseReplicaRefuses: a replica that cannot be one is refused with the
// reason, the password never printed.
func TestUseReplicaRefuses(t *testing.T) {
	pg, u := openPostgresTemp(t)
	addProcess(t, pg, "press", spc.ChartP)
	other, otherURL := openPostgresTemp(t) // another plant's database
	addProcess(t, other, "oven", spc.ChartU)
	lite, _ := openTemp(t)
	withPassword := func(raw, host string) string {
		return strings.Replace(raw, "@"+hostOf(t, raw), "@"+host, 1)
	}
	cases := []struct {
		name string
		db   *DB
		url  string
		want error
	}{
		{"SQLite store", lite, u, ErrReplicaNeedsServer},
		{"file as replica", pg, "/tmp/replica.db", ErrReplicaNeedsServer},
		{"malformed URL", pg, withPassword(u, "127.0.0.1:notaport"), ErrBadURL},
		{"no server there", pg, withPassword(u, "127.0.0.1:1"), ErrUnreachable},
		{"another plant's database", pg, otherURL, ErrNotReplica},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			err := c.db.UseReplica(c.url)
			if !errors.Is(err, c.want) {
				t.Fatalf("UseReplica: %v, want %v", err, c.want)
			}
			if _, ok := c.db.ReplicaReads(); ok {
				t.Error("the refused replica is in use")
			}
			for _, s := range secretsOf(c.url) {
				if strings.Contains(err.Error(), s) {
					t.Errorf("the error shows the password: %v", err)
				}
			}
		})
	}
}

// hostOf is the host:port of a URL.
func hostOf(t *testing.T, raw string) string {
	t.Helper()
	_, rest, _ := strings.Cut(raw, "@")
	host, _, _ := strings.Cut(rest, "/")
	return host
}

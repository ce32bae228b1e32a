package store

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"
)

// attemptCounter is what counts failed sign-ins: a database, or memory.
type attemptCounter interface {
	RecordSignInFailure(ctx context.Context, now time.Time, limits ...AttemptLimit) (time.Duration, error)
	SignInWait(ctx context.Context, now time.Time, keys ...string) (time.Duration, error)
	ClearSignInFailures(ctx context.Context, now time.Time, key string) error
}

// memCounter counts in memory only, as a read-only database does.
type memCounter struct{ m memAttempts }

func (c *memCounter) RecordSignInFailure(_ context.Context, now time.Time, limits ...AttemptLimit) (time.Duration, error) {
	return c.m.fail(now.UnixNano(), limits), nil
}

func (c *memCounter) SignInWait(_ context.Context, now time.Time, keys ...string) (time.Duration, error) {
	return c.m.wait(now.UnixNano(), keys), nil
}

func (c *memCounter) ClearSignInFailures(_ context.Context, _ time.Time, key string) error {
	c.m.clear(key)
	return nil
}

// testLimit holds a key to three failures a minute, blocks of at most
// four minutes, forgotten after an hour's quiet.
func testLimit(key string) AttemptLimit {
	return AttemptLimit{Key: key, Max: 3, Window: time.Minute, MaxBlock: 4 * time.Minute, Forget: time.Hour}
}

// attemptStep is one event of a key's history: at seconds after the
// start, a failure ("fail"), a question ("wait") or a success ("clear")
// for keys, and the wait it should report.
type attemptStep struct {
	at   int
	op   string
	keys []string
	want time.Duration
}

const sec = time.Second

// attemptHistory walks through the rules: the third failure within a
// minute blocks for a minute, each further block lasts twice as long up
// to the cap, failures older than a minute stop counting, an hour's
// quiet forgets the strikes, a success clears its key only, and keys
// are held apart.
var attemptHistory = []attemptStep{
	{0, "fail", []string{"a"}, 0},
	{1, "fail", []string{"a"}, 0},
	{2, "wait", []string{"a"}, 0},
	{2, "fail", []string{"a"}, 60 * sec},
	{32, "wait", []string{"a"}, 30 * sec},
	{32, "wait", []string{"b"}, 0},
	{32, "wait", []string{"b", "a"}, 30 * sec},
	{62, "wait", []string{"a"}, 0},
	{62, "fail", []string{"a"}, 0},
	{63, "fail", []string{"a"}, 0},
	{64, "fail", []string{"a"}, 120 * sec},
	{184, "fail", []string{"a"}, 0},
	{185, "fail", []string{"a"}, 0},
	{186, "fail", []string{"a"}, 240 * sec},
	{426, "fail", []string{"a"}, 0},
	{427, "fail", []string{"a"}, 0},
	{428, "fail", []string{"a"}, 240 * sec}, // the cap
	// A sliding minute: the failures at 700 and 701 no longer count at 761.
	{700, "fail", []string{"b"}, 0},
	{701, "fail", []string{"b"}, 0},
	{761, "fail", []string{"b"}, 0},
	{762, "fail", []string{"b"}, 0},
	{763, "fail", []string{"b"}, 60 * sec},
	// A success forgets its key's failures, not another key's.
	{900, "fail", []string{"c", "d"}, 0},
	{901, "fail", []string{"c", "d"}, 0},
	{902, "clear", []string{"c"}, 0},
	{903, "fail", []string{"c", "d"}, 60 * sec},
	{904, "wait", []string{"c"}, 0},
	{904, "wait", []string{"d"}, 59 * sec},
	// An hour's quiet forgets the strikes: the next block is a minute.
	{428 + 3600 + 241, "fail", []string{"a"}, 0},
	{428 + 3600 + 242, "fail", []string{"a"}, 0},
	{428 + 3600 + 243, "fail", []string{"a"}, 60 * sec},
}

// playAttempts plays the history on c from t0 and checks each answer.
func playAttempts(t *testing.T, c attemptCounter, t0 time.Time, history []attemptStep) {
	t.Helper()
	for i, s := range history {
		now := t0.Add(time.Duration(s.at) * sec)
		var got time.Duration
		var err error
		switch s.op {
		case "fail":
			var ls []AttemptLimit
			for _, k := range s.keys {
				ls = append(ls, testLimit(k))
			}
			got, err = c.RecordSignInFailure(ctx, now, ls...)
		case "wait":
			got, err = c.SignInWait(ctx, now, s.keys...)
		case "clear":
			err = c.ClearSignInFailures(ctx, now, s.keys[0])
		}
		if err != nil {
			t.Fatalf("step %d (%s %v at %ds): %v", i, s.op, s.keys, s.at, err)
		}
		if got != s.want {
			t.Errorf("step %d (%s %v at %ds): wait %v, want %v", i, s.op, s.keys, s.at, got, s.want)
		}
	}
}

var attemptStart = time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)

// TestSignInFailures: the database on each backend, and memory, answer
// the same history alike.
func TestSignInFailures(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		playAttempts(t, db, attemptStart, attemptHistory)
	})
	t.Run("memory", func(t *testing.T) {
		playAttempts(t, &memCounter{}, attemptStart, attemptHistory)
	})
}

// TestSignInFailuresSharedByServers: two stores open on one database
// (two servers) count into one record: failures split between them block
// the key on both, and a success on one clears it on the other. None of
// it enters the audit trail.
func TestSignInFailuresSharedByServers(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		a, where := open(t)
		b := openAgain(t, where)
		seq := auditSeq(t, a)
		servers := []*DB{a, b}
		for i, want := range []time.Duration{0, 0, time.Minute} {
			got, err := servers[i%2].RecordSignInFailure(ctx, attemptStart, testLimit("ana\x0010.0.0.1"))
			if err != nil || got != want {
				t.Fatalf("failure %d on server %d: %v %v, want %v", i+1, i%2+1, got, err, want)
			}
		}
		for i, db := range servers {
			if got, err := db.SignInWait(ctx, attemptStart.Add(10*sec), "ana\x0010.0.0.1"); err != nil || got != 50*sec {
				t.Errorf("server %d: wait %v %v, want 50s", i+1, got, err)
			}
		}
		if err := b.ClearSignInFailures(ctx, attemptStart.Add(10*sec), "ana\x0010.0.0.1"); err != nil {
			t.Fatal(err)
		}
		if got, err := a.SignInWait(ctx, attemptStart.Add(10*sec), "ana\x0010.0.0.1"); err != nil || got != 0 {
			t.Errorf("server 1 after a success on server 2: wait %v %v, want 0", got, err)
		}
		if got := auditSeq(t, a); got != seq {
			t.Errorf("counting failed sign-ins moved the audit head from %d to %d", seq, got)
		}
	})
}

// TestSignInFailuresConcurrent: failures recorded at once by two stores
// on one database are all counted; none is lost to another server's
// count read before it committed.
func TestSignInFailuresConcurrent(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		a, where := open(t)
		b := openAgain(t, where)
		const each = 12
		lim := AttemptLimit{Key: "10.0.0.9", Max: 1000, Window: time.Hour, MaxBlock: time.Hour, Forget: 2 * time.Hour}
		var wg sync.WaitGroup
		errs := make(chan error, 2*each)
		for i := range 2 * each {
			db := []*DB{a, b}[i%2]
			wg.Add(1)
			go func() {
				defer wg.Done()
				_, err := db.RecordSignInFailure(ctx, attemptStart.Add(time.Duration(i)*time.Millisecond), lim)
				errs <- err
			}()
		}
		wg.Wait()
		close(errs)
		for err := range errs {
			if err != nil {
				t.Fatal(err)
			}
		}
		if n := countRows(t, a, "signin_failures"); n != 2*each {
			t.Errorf("%d failures recorded at once by two servers, %d counted", 2*each, n)
		}
	})
}

// TestSignInFailuresAreSwept: failures past their minute and records
// quiet for an hour leave the tables as the next failure is recorded.
func TestSignInFailuresAreSwept(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		for i := range 10 {
			if _, err := db.RecordSignInFailure(ctx, attemptStart, testLimit(fmt.Sprint("10.0.1.", i))); err != nil {
				t.Fatal(err)
			}
		}
		steps := []struct {
			after            time.Duration
			failures, blocks int
		}{
			{0, 10, 10},
			{2 * time.Minute, 1, 11},
			{2 * time.Hour, 1, 1},
		}
		for _, s := range steps {
			if s.after > 0 {
				if _, err := db.RecordSignInFailure(ctx, attemptStart.Add(s.after), testLimit("10.0.2.1")); err != nil {
					t.Fatal(err)
				}
			}
			if f, b := countRows(t, db, "signin_failures"), countRows(t, db, "signin_blocks"); f != s.failures || b != s.blocks {
				t.Errorf("after %v: %d failures and %d records kept, want %d and %d", s.after, f, b, s.failures, s.blocks)
			}
		}
	})
}

// On read-only media failed sign-ins are counted in memory, with the
// same answers, and the file is left as it was.
//
// SQLite only: read-only files.
func TestSignInFailuresReadOnly(t *testing.T) {
	media := t.TempDir()
	plant := filepath.Join(media, "plant.db")
	db, err := Open(plant)
	if err != nil {
		t.Fatal(err)
	}
	db.Close()
	before, err := os.ReadFile(plant)
	if err != nil {
		t.Fatal(err)
	}
	readOnlyDir(t, media)
	ro, err := Open(plant)
	if err != nil {
		t.Fatal(err)
	}
	defer ro.Close()
	if !ro.ReadOnly() {
		t.Fatal("not opened read-only")
	}
	playAttempts(t, ro, attemptStart, attemptHistory)
	if after, _ := os.ReadFile(plant); string(after) != string(before) {
		t.Error("counting failed sign-ins changed a read-only file")
	}
}

func countRows(t *testing.T, db *DB, table string) (n int) {
	t.Helper()
	if err := db.r.QueryRow("SELECT COUNT(*) FROM " + table).Scan(&n); err != nil {
		t.Fatal(err)
	}
	return n
}

func auditSeq(t *testing.T, db *DB) (seq int64) {
	t.Helper()
	if err := db.r.QueryRow("SELECT seq FROM audit_head WHERE id = 1").Scan(&seq); err != nil {
		t.Fatal(err)
	}
	return seq
}

package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"golang.org/x/crypto/bcrypt"

	"lotwatch/spc"
)

func init() { bcryptCost = bcrypt.MinCost } // keep tests fast; the cost is bcrypt's own parameter

var ctx = context.Background()

func openTemp(t testing.TB) (*DB, string) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "lotwatch.db")
	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db, path
}

func addProcess(t testing.TB, db *DB, name string, chart spc.Chart, cats ...string) Process {
	t.Helper()
	p, err := db.AddProcess(ctx, "tester", Process{Name: name, Chart: chart, Categories: cats, TimeZone: "UTC"})
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// rawSQL opens the database (a file or a URL) with plain SQL, as someone
// going behind lotwatch's back; queries are written with ? placeholders
// on both backends.
func rawSQL(t *testing.T, path string) *sql.DB {
	t.Helper()
	var raw *sql.DB
	var err error
	if IsURL(path) {
		raw, err = rawPostgres(path)
	} else {
		raw, err = sql.Open("sqlite3", "file:"+path)
	}
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { raw.Close() })
	return raw
}

// SQLite only: SQLite's migrations and user_version (PostgreSQL's schema is held to SQLite's by TestSchemasAgree).
func TestMigrations(t *testing.T) {
	db, path := openTemp(t)
	var n, uv int
	if err := db.r.QueryRow("SELECT COUNT(*) FROM schema_migrations").Scan(&n); err != nil {
		t.Fatal(err)
	}
	db.r.QueryRow("PRAGMA user_version").Scan(&uv)
	if n != SchemaVersion() || uv != SchemaVersion() || n == 0 {
		t.Fatalf("migrations recorded %d, user_version %d, want %d", n, uv, SchemaVersion())
	}
	addProcess(t, db, "press", spc.ChartP)
	db.Close()

	// Reopen: nothing applied twice, data kept.
	db2, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	db2.r.QueryRow("SELECT COUNT(*) FROM schema_migrations").Scan(&n)
	if n != SchemaVersion() {
		t.Errorf("after reopen %d migrations recorded", n)
	}
	if _, err := db2.ProcessByName(ctx, "press"); err != nil {
		t.Errorf("process lost on reopen: %v", err)
	}
	db2.Close()

	// A newer lotwatch wrote the file: refuse it.
	raw := rawSQL(t, path)
	if _, err := raw.Exec("INSERT INTO schema_migrations VALUES (?, 'future.sql', 0)", SchemaVersion()+1); err != nil {
		t.Fatal(err)
	}
	raw.Close()
	_, err = Open(path)
	if !errors.Is(err, ErrNewerSchema) || !strings.Contains(err.Error(), "newer lotwatch") {
		t.Fatalf("newer schema: err %v", err)
	}
}

// SQLite only: PRAGMAs.
func TestPragmas(t *testing.T) {
	db, _ := openTemp(t)
	var mode string
	var sync, fk int
	db.w.QueryRow("PRAGMA journal_mode").Scan(&mode)
	db.w.QueryRow("PRAGMA synchronous").Scan(&sync)
	db.w.QueryRow("PRAGMA foreign_keys").Scan(&fk)
	if mode != "wal" || sync != 2 || fk != 1 { // synchronous FULL = 2 (SQLite pragma documentation)
		t.Errorf("journal_mode %q synchronous %d foreign_keys %d", mode, sync, fk)
	}
	if _, err := db.r.Exec("INSERT INTO users (name, role, password_hash, created) VALUES ('x', 'admin', '', 0)"); err == nil {
		t.Error("read pool accepted a write")
	}
}

func TestUsersSessionsTokens(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, path := open(t)
		u, err := db.AddUser(ctx, "root", "ana", RoleEngineer, "correct horse")
		if err != nil {
			t.Fatal(err)
		}
		if _, err := db.AddUser(ctx, "root", "ana", RoleViewer, "another pass"); !errors.Is(err, ErrConflict) {
			t.Errorf("duplicate user: %v", err)
		}
		for _, bad := range []struct{ name, role, pw string }{{"", "viewer", "longenough"}, {"a b", "viewer", "longenough"}, {"bo", "boss", "longenough"}, {"bo", "viewer", "short"}} {
			if _, err := db.AddUser(ctx, "root", bad.name, Role(bad.role), bad.pw); !errors.Is(err, ErrInvalid) {
				t.Errorf("AddUser(%q, %q, %q): %v", bad.name, bad.role, bad.pw, err)
			}
		}
		if _, err := db.Authenticate(ctx, "ana", "correct horse"); err != nil {
			t.Errorf("good password: %v", err)
		}
		for _, c := range [][2]string{{"ana", "wrong horse"}, {"nobody", "correct horse"}} {
			if _, err := db.Authenticate(ctx, c[0], c[1]); !errors.Is(err, ErrBadCredentials) {
				t.Errorf("Authenticate(%q, %q): %v", c[0], c[1], err)
			}
		}
		now := time.Date(2025, 1, 1, 8, 0, 0, 0, time.UTC)
		sid, err := db.CreateSession(ctx, u.ID, now)
		if err != nil {
			t.Fatal(err)
		}
		if got, err := db.SessionUser(ctx, sid, now.Add(10*time.Minute), time.Hour, 12*time.Hour); err != nil || got.Name != "ana" {
			t.Errorf("live session: %v %v", got, err)
		}
		if _, err := db.SessionUser(ctx, sid, now.Add(13*time.Hour), 24*time.Hour, 12*time.Hour); !errors.Is(err, ErrNotFound) {
			t.Errorf("session past absolute lifetime: %v", err)
		}
		sid2, _ := db.CreateSession(ctx, u.ID, now)
		if _, err := db.SessionUser(ctx, sid2, now.Add(2*time.Hour), time.Hour, 12*time.Hour); !errors.Is(err, ErrNotFound) {
			t.Errorf("idle session: %v", err)
		}
		raw, tok, err := db.CreateToken(ctx, "root", "ana", "line 3 tablet")
		if err != nil {
			t.Fatal(err)
		}
		if got, err := db.TokenUser(ctx, raw); err != nil || got.Name != "ana" {
			t.Errorf("token: %v %v", got, err)
		}
		// Only hashes are stored: neither raw value appears in the file's tables.
		rdb := rawSQL(t, path)
		var n int
		rdb.QueryRow("SELECT COUNT(*) FROM tokens WHERE hash = ? OR CAST(hash AS TEXT) = ?", raw, raw).Scan(&n)
		if n != 0 {
			t.Error("raw token stored")
		}
		if err := db.RevokeToken(ctx, "root", tok.ID); err != nil {
			t.Fatal(err)
		}
		if _, err := db.TokenUser(ctx, raw); !errors.Is(err, ErrNotFound) {
			t.Errorf("revoked token: %v", err)
		}
		if r, err := ParseRole("Engineer"); err != nil || !r.AtLeast(RoleInspector) || r.AtLeast(RoleAdmin) {
			t.Errorf("roles: %v %v", r, err)
		}
	})
}

// Every rule of ValidateLot, one case each (the rules are lotwatch's own;
// count rules are spc.CheckLot's).
func TestValidateLot(t *testing.T) {
	p := Process{Name: "press", Chart: spc.ChartP, Categories: []string{"dent", "scratch"}}
	u := Process{Name: "paint", Chart: spc.ChartU, Categories: []string{"dent"}}
	now := time.Date(2025, 6, 1, 12, 0, 0, 0, time.UTC)
	ok := LotInput{Lot: "A1", Time: now.Add(-time.Hour), Inspected: 50, Count: 2, Categories: map[string]int64{"dent": 2}}
	with := func(f func(*LotInput)) LotInput {
		in := ok
		in.Categories = map[string]int64{"dent": 2}
		f(&in)
		return in
	}
	cases := []struct {
		name  string
		p     Process
		in    LotInput
		field string
	}{
		{"empty lot code", p, with(func(l *LotInput) { l.Lot = "" }), "lot"},
		{"spaces round lot code", p, with(func(l *LotInput) { l.Lot = " A1" }), "lot"},
		{"control char in lot code", p, with(func(l *LotInput) { l.Lot = "A\t1" }), "lot"},
		{"bad utf8 note", p, with(func(l *LotInput) { l.Note = "\xff" }), "note"},
		{"shift with spaces", p, with(func(l *LotInput) { l.Shift = "B " }), "shift"},
		{"zero inspected", p, with(func(l *LotInput) { l.Inspected = 0; l.Categories = nil }), "inspected"},
		{"negative defective", p, with(func(l *LotInput) { l.Count = -1 }), "defective"},
		{"defective over inspected", p, with(func(l *LotInput) { l.Count = 51 }), "defective"},
		{"negative defects", u, with(func(l *LotInput) { l.Count = -1 }), "defects"},
		{"unknown category", p, with(func(l *LotInput) { l.Categories["burr"] = 1 }), "burr"},
		{"negative category", p, with(func(l *LotInput) { l.Categories["dent"] = -1 }), "dent"},
		{"category over inspected (p)", p, with(func(l *LotInput) { l.Categories["dent"] = 51 }), "dent"},
		{"time before 1970", p, with(func(l *LotInput) { l.Time = time.Date(1969, 1, 1, 0, 0, 0, 0, time.UTC) }), "time"},
		{"time in the future", p, with(func(l *LotInput) { l.Time = now.Add(48 * time.Hour) }), "time"},
	}
	if ps := validateLot(p, ok, now); len(ps) != 0 {
		t.Fatalf("valid lot: %v", ps)
	}
	// A u chart counts defects: a category may exceed the units inspected.
	if ps := validateLot(u, with(func(l *LotInput) { l.Count = 80; l.Categories["dent"] = 80 }), now); len(ps) != 0 {
		t.Errorf("u chart, defects over inspected: %v", ps)
	}
	for _, c := range cases {
		ps := validateLot(c.p, c.in, now)
		if len(ps) != 1 || ps[0].Field != c.field || ps[0].Reason == "" {
			t.Errorf("%s: problems %v, want one on %q", c.name, ps, c.field)
		}
	}
}

func TestAddLotsConflictsCorrections(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP, "dent")
		t0 := time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC)
		in := []LotInput{
			{Lot: "A1", Time: t0, Inspected: 100, Count: 3, Categories: map[string]int64{"dent": 3}, Shift: "early"},
			{Lot: "A2", Time: t0.Add(time.Hour), Inspected: 100, Count: 1},
		}
		got, err := db.AddLots(ctx, "ana", p.ID, in)
		if err != nil {
			t.Fatal(err)
		}
		if len(got) != 2 || got[0].ID == 0 || got[0].Revision != 1 {
			t.Fatalf("added %+v", got)
		}
		// The same again: a no-op returning the stored lots.
		again, err := db.AddLots(ctx, "ana", p.ID, in)
		if err != nil || again[0].ID != got[0].ID {
			t.Fatalf("identical re-add: %v %v", again, err)
		}
		// Same code, other values: a conflict naming the field; nothing written.
		bad := []LotInput{{Lot: "A3", Time: t0, Inspected: 10, Count: 0}, {Lot: "A1", Time: t0, Inspected: 100, Count: 4, Categories: map[string]int64{"dent": 3}, Shift: "early"}}
		_, err = db.AddLots(ctx, "ana", p.ID, bad)
		var ce *ConflictError
		if !errors.As(err, &ce) || !errors.Is(err, ErrConflict) || len(ce.Conflicts) != 1 || ce.Conflicts[0].Fields[0] != "count" {
			t.Fatalf("conflict: %v", err)
		}
		// Invalid lot, duplicate code in the call: ValidationError, nothing written.
		_, err = db.AddLots(ctx, "ana", p.ID, []LotInput{{Lot: "A4", Inspected: 10, Count: 11}, {Lot: "A5", Inspected: 5}, {Lot: "A5", Inspected: 5}})
		var ve *ValidationError
		if !errors.As(err, &ve) || !errors.Is(err, ErrInvalid) || len(ve.Problems) != 2 || ve.Problems[0].Line != 1 || ve.Problems[1].Line != 3 {
			t.Fatalf("validation: %v", err)
		}
		lots, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil || len(lots) != 2 {
			t.Fatalf("lots after refused calls: %d %v", len(lots), err)
		}
		// Correct, then void: history keeps every revision; voided lots leave Lots.
		fix := in[0]
		fix.Count, fix.Categories = 2, map[string]int64{"dent": 2}
		c, err := db.CorrectLot(ctx, "ana", "miscounted", got[0].ID, fix)
		if err != nil || c.Revision != 2 {
			t.Fatalf("correct: %v %v", c, err)
		}
		if _, err := db.CorrectLot(ctx, "ana", "", got[0].ID, fix); !errors.Is(err, ErrInvalid) {
			t.Errorf("correction without reason: %v", err)
		}
		if err := db.VoidLot(ctx, "ana", "wrong process", got[0].ID); err != nil {
			t.Fatal(err)
		}
		h, err := db.LotHistory(ctx, got[0].ID)
		if err != nil || len(h) != 3 || h[0].Count != 3 || h[1].Count != 2 || !h[2].Voided || h[2].Reason != "wrong process" {
			t.Fatalf("history: %+v %v", h, err)
		}
		lots, _ = db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		if len(lots) != 1 || lots[0].Lot != "A2" {
			t.Errorf("lots after void: %+v", lots)
		}
		// Re-adding a voided lot code is a conflict, not a revival.
		if _, err := db.AddLots(ctx, "ana", p.ID, in[:1]); !errors.Is(err, ErrConflict) {
			t.Errorf("re-add voided: %v", err)
		}
		if a, err := db.AuditFor(ctx, "lot", got[0].ID); err != nil || len(a) != 3 {
			t.Errorf("audit for lot: %d entries, %v", len(a), err)
		}
		// Time range: from inclusive, to exclusive.
		lots, _ = db.Lots(ctx, p.ID, t0.Add(time.Hour), t0.Add(2*time.Hour))
		if len(lots) != 1 {
			t.Errorf("range: %d lots", len(lots))
		}
		if lots, _ = db.Lots(ctx, p.ID, t0, t0.Add(time.Hour)); len(lots) != 0 {
			t.Errorf("range excluding A2: %d lots", len(lots))
		}
	})
}

func TestLimitSetsAnnotations(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		t0 := time.Date(2025, 3, 1, 0, 0, 0, 0, time.UTC)
		ls, err := db.FreezeLimitSet(ctx, "eng", LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.02, BaselineLots: 25,
			Excluded: map[string]string{"A7": "die change"}, EffectiveFrom: t0, Reason: "initial"})
		if err != nil || ls.Number != 1 {
			t.Fatalf("freeze: %v %v", ls, err)
		}
		if _, err := db.FreezeLimitSet(ctx, "eng", LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.03, EffectiveFrom: t0, Reason: "again"}); !errors.Is(err, ErrInvalid) {
			t.Errorf("same EffectiveFrom: %v", err)
		}
		if _, err := db.FreezeLimitSet(ctx, "eng", LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.03, EffectiveFrom: t0.Add(time.Hour), Excluded: map[string]string{"A1": ""}, Reason: "r"}); !errors.Is(err, ErrInvalid) {
			t.Errorf("exclusion without reason: %v", err)
		}
		ls2, err := db.FreezeLimitSet(ctx, "eng", LimitSet{ProcessID: p.ID, Method: spc.MethodLaney, K: 3, Center: 0.015, SigmaZ: 1.4, EffectiveFrom: t0.Add(240 * time.Hour), Reason: "new supplier"})
		if err != nil || ls2.Number != 2 {
			t.Fatalf("revision: %v %v", ls2, err)
		}
		sets, err := db.LimitSets(ctx, p.ID)
		if err != nil || len(sets) != 2 || sets[0].Excluded["A7"] != "die change" {
			t.Fatalf("sets %+v %v", sets, err)
		}
		if s, ok := LimitSetAt(sets, t0.Add(-time.Hour)); ok {
			t.Errorf("set before the first: %v", s)
		}
		if s, _ := LimitSetAt(sets, t0.Add(100*time.Hour)); s.Number != 1 {
			t.Errorf("set in force: %d", s.Number)
		}
		if s, _ := LimitSetAt(sets, t0.Add(240*time.Hour)); s.Number != 2 {
			t.Errorf("set in force at its start: %d", s.Number)
		}
		lots, _ := db.AddLots(ctx, "insp", p.ID, []LotInput{{Lot: "A1", Time: t0, Inspected: 10, Count: 1}})
		a, err := db.AddAnnotation(ctx, "eng", Annotation{ProcessID: p.ID, LotID: lots[0].ID, Cause: "worn punch"})
		if err != nil {
			t.Fatal(err)
		}
		if _, err := db.AddAnnotation(ctx, "eng", Annotation{ProcessID: p.ID, Rule: "we2", Cause: ""}); !errors.Is(err, ErrInvalid) {
			t.Errorf("annotation without cause: %v", err)
		}
		if err := db.CloseAnnotation(ctx, "eng", a.ID, "punch replaced"); err != nil {
			t.Fatal(err)
		}
		if err := db.CloseAnnotation(ctx, "eng", a.ID, ""); !errors.Is(err, ErrInvalid) {
			t.Errorf("closing twice: %v", err)
		}
		as, _ := db.Annotations(ctx, p.ID)
		if len(as) != 1 || !as[0].Closed || as[0].Action != "punch replaced" || as[0].ClosedBy != "eng" {
			t.Errorf("annotations %+v", as)
		}
	})
}

// The audit chain catches rows edited, removed or appended with plain SQL.
func TestAuditTamper(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		cases := []struct {
			name, sql string
			broken    int64
		}{
			{"edit", "UPDATE audit SET actor = 'mallory' WHERE seq = 2", 2},
			{"edit new", "UPDATE audit SET new = replace(new, 'press', 'pres') WHERE seq = 1", 1},
			{"delete middle", "DELETE FROM audit WHERE seq = 2", 2},
			{"delete last", "DELETE FROM audit WHERE seq = (SELECT MAX(seq) FROM audit)", 4},
			{"append", "INSERT INTO audit SELECT seq + 1, at, actor, action, entity, entity_id, entity_to, old, new, reason, hash, hash FROM audit WHERE seq = 4", 5},
		}
		for _, c := range cases {
			t.Run(c.name, func(t *testing.T) {
				db, path := open(t)
				p := addProcess(t, db, "press", spc.ChartP)
				db.AddLots(ctx, "a", p.ID, []LotInput{{Lot: "1", Inspected: 5}})
				db.AddLots(ctx, "a", p.ID, []LotInput{{Lot: "2", Inspected: 5}})
				db.AddUser(ctx, "a", "bo", RoleViewer, "password1")
				if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK || chk.Entries != 4 {
					t.Fatalf("before: %+v %v", chk, err)
				}
				db.Close()
				raw := rawSQL(t, path)
				if _, err := raw.Exec(c.sql); err != nil {
					t.Fatal(err)
				}
				raw.Close()
				db2, err := Open(path)
				if err != nil {
					t.Fatal(err)
				}
				defer db2.Close()
				chk, err := db2.VerifyAudit(ctx)
				if err != nil {
					t.Fatal(err)
				}
				if chk.OK || chk.FirstBroken != c.broken || chk.Why == "" {
					t.Errorf("after %s: %+v, want broken at %d", c.name, chk, c.broken)
				}
			})
		}
	})
}

// 16 writers, 200 lots each (one lot per call, as from the form): none
// lost, no error (in particular no "database is locked"), chain intact.
func TestConcurrentWriters(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartNP)
		const writers, each = 16, 200
		var wg sync.WaitGroup
		errs := make(chan error, writers*each)
		for w := 0; w < writers; w++ {
			wg.Add(1)
			go func(w int) {
				defer wg.Done()
				for i := 0; i < each; i++ {
					if _, err := db.AddLots(ctx, fmt.Sprint("w", w), p.ID, []LotInput{{Lot: fmt.Sprintf("W%02d-%03d", w, i), Inspected: 50, Count: int64(i % 5)}}); err != nil {
						errs <- err
					}
					if i%20 == 0 { // readers meanwhile
						if _, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{}); err != nil {
							errs <- err
						}
					}
				}
			}(w)
		}
		wg.Wait()
		close(errs)
		for err := range errs {
			t.Error(err)
		}
		lots, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil || len(lots) != writers*each {
			t.Fatalf("%d lots stored, want %d (%v)", len(lots), writers*each, err)
		}
		if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK || chk.Entries != writers*each+1 {
			t.Errorf("audit %+v %v", chk, err)
		}
	})
}

// A retry of a lot posted without a time (the station lost the answer and
// sends the same body again) is answered with the stored lot, alone or in
// a batch with new lots, and a batch of only retries writes nothing. A
// lot code with other values is still a conflict.
func TestAddLotsRetryWithoutTime(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, path := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		r1 := LotInput{Lot: "R1", Inspected: 10, Count: 0}
		first, err := db.AddLots(ctx, "station", p.ID, []LotInput{r1})
		if err != nil {
			t.Fatal(err)
		}
		again, err := db.AddLots(ctx, "station", p.ID, []LotInput{r1})
		if err != nil {
			t.Fatalf("retry of a lot without a time: %v", err)
		}
		if again[0].ID != first[0].ID || !again[0].Time.Equal(first[0].Time) {
			t.Errorf("retry answered %+v, want the stored lot %+v", again[0], first[0])
		}
		batch, err := db.AddLots(ctx, "station", p.ID, []LotInput{{Lot: "R2", Inspected: 10, Count: 1}, r1})
		if err != nil {
			t.Fatalf("batch with a retry: %v", err)
		}
		if batch[1].ID != first[0].ID || batch[0].ID == first[0].ID {
			t.Errorf("batch answered ids %d, %d; want a new one and %d", batch[0].ID, batch[1].ID, first[0].ID)
		}
		var entries int
		if err := rawSQL(t, path).QueryRow("SELECT COUNT(*) FROM audit WHERE entity = 'lot'").Scan(&entries); err != nil || entries != 2 {
			t.Errorf("%d lot entries in the audit trail, want 2 (the retry adds none): %v", entries, err)
		}
		if _, err := db.AddLots(ctx, "station", p.ID, []LotInput{{Lot: "R1", Inspected: 10, Count: 1}}); !errors.Is(err, ErrConflict) {
			t.Errorf("same code, other count: %v, want a conflict", err)
		}
	})
}

// TestNoCauseFound: "no assignable cause found" is stored as a closed
// finding with its reason, refused without one or beside a cause, and
// kept in the audit trail so that the check of the data rows passes.
func TestNoCauseFound(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		t0 := time.Date(2025, 3, 1, 0, 0, 0, 0, time.UTC)
		lots, err := db.AddLots(ctx, "insp", p.ID, []LotInput{{Lot: "A1", Time: t0, Inspected: 10, Count: 1}})
		if err != nil {
			t.Fatal(err)
		}
		bad := []struct {
			name  string
			a     Annotation
			field string
		}{
			{"no reason", Annotation{NoCauseFound: true}, "reason"},
			{"blank reason", Annotation{NoCauseFound: true, Reason: "  "}, "reason"},
			{"cause and no cause", Annotation{NoCauseFound: true, Reason: "noise", Cause: "worn punch"}, "cause"},
			{"reason without no cause", Annotation{Cause: "worn punch", Reason: "noise"}, "reason"},
			{"reason with NUL", Annotation{NoCauseFound: true, Reason: "a\x00b"}, "reason"},
		}
		for _, c := range bad {
			c.a.ProcessID, c.a.LotID = p.ID, lots[0].ID
			_, err := db.AddAnnotation(ctx, "eng", c.a)
			var ve *ValidationError
			if !errors.As(err, &ve) || ve.Problems[0].Field != c.field {
				t.Errorf("%s: %v, want a problem with %s", c.name, err, c.field)
			}
		}
		a, err := db.AddAnnotation(ctx, "eng", Annotation{ProcessID: p.ID, LotID: lots[0].ID, NoCauseFound: true, Reason: "gauge, material and operator checked"})
		if err != nil {
			t.Fatal(err)
		}
		if !a.Closed || a.ClosedBy != "eng" {
			t.Errorf("no-cause finding not closed when recorded: %+v", a)
		}
		as, err := db.Annotations(ctx, p.ID)
		if err != nil || len(as) != 1 || !as[0].NoCauseFound || as[0].Reason != "gauge, material and operator checked" || !as[0].Closed {
			t.Errorf("stored %+v %v", as, err)
		}
		all, err := db.AllAnnotations(ctx)
		if err != nil || len(all) != 1 || all[0].ID != a.ID {
			t.Errorf("all annotations %+v %v", all, err)
		}
		if err := db.CloseAnnotation(ctx, "eng", a.ID, ""); !errors.Is(err, ErrInvalid) {
			t.Errorf("closing a finding again: %v", err)
		}
		chk, err := db.VerifyAudit(ctx)
		if err != nil || !chk.OK {
			t.Errorf("audit: %+v %v", chk, err)
		}
		entries, err := db.AuditFor(ctx, "annotation", a.ID)
		if err != nil || len(entries) != 1 || !strings.Contains(entries[0].New, `"no_cause_found":true`) {
			t.Errorf("audit entry %+v %v", entries, err)
		}
	})
}

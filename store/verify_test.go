package store

import (
	"lotwatch/store/storetest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
)

// fixtureCopy copies the schema-1 fixture to a temporary file.
func fixtureCopy(t *testing.T) string {
	t.Helper()
	b, err := os.ReadFile(schema1Fixture)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "old.db")
	if err := os.WriteFile(path, b, 0o600); err != nil {
		t.Fatal(err)
	}
	return path
}

func verifyFile(t *testing.T, path string) AuditCheck {
	t.Helper()
	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	chk, err := db.VerifyAudit(ctx)
	if err != nil {
		t.Fatal(err)
	}
	return chk
}

// The audit chain catches a data row edited, added or removed behind the
// tool's back: each case changes one row with plain SQL, and verify must
// fail naming that row (password and token hashes too); changes to what
// the trail does not cover (sessions) leave it holding.
func TestAuditCatchesDataRows(t *testing.T) {
	cases := []struct {
		name string
		sql  []string
		args func(t *testing.T, path string) []any
		want string   // in Why; "" means verify must hold
		pg   []string // the change in PostgreSQL's words, where SQLite's differ

	}{
		// A batch of more than 20 lots is recorded by its digest only, so a
		// change to one of its lots is named by the batch's range.
		{name: "lot count in a large batch", sql: []string{"UPDATE lots SET count = count + 1 WHERE lot = 'H2-G0'"},
			want: `lots 6–30 (process "Line 2 press"): stored values differ from the audit trail`},
		{name: "lot count in a small batch", sql: []string{"UPDATE lots SET inspected = 201 WHERE lot = 'H2-B0'"},
			want: `lot code H2-B0): stored values differ`},
		{name: "lot removed", sql: []string{"DELETE FROM lots WHERE lot = 'H2-K0'"},
			want: `was removed behind lotwatch's back`},
		{name: "category counts removed", sql: []string{"UPDATE lots SET categories = '' WHERE lot = 'H2-J0'"},
			want: `lots 6–30 (process "Line 2 press"): stored values differ`},
		{name: "one category count changed", sql: []string{`UPDATE lots SET categories = '{"dent":0}' WHERE lot = 'H2-F0'`},
			want: `lots 6–30 (process "Line 2 press"): stored values differ`},
		{name: "category counts unreadable", sql: []string{`UPDATE lots SET categories = '{"dent":' WHERE lot = 'H2-B0'`},
			want: `lot code H2-B0): stored values differ`},
		{name: "corrected lot edited", sql: []string{"UPDATE lots SET note = 'fine' WHERE lot = 'H2-C0'"},
			want: `lot code H2-C0): stored values differ`},
		{name: "voided lot revived", sql: []string{"UPDATE lots SET voided = 0 WHERE lot = 'H2-D0'"},
			want: `lot code H2-D0): stored values differ`},
		{name: "first revision edited", sql: []string{"UPDATE lot_revisions SET count = 0 WHERE revision = 1"},
			want: `stored values differ`},
		{name: "revision removed", sql: []string{"DELETE FROM lot_revisions"},
			want: `its revisions differ from the audit trail`},
		{name: "lot added", sql: []string{`INSERT INTO lots (process_id, lot, time, shift, inspected, count, categories, inspector, note, revision, voided, recorded, recorded_by, reason)
			SELECT process_id, 'H2-Z9', time, shift, inspected, count, categories, inspector, note, revision, voided, recorded, recorded_by, reason FROM lots WHERE lot = 'P-2'`},
			want: `lot code H2-Z9): is not in the audit trail`},
		{name: "process limits", sql: []string{"UPDATE processes SET k = 2 WHERE name = 'Line 2 press'"},
			want: `process 1 ("Line 2 press"): stored values differ`},
		{name: "process removed", sql: []string{"PRAGMA foreign_keys = OFF", "DELETE FROM processes WHERE name = 'Paint'"},
			pg: []string{"ALTER TABLE lots DROP CONSTRAINT lots_process_id_fkey", "ALTER TABLE lot_versions DROP CONSTRAINT lot_versions_process_id_fkey",
				"DELETE FROM processes WHERE name = 'Paint'"},
			want: `process 2: was removed`},
		{name: "user role", sql: []string{"UPDATE users SET role = 'admin' WHERE name = 'bo'"},
			want: `user 2 ("bo"): stored values differ`},
		{name: "user reactivated", sql: []string{"UPDATE users SET active = 1 WHERE name = 'bo'"},
			want: `user 2 ("bo"): stored values differ`},
		{name: "token unrevoked", sql: []string{"UPDATE tokens SET revoked = 0"},
			want: `token 1 ("station 1" of user "ana"): stored values differ`},
		{name: "limit set centre", sql: []string{"UPDATE limit_sets SET center = 0.01"},
			want: `limit set 1 (number 1 of process "Line 2 press"): stored values differ`},
		{name: "annotation reopened", sql: []string{"UPDATE annotations SET closed = 0 WHERE id = 1"},
			want: `annotation 1 (process "Line 2 press"): stored values differ`},
		{name: "annotation removed", sql: []string{"DELETE FROM annotations WHERE id = 2"},
			want: `annotation 2: was removed`},
		{name: "password hash copied onto another user", sql: []string{"UPDATE users SET password_hash = (SELECT password_hash FROM users WHERE name = 'bo') WHERE name = 'ana'"},
			want: `user 1 ("ana"): its password hash differs from the audit trail`},
		{name: "token hash replaced", sql: []string{"UPDATE tokens SET hash = x'00112233'"}, pg: []string{`UPDATE tokens SET hash = '\x00112233'::bytea`},
			want: `token 1 ("station 1" of user "ana"): its hash differs from the audit trail`},
		{name: "sessions (not covered)", sql: []string{"DELETE FROM sessions"}},
	}
	for _, b := range []string{"sqlite", "postgres"} {
		for _, c := range cases {
			t.Run(b+"/"+c.name, func(t *testing.T) {
				path := filepath.Join(t.TempDir(), "lotwatch.db")
				if b == "postgres" {
					path = storetest.PostgresSchema(t)
					if c.pg != nil {
						c.sql = c.pg
					}
				}
				writeSchema1Fixture(t, path) // verifies that the untouched database holds
				var args []any
				if c.args != nil {
					args = c.args(t, path)
				}
				raw := rawSQL(t, path)
				for _, q := range c.sql {
					a := args
					if !strings.Contains(q, "?") {
						a = nil
					}
					if _, err := raw.Exec(q, a...); err != nil {
						t.Fatalf("%s: %v", q, err)
					}
				}
				raw.Close()
				chk := verifyFile(t, path)
				if c.want == "" {
					if !chk.OK {
						t.Fatalf("verify failed after a change it does not cover: %+v", chk)
					}
					return
				}
				t.Log(chk.Why)
				if chk.OK || chk.Entity == "" || !strings.Contains(chk.Why, c.want) {
					t.Fatalf("verify: %+v\nwant a failure saying %q", chk, c.want)
				}
			})
		}
	}
}

// A database written at schema 1 is upgraded by migration 0002: the packed
// copies are filled, one migration entry is appended, and the trail holds
// (the rows are checked against the entries they were written with);
// migration 0004 then drops the copies again and adds no entry.
//
// SQLite only: upgrades an old SQLite file.
func TestMigration0002FromSchema1(t *testing.T) {
	path := fixtureCopy(t)
	raw := rawSQL(t, path)
	var before int
	var colsBefore []Lot
	if err := raw.QueryRow("SELECT COUNT(*) FROM audit").Scan(&before); err != nil {
		t.Fatal(err)
	}
	// Migration 0005 states each user's and token's hash in an entry.
	var creds int
	if err := raw.QueryRow("SELECT (SELECT COUNT(*) FROM users) + (SELECT COUNT(*) FROM tokens)").Scan(&creds); err != nil {
		t.Fatal(err)
	}
	rows, err := raw.Query("SELECT " + lotCols + " FROM lots WHERE voided = 0 AND process_id = 1 ORDER BY time, id")
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var l Lot
		if err := scanLot(rows, &l, time.UTC); err != nil {
			t.Fatal(err)
		}
		colsBefore = append(colsBefore, l)
	}
	rows.Close()
	raw.Close()

	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	chk, err := db.VerifyAudit(ctx)
	if err != nil || !chk.OK || chk.Entries != before+1+creds {
		t.Fatalf("after migration: %+v %v (had %d entries)", chk, err, before)
	}
	es, err := db.AuditFor(ctx, "schema", 2)
	if err != nil || len(es) != 1 || es[0].Action != "migrate" || !strings.Contains(es[0].New, `"lots_packed":32`) {
		t.Fatalf("migration entry: %+v %v", es, err)
	}
	lots, err := db.Lots(ctx, 1, time.Time{}, time.Time{})
	if err != nil || len(lots) != len(colsBefore) {
		t.Fatalf("lots after migration: %d (want %d) %v", len(lots), len(colsBefore), err)
	}
	for i, l := range lots {
		w := colsBefore[i]
		if l.ID != w.ID || l.Lot != w.Lot || !l.Time.Equal(w.Time) || l.Count != w.Count || l.Inspected != w.Inspected ||
			len(l.Categories) != len(w.Categories) || l.Categories["dent"] != w.Categories["dent"] || l.Note != w.Note || l.Revision != w.Revision {
			t.Errorf("lot %d after migration %+v, stored before %+v", i, l, w)
		}
	}
	db.Close()
	// Opening again applies nothing more.
	if chk := verifyFile(t, path); !chk.OK || chk.Entries != before+1+creds {
		t.Fatalf("reopened: %+v", chk)
	}
}

// A row changed behind lotwatch's back before the upgrade is still found
// after it: the migration does not bless what it finds.
//
// SQLite only: upgrades an old SQLite file.
func TestMigration0002KeepsEarlierTamperingVisible(t *testing.T) {
	path := fixtureCopy(t)
	raw := rawSQL(t, path)
	if _, err := raw.Exec("UPDATE lots SET count = 0 WHERE lot = 'H2-B0'"); err != nil {
		t.Fatal(err)
	}
	raw.Close()
	chk := verifyFile(t, path)
	if chk.OK || !strings.Contains(chk.Why, "lot code H2-B0): stored values differ") {
		t.Fatalf("verify: %+v", chk)
	}
}

// A fresh database gets no migration entry: its trail starts with the
// first change a user makes.
func TestMigrationNewDatabaseNoEntry(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		chk, err := db.VerifyAudit(ctx)
		if err != nil || !chk.OK || chk.Entries != 0 {
			t.Fatalf("%+v %v", chk, err)
		}
	})
}

// A database written at schema 2, whose lots carried a packed copy and
// whose audit trail holds the entries written then (the migration entry
// of 0002 among them), is upgraded by migrations 0003 to 0005: the copy and its
// index are gone, no entry is added but 0005's statements of the
// credentials, the trail still holds, and every
// lot reads as its columns held it before.
//
// SQLite only: upgrades an old SQLite file.
func TestMigration0004FromSchema2(t *testing.T) {
	b, err := os.ReadFile(schema2Fixture)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "schema2.db")
	if err := os.WriteFile(path, b, 0o600); err != nil {
		t.Fatal(err)
	}
	raw := rawSQL(t, path)
	var before, version int
	if err := raw.QueryRow("SELECT COUNT(*) FROM audit").Scan(&before); err != nil {
		t.Fatal(err)
	}
	if err := raw.QueryRow("SELECT MAX(version) FROM schema_migrations").Scan(&version); err != nil || version != 2 {
		t.Fatalf("fixture at schema %d (%v), want 2", version, err)
	}
	// Migration 0005 states each user's and token's hash in an entry.
	var creds int
	if err := raw.QueryRow("SELECT (SELECT COUNT(*) FROM users) + (SELECT COUNT(*) FROM tokens)").Scan(&creds); err != nil {
		t.Fatal(err)
	}
	before += creds
	colsBefore := map[int64]Lot{}
	rows, err := raw.Query("SELECT " + lotCols + " FROM lots WHERE voided = 0")
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var l Lot
		if err := scanLot(rows, &l, time.UTC); err != nil {
			t.Fatal(err)
		}
		colsBefore[l.ID] = l
	}
	rows.Close()
	raw.Close()

	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	chk, err := db.VerifyAudit(ctx)
	if err != nil || !chk.OK || chk.Entries != before {
		t.Fatalf("after migration: %+v %v (had %d entries)", chk, err, before)
	}
	var packed int
	if err := db.r.QueryRow("SELECT COUNT(*) FROM pragma_table_info('lots') WHERE name = 'packed'").Scan(&packed); err != nil || packed != 0 {
		t.Fatalf("packed column still there: %d %v", packed, err)
	}
	n := 0
	for _, pid := range []int64{1, 2} {
		lots, err := db.Lots(ctx, pid, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		for _, l := range lots {
			w, ok := colsBefore[l.ID]
			w.ProcessID = pid
			if !ok || !sameLot(l, w) {
				t.Errorf("lot %d after migration %+v, stored before %+v", l.ID, l, w)
			}
			n++
		}
	}
	if n != len(colsBefore) {
		t.Errorf("read %d lots after migration, %d stored before", n, len(colsBefore))
	}
	// A lot added now gets the next id from SQLite, and the trail holds.
	added, err := db.AddLots(ctx, "sam", 1, []LotInput{{Lot: "S3-A", Time: time.Date(2025, 3, 7, 6, 0, 0, 0, time.UTC), Inspected: 100, Count: 1}})
	if err != nil {
		t.Fatal(err)
	}
	var maxID int64
	for id := range colsBefore {
		maxID = max(maxID, id)
	}
	if added[0].ID <= maxID {
		t.Errorf("new lot id %d, not above the highest stored id %d", added[0].ID, maxID)
	}
	if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK || chk.Entries != before+1 {
		t.Fatalf("after adding a lot: %+v %v", chk, err)
	}
}

// Each lot read has a Categories map of its own: changing one changes no
// other lot (lots of equal counts are decoded once and copied).
func TestLotsOwnTheirCategories(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p, err := db.AddProcess(ctx, "t", Process{Name: "own maps", Chart: spc.ChartP, Categories: []string{"dent"}, TimeZone: "UTC"})
		if err != nil {
			t.Fatal(err)
		}
		t0 := time.Date(2025, 3, 3, 6, 0, 0, 0, time.UTC)
		var in []LotInput
		for i := range 3 {
			in = append(in, LotInput{Lot: string(rune('A' + i)), Time: t0.Add(time.Duration(i) * time.Hour), Inspected: 50, Count: 1, Categories: map[string]int64{"dent": 1}})
		}
		if _, err := db.AddLots(ctx, "t", p.ID, in); err != nil {
			t.Fatal(err)
		}
		var walked []Lot
		if err := db.EachLot(ctx, p.ID, time.Time{}, time.Time{}, func(l Lot) error { walked = append(walked, l); return nil }); err != nil {
			t.Fatal(err)
		}
		lots, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		walked[0].Categories["dent"] = 9
		lots[0].Categories["dent"] = 9
		for i, l := range append(walked[1:], lots[1:]...) {
			if l.Categories["dent"] != 1 {
				t.Errorf("lot %d read after another's map was changed: %v", i, l.Categories)
			}
		}
	})
}

// An import entry written before imports listed their lots carries the
// digest only: a change to one of its lots is named by the entry's range,
// never by a lot that was not changed.
//
// SQLite only: reads an old SQLite fixture file.
func TestAuditOldImportEntryNamesRange(t *testing.T) {
	path := fixtureCopy(t)
	raw := rawSQL(t, path)
	if _, err := raw.Exec("UPDATE lots SET count = 5 WHERE lot = 'P-2'"); err != nil {
		t.Fatal(err)
	}
	raw.Close()
	chk := verifyFile(t, path)
	if chk.OK || !strings.Contains(chk.Why, `lots 31–32 (process "Paint"): stored values differ`) {
		t.Fatalf("verify: %+v", chk)
	}
}

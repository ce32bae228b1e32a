package store

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
)

// schema1Fixture is a database written by lotwatch at schema version 1
// (before migration 0002), by writeSchema1Fixture at that version.
const schema1Fixture = "testdata/schema1.sqlite"

// writeSchema1Fixture fills a database with one of everything the audit
// trail covers: two processes (one updated), lots added singly, in a
// batch and by import, a correction and a void, a limit set, annotations
// (one closed), users (one deactivated) and a token (revoked). Run with
// LOTWATCH_WRITE_FIXTURE=1 to write it again (only meaningful at schema 1;
// the committed file was written at commit 294cd8b). The data-row tests of
// the audit trail use the same recipe at the current schema.
// (path may be a PostgreSQL URL: the same record is written there.)
func writeSchema1Fixture(t *testing.T, path string) {
	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	t0 := time.Date(2025, 3, 3, 6, 0, 0, 0, time.UTC)
	p, err := db.AddProcess(ctx, "setup", Process{Name: "Line 2 press", Chart: spc.ChartP, Categories: []string{"dent", "scratch"}, TimeZone: "Europe/Berlin"})
	if err != nil {
		t.Fatal(err)
	}
	var in []LotInput
	for i := 0; i < 30; i++ {
		in = append(in, LotInput{Lot: "H2-" + string(rune('A'+i%26)) + string(rune('0'+i/26)), Time: t0.Add(time.Duration(i) * time.Hour),
			Shift: "early", Inspected: 200, Count: int64(i % 4), Categories: map[string]int64{"dent": int64(i % 4)}, Inspector: "kim"})
	}
	if _, err := db.AddLots(ctx, "kim", p.ID, in[:1]); err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddLots(ctx, "kim", p.ID, in[1:5]); err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddLots(ctx, "kim", p.ID, in[5:]); err != nil { // more than 20: digest only
		t.Fatal(err)
	}
	fix := in[2]
	fix.Count, fix.Categories, fix.Note = 1, map[string]int64{"scratch": 1}, "recounted"
	lots, _ := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
	if _, err := db.CorrectLot(ctx, "eng", "miscounted", lots[2].ID, fix); err != nil {
		t.Fatal(err)
	}
	if err := db.VoidLot(ctx, "eng", "wrong line", lots[3].ID); err != nil {
		t.Fatal(err)
	}
	if _, err := db.FreezeLimitSet(ctx, "eng", LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.0075, BaselineLots: 25,
		BaselineFrom: t0, BaselineTo: t0.Add(24 * time.Hour), Excluded: map[string]string{"H2-D0": "die change"}, EffectiveFrom: t0.Add(30 * time.Hour), Reason: "initial"}); err != nil {
		t.Fatal(err)
	}
	a, err := db.AddAnnotation(ctx, "eng", Annotation{ProcessID: p.ID, LotID: lots[1].ID, Cause: "worn punch", Action: "replace"})
	if err != nil {
		t.Fatal(err)
	}
	if err := db.CloseAnnotation(ctx, "eng", a.ID, "punch replaced"); err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddAnnotation(ctx, "eng", Annotation{ProcessID: p.ID, Rule: "we1", Cause: "coil change"}); err != nil {
		t.Fatal(err)
	}
	q, err := db.AddProcess(ctx, "setup", Process{Name: "Paint", Chart: spc.ChartU})
	if err != nil {
		t.Fatal(err)
	}
	q.Description, q.Rules = "top coat", "nelson"
	if _, err := db.UpdateProcess(ctx, "setup", "rules as agreed", q); err != nil {
		t.Fatal(err)
	}
	csv := "lot,time,inspected,defects,inspector\nP-1,2025-03-03T07:00:00Z,10,2,lee\nP-2,2025-03-03T08:00:00Z,12,0,lee\n"
	if _, err := db.Import(ctx, "lee", strings.NewReader(csv), ImportOptions{Process: "Paint"}); err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddUser(ctx, "setup", "ana", RoleEngineer, "password1"); err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddUser(ctx, "setup", "bo", RoleInspector, "password2"); err != nil {
		t.Fatal(err)
	}
	if err := db.SetUserActive(ctx, "setup", "bo", false, "left"); err != nil {
		t.Fatal(err)
	}
	if err := db.SetPassword(ctx, "ana", "ana", "password3"); err != nil {
		t.Fatal(err)
	}
	_, tok, err := db.CreateToken(ctx, "setup", "ana", "station 1")
	if err != nil {
		t.Fatal(err)
	}
	if err := db.RevokeToken(ctx, "setup", tok.ID); err != nil {
		t.Fatal(err)
	}
	if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK {
		t.Fatalf("fixture audit: %+v %v", chk, err)
	}
}

// SQLite only: writes the committed SQLite fixture file.
func TestWriteSchema1Fixture(t *testing.T) {
	if os.Getenv("LOTWATCH_WRITE_FIXTURE") == "" {
		t.Skip("set LOTWATCH_WRITE_FIXTURE=1 to write " + schema1Fixture)
	}
	tmp := filepath.Join(t.TempDir(), "f.db")
	writeSchema1Fixture(t, tmp)
	b, err := os.ReadFile(tmp)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(schema1Fixture, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// schema2Fixture is a database written by lotwatch at schema version 2,
// when each lot carried a packed copy of its values: the schema-1 fixture
// upgraded (one migration entry in the audit trail), then lots added,
// corrected and voided at schema 2, by writeSchema2Fixture at that
// version (the committed file was written at commit d814a73).
const schema2Fixture = "testdata/schema2.sqlite"

// writeSchema2Fixture upgrades a copy of the schema-1 fixture at path and
// writes to it.
func writeSchema2Fixture(t *testing.T, path string) {
	b, err := os.ReadFile(schema1Fixture)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, b, 0o600); err != nil {
		t.Fatal(err)
	}
	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	t0 := time.Date(2025, 3, 5, 6, 0, 0, 0, time.UTC)
	var in []LotInput
	for i := 0; i < 25; i++ {
		in = append(in, LotInput{Lot: "S2-" + string(rune('A'+i)), Time: t0.Add(time.Duration(i) * time.Hour),
			Shift: "late", Inspected: 180, Count: int64(i % 3), Categories: map[string]int64{"scratch": int64(i % 3)}, Inspector: "sam", Note: "after upgrade"})
	}
	added, err := db.AddLots(ctx, "sam", 1, in[:3])
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddLots(ctx, "sam", 1, in[3:]); err != nil { // more than 20: digest only
		t.Fatal(err)
	}
	fix := in[1]
	fix.Count, fix.Categories = 2, map[string]int64{"dent": 1, "scratch": 1}
	if _, err := db.CorrectLot(ctx, "eng", "recounted", added[1].ID, fix); err != nil {
		t.Fatal(err)
	}
	if err := db.VoidLot(ctx, "eng", "sample lost", added[2].ID); err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddLots(ctx, "lee", 2, []LotInput{{Lot: "P-3", Time: t0, Inspected: 11, Count: 1}}); err != nil {
		t.Fatal(err)
	}
	if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK {
		t.Fatalf("fixture audit: %+v %v", chk, err)
	}
}

// SQLite only: writes the committed SQLite fixture file.
func TestWriteSchema2Fixture(t *testing.T) {
	if os.Getenv("LOTWATCH_WRITE_FIXTURE") == "" {
		t.Skip("set LOTWATCH_WRITE_FIXTURE=1 to write " + schema2Fixture)
	}
	tmp := filepath.Join(t.TempDir(), "f.db")
	writeSchema2Fixture(t, tmp)
	b, err := os.ReadFile(tmp)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(schema2Fixture, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

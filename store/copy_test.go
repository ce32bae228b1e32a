package store

import (
	"errors"
	"os"
	"path/filepath"
	"testing"
)

// exportAll is every process's export, by name: what must be the same
// bytes on both sides of a copy.
func exportAll(t *testing.T, db *DB) map[string]string {
	t.Helper()
	ps, err := db.Processes(ctx, true)
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]string{}
	for _, p := range ps {
		out[p.Name] = exportOf(t, db, p)
	}
	return out
}

func sameExports(t *testing.T, what string, a, b map[string]string) {
	t.Helper()
	if len(a) != len(b) || len(a) == 0 {
		t.Fatalf("%s: %d processes, want %d", what, len(b), len(a))
	}
	for name, x := range a {
		if b[name] != x {
			t.Errorf("%s: process %q exports differently:\n%s\nwant\n%s", what, name, b[name], x)
		}
	}
}

// TestCopyBetweenBackends moves the fixture plant (lots added singly, in
// batches and by import, a correction, a void, a limit set, annotations,
// users and tokens) from a SQLite file to PostgreSQL and back, with
// Copy and with Backup: every process exports the same bytes, the audit
// trail holds with the same head, and a new write on the copy goes on
// the chain. A copy into a database that holds a record is refused.
// (Property of the store; no outside source applies.)
func TestCopyBetweenBackends(t *testing.T) {
	file := filepath.Join(t.TempDir(), "plant.db")
	writeSchema1Fixture(t, file)
	src, err := Open(file)
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	want, wantAudit := exportAll(t, src), auditOf(t, src)

	pg, url := openPostgresTemp(t)
	chk, err := Copy(ctx, src, pg)
	if err != nil || !chk.OK {
		t.Fatalf("copy to PostgreSQL: %+v %v", chk, err)
	}
	sameExports(t, "PostgreSQL copy", want, exportAll(t, pg))
	if a := auditOf(t, pg); a != wantAudit {
		t.Errorf("PostgreSQL copy's audit trail: %s, want %s", a, wantAudit)
	}
	if _, err := Copy(ctx, src, pg); !errors.Is(err, ErrNotEmpty) {
		t.Errorf("second copy into %s: %v, want ErrNotEmpty", Redact(url), err)
	}
	if u, err := pg.Authenticate(ctx, "ana", "password3"); err != nil || u.Name != "ana" {
		t.Errorf("sign-in on the copy: %+v %v", u, err)
	}

	back := filepath.Join(t.TempDir(), "back.db")
	if err := pg.Backup(ctx, back); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(back + "-wal"); err == nil {
		t.Error("the backup of a PostgreSQL database left a -wal file beside it")
	}
	fchk, err := CheckFile(ctx, back)
	if err != nil || !fchk.OK {
		t.Fatalf("CheckFile of the backup: %+v %v", fchk, err)
	}
	again, err := Open(back)
	if err != nil {
		t.Fatal(err)
	}
	defer again.Close()
	sameExports(t, "SQLite backup of the PostgreSQL copy", want, exportAll(t, again))
	if a := auditOf(t, again); a != wantAudit {
		t.Errorf("backup's audit trail: %s, want %s", a, wantAudit)
	}

	// New rows on the copy get ids after the copied ones and extend the chain.
	p, err := pg.ProcessByName(ctx, "Paint")
	if err != nil {
		t.Fatal(err)
	}
	res, err := pg.AddLots(ctx, "lee", p.ID, []LotInput{{Lot: "P-3", Inspected: 5, Count: 1}})
	if err != nil {
		t.Fatal(err)
	}
	if len(res) != 1 || res[0].ID <= 30 {
		t.Errorf("lot added after the copy: %+v, want an id after the copied lots", res)
	}
	if chk, err := pg.VerifyAudit(ctx); err != nil || !chk.OK || chk.Entries <= 0 {
		t.Errorf("audit after a write on the copy: %+v %v", chk, err)
	}
}

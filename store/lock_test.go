package store

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"lotwatch/spc"
)

// While a store has the database open (as `lotwatch serve` does for its
// whole life), restore is refused with a message that says so and
// nothing is replaced; every lot acknowledged afterwards is in the file.
// Once the store is closed, the same restore goes through. A backup
// written over a database in use is refused the same way, and a second
// store on the same file (a command-line import while the server runs)
// is not blocked.
//
// SQLite only: the file lock; PostgreSQL refuses by pg_stat_activity (cmd/lotwatch TestTwoServersOnePostgres).
func TestRestoreRefusedWhileOpen(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "live.db")
	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	p := addProcess(t, db, "weld", spc.ChartP)
	if _, err := db.AddLots(ctx, "w", p.ID, []LotInput{{Lot: "A0", Inspected: 10}}); err != nil {
		t.Fatal(err)
	}
	good := filepath.Join(dir, "good.db")
	if err := db.Backup(ctx, good); err != nil {
		t.Fatal(err)
	}
	before, _ := os.ReadDir(dir)

	kept, err := Restore(ctx, path, good)
	if !errors.Is(err, ErrInUse) || !strings.Contains(err.Error(), "open") || kept != "" {
		t.Fatalf("restore while the store is open: kept %q, err %v; want ErrInUse saying the file is open", kept, err)
	}
	if err := db.Backup(ctx, path); !errors.Is(err, ErrInUse) {
		t.Errorf("backup over the open database: %v, want ErrInUse", err)
	}
	after, _ := os.ReadDir(dir)
	if len(after) != len(before) {
		t.Errorf("the refused restore left files: %v, were %v", names(after), names(before))
	}
	// A second store on the file meanwhile (a command-line import).
	other, err := Open(path)
	if err != nil {
		t.Fatalf("a second store on the file while one is open: %v", err)
	}
	other.Close()
	for i := 1; i <= 20; i++ {
		if _, err := db.AddLots(ctx, "w", p.ID, []LotInput{{Lot: fmt.Sprintf("A%d", i), Inspected: 10}}); err != nil {
			t.Fatal(err)
		}
	}
	db.Close()
	stored := lotCodes(t, path)
	for i := 0; i <= 20; i++ {
		if !stored[fmt.Sprintf("A%d", i)] {
			t.Errorf("acknowledged lot A%d is not in %s", i, path)
		}
	}
	if _, err := Restore(ctx, path, good); err != nil {
		t.Fatalf("restore once the store is closed: %v", err)
	}
	if got := lotCodes(t, path); len(got) != 1 {
		t.Errorf("restored file has %d lots, want the backup's 1", len(got))
	}
}

// While a restore holds the file, opening it is refused rather than
// reading a file about to be replaced.
//
// SQLite only: the file lock.
func TestOpenRefusedDuringRestore(t *testing.T) {
	path := filepath.Join(t.TempDir(), "live.db")
	l, err := lockExclusive(path)
	if err != nil {
		t.Fatal(err)
	}
	defer l.release()
	if db, err := Open(path); !errors.Is(err, ErrInUse) {
		if err == nil {
			db.Close()
		}
		t.Fatalf("open during a restore: %v, want ErrInUse", err)
	}
}

func names(es []os.DirEntry) []string {
	var out []string
	for _, e := range es {
		out = append(out, e.Name())
	}
	return out
}

func lotCodes(t *testing.T, path string) map[string]bool {
	t.Helper()
	raw := rawSQL(t, path)
	defer raw.Close()
	rows, err := raw.Query("SELECT lot FROM lots")
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	out := map[string]bool{}
	for rows.Next() {
		var s string
		rows.Scan(&s)
		out[s] = true
	}
	return out
}

package main

import (
	"fmt"
	"strings"
	"testing"

	"lotwatch/store"
	"lotwatch/store/storetest"
)

// Exact contract of issue 15: `lotwatch version` (and -version) exits 0
// and prints a first line starting "lotwatch "; with --db it names the
// database's schema version, read without changing the file.
func TestCLIVersion(t *testing.T) {
	for _, args := range [][]string{{"version"}, {"-version"}, {"--version"}} {
		code, out, errs := runCLI(t, "", args...)
		if code != exitOK || !strings.HasPrefix(out, "lotwatch ") || errs != "" {
			t.Errorf("%v: exit %d, %q %q", args, code, out, errs)
		}
		if !strings.Contains(out, fmt.Sprintf("schema:     %d", store.SchemaVersion())) || !strings.Contains(out, "revision:") {
			t.Errorf("%v: %q", args, out)
		}
	}
	dir := t.TempDir()
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "weld", "--as", "qa"); code != exitOK {
		t.Fatal(errs)
	}
	// A PostgreSQL database counts its own migrations (SchemaVersionFor),
	// and its URL is printed without the password.
	code, out, _ := runCLI(t, "", "version", "--db", db)
	if code != exitOK || !strings.Contains(out, fmt.Sprintf("database:   %s, schema %d (the same)", store.Redact(db), store.SchemaVersionFor(db))) {
		t.Errorf("--db: exit %d %q", code, out)
	}
	notDB := writeFile(t, dir, "lots.csv", "lot,inspected,defective\n")
	if code, _, errs := runCLI(t, "", "version", "--db", notDB); code != exitUsage || !strings.Contains(errs, notDB) {
		t.Errorf("--db of a CSV file: exit %d %q", code, errs)
	}
}

package main

import (
	"lotwatch/store/storetest"
	"strings"
	"testing"
)

// A file with a row that conflicts with a stored lot is refused like any
// other bad file: exit 2, each conflict on standard error with its line,
// nothing written. With --skip-conflicts the other rows go in and the
// command exits 1 with the summary, so that a script notices. (Before,
// the other rows went in and the exit status was 0.)
func TestCLIImportConflicts(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	first := writeFile(t, dir, "first.csv", "lot,time,inspected,defective\nK1,2025-04-01T07:00:00Z,50,1\nK2,2025-04-01T08:00:00Z,50,2\n")
	if code, _, errs := runCLI(t, "", "import", "--db", db, "--process", "weld", "--create", "--as", "t", first); code != exitOK {
		t.Fatalf("first import: %d %s", code, errs)
	}
	second := writeFile(t, dir, "second.csv", "lot,time,inspected,defective\nK1,2025-04-01T07:00:00Z,50,1\nK2,2025-04-01T08:00:00Z,50,3\nK3,2025-04-01T09:00:00Z,50,0\n")
	code, out, errs := runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "t", second)
	if code != exitUsage || out != "" || !strings.Contains(errs, second+`:3: column lot, value "K2": is already stored with other values (count)`) ||
		!strings.Contains(errs, "--skip-conflicts") {
		t.Fatalf("conflicting import: exit %d\nstdout %q\nstderr %q\nwant exit 2 naming line 3, K2 and count", code, out, errs)
	}
	if _, out, _ := runCLI(t, "", "export", "--db", db, "--process", "weld"); strings.Contains(out, "K3") {
		t.Errorf("the refused import wrote K3:\n%s", out)
	}
	code, out, errs = runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "t", "--skip-conflicts", second)
	if code != exitFail || !strings.Contains(out, "3 rows, 1 added, 1 unchanged, 1 conflict") || !strings.Contains(out, second+`:3: lot "K2"`) {
		t.Fatalf("import skipping conflicts: exit %d\nstdout %q\nstderr %q\nwant exit 1 with the summary", code, out, errs)
	}
	if _, out, _ := runCLI(t, "", "export", "--db", db, "--process", "weld"); !strings.Contains(out, "K3") || !strings.Contains(out, "K2,2025-04-01T08:00:00Z,,50,2") {
		t.Errorf("after skipping conflicts, want K3 added and K2 as stored:\n%s", out)
	}
	if code, _, _ := runCLI(t, "", "import", "--db", db, "--process", "weld", "--as", "t", "--skip-conflicts", first); code != exitOK {
		t.Errorf("--skip-conflicts with nothing to skip: exit %d, want 0", code)
	}
}

package main

import (
	"bytes"
	"database/sql"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	_ "github.com/jackc/pgx/v5/stdlib"
	_ "github.com/mattn/go-sqlite3"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
)

// runCLI runs lotwatch with args and stdin and returns the exit status,
// stdout and stderr.
func runCLI(t *testing.T, stdin string, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(args, strings.NewReader(stdin), &out, &errb)
	return code, out.String(), errb.String()
}

// openRaw opens the database db (a file or a URL) behind lotwatch's back,
// as someone editing it with plain SQL would.
func openRaw(db string) (*sql.DB, error) {
	if store.IsURL(db) {
		return sql.Open("pgx", db)
	}
	return sql.Open("sqlite3", "file:"+db)
}

func writeFile(t *testing.T, dir, name, content string) string {
	t.Helper()
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, []byte(content), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestCLIImportExportRoundTrip(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	csv := writeFile(t, dir, "lots.csv", "lot,time,shift,inspected,defects,run,sag,note\r\n"+
		"P1,2025-04-01 07:00,early,12,3,2,1,=cmd\r\n"+
		"P2,2025-04-01 15:00,late,10,0,,,\"a, b\"\r\n")
	code, out, errs := runCLI(t, "", "import", "--db", db, "--process", "paint", "--create", "--tz", "Europe/Berlin", "--as", "kim", csv)
	if code != exitOK || !strings.Contains(out, "2 added, 0 unchanged, 0 conflicts") || !strings.Contains(out, "u chart") {
		t.Fatalf("import: %d %q %q", code, out, errs)
	}
	code, out, _ = runCLI(t, "", "import", "--db", db, "--process", "paint", csv)
	if code != exitOK || !strings.Contains(out, "0 added, 2 unchanged") {
		t.Fatalf("re-import: %d %q", code, out)
	}
	code, exported, errs := runCLI(t, "", "export", "--db", db, "--process", "paint")
	if code != exitOK || !strings.Contains(exported, "'=cmd") {
		t.Fatalf("export: %d %q %q", code, exported, errs)
	}
	// Into a second database through stdin, then out again: the same text.
	db2 := storetest.DB(t)
	code, out, errs = runCLI(t, exported, "import", "--db", db2, "--process", "paint", "--create", "--tz", "Europe/Berlin", "-")
	if code != exitOK || !strings.Contains(out, "2 added") {
		t.Fatalf("import from stdin: %d %q %q", code, out, errs)
	}
	if _, again, _ := runCLI(t, "", "export", "--db", db2, "--process", "paint"); again != exported {
		t.Errorf("round trip differs:\n%s\n%s", exported, again)
	}
	code, js, _ := runCLI(t, "", "export", "--db", db, "--process", "paint", "--format", "json", "--from", "2025-04-01", "--to", "2025-04-01")
	var doc struct {
		Lots []map[string]any `json:"lots"`
	}
	if code != exitOK || json.Unmarshal([]byte(js), &doc) != nil || len(doc.Lots) != 2 {
		t.Errorf("json export: %d %q", code, js)
	}
	if _, out, _ := runCLI(t, "", "export", "--db", db, "--process", "paint", "--from", "2025-04-02"); strings.Count(out, "\n") != 1 {
		t.Errorf("date range export: %q", out)
	}
}

// Bad input: exit 2, nothing on stdout, one line per problem naming the
// file, line, column and value.
func TestCLIImportProblems(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "weld", "--categories", "dent", "--as", "t"); code != exitOK {
		t.Fatal(errs)
	}
	csv := writeFile(t, dir, "bad.csv", "lot,inspected,defective,dent\nQ1,10,11,\nQ2,1.5,0,\nQ3,10,1,x\n")
	code, out, errs := runCLI(t, "", "import", "--db", db, "--process", "weld", csv)
	if code != exitUsage || out != "" {
		t.Fatalf("exit %d, stdout %q", code, out)
	}
	lines := strings.Split(strings.TrimSpace(errs), "\n")
	want := []string{csv + `:2: column defective, value "11"`, csv + `:3: column inspected, value "1.5"`, csv + `:4: column dent, value "x"`}
	if len(lines) != len(want) {
		t.Fatalf("stderr %q", errs)
	}
	for i, w := range want {
		if !strings.Contains(lines[i], w) {
			t.Errorf("line %d: %q, want it to contain %q", i, lines[i], w)
		}
	}
	if _, out, _ := runCLI(t, "", "export", "--db", db, "--process", "weld"); strings.Count(out, "\n") != 1 {
		t.Errorf("refused import wrote lots: %q", out)
	}
	for _, args := range [][]string{
		{"import", "--db", db, "--process", "weld"},
		{"import", "--db", db, "--process", "nope", csv},
		{"import", "--db", db, "--bogus", csv},
		{"export", "--db", db, "--process", "weld", "--format", "xml"},
		{"export", "--db", db, "--process", "weld", "--from", "yesterday"},
		{"process", "add", "--db", db, "--name", "x", "--chart", "z"},
		{"process", "add", "--db", db, "--name", "y", "--tz", "Nowhere/Town"},
		{"process", "add", "--db", db, "--name", "weld"},
		{"user", "add", "--db", db, "--name", "bo", "--role", "chief"},
		{"token", "revoke", "--db", db, "--id", "x"},
		{"audit", "verify"},
	} {
		code, out, errs := runCLI(t, "password1\n", args...)
		if code != exitUsage || out != "" || errs == "" {
			t.Errorf("%v: exit %d, stdout %q, stderr %q", args, code, out, errs)
		}
	}
}

func TestCLIHelp(t *testing.T) {
	cases := map[string][]string{
		"process": {"--db", "--name", "--chart", "--categories", "--tz", "--description", "--limits", "--sigma", "--rules", "--as", "--format"},
		"import":  {"--db", "--process", "--create", "--tz", "--as"},
		"export":  {"--db", "--process", "--from", "--to", "--format"},
		"backup":  {"--db", "--to"},
		"restore": {"--db", "--from"},
		"audit":   {"--db"},
		"user":    {"--db", "--name", "--role", "--as", "--format"},
		"token":   {"--db", "--user", "--label", "--id", "--as"},
	}
	for cmd, flags := range cases {
		code, out, _ := runCLI(t, "", cmd, "-h")
		if code != exitOK {
			t.Errorf("%s -h: exit %d", cmd, code)
		}
		for _, f := range flags {
			if !strings.Contains(out, f) {
				t.Errorf("%s -h does not explain %s", cmd, f)
			}
		}
	}
}

func TestCLIUsersTokensAuditBackup(t *testing.T) {
	storetest.SQLiteOnly(t, "backup and restore of the SQLite file, tampered with in place")
	dir := t.TempDir()
	db := filepath.Join(dir, "a.db")
	if code, out, errs := runCLI(t, "s3cret-pass\n", "user", "add", "--db", db, "--name", "ana", "--role", "admin", "--as", "root"); code != exitOK {
		t.Fatalf("user add: %d %q %q", code, out, errs)
	}
	if code, _, _ := runCLI(t, "short\n", "user", "add", "--db", db, "--name", "bo", "--role", "viewer"); code != exitUsage {
		t.Errorf("short password: exit %d", code)
	}
	code, out, _ := runCLI(t, "", "user", "list", "--db", db, "--format", "json")
	if code != exitOK || !strings.Contains(out, `"name": "ana"`) {
		t.Errorf("user list: %q", out)
	}
	code, tok, _ := runCLI(t, "", "token", "create", "--db", db, "--user", "ana", "--label", "line 3")
	if code != exitOK || !strings.HasPrefix(tok, "lw_") || strings.Count(tok, "\n") != 1 {
		t.Fatalf("token create: %q", tok)
	}
	if code, out, _ := runCLI(t, "", "token", "list", "--db", db); code != exitOK || strings.Contains(out, strings.TrimSpace(tok)) || !strings.Contains(out, "line 3") {
		t.Errorf("token list: %q", out)
	}
	if code, _, errs := runCLI(t, "", "token", "revoke", "--db", db, "--id", "1"); code != exitOK {
		t.Errorf("revoke: %q", errs)
	}
	if code, out, _ := runCLI(t, "", "audit", "verify", "--db", db); code != exitOK || !strings.Contains(out, "3 entries") {
		t.Errorf("verify: %d %q", code, out)
	}
	bk := filepath.Join(dir, "bk.db")
	if code, _, errs := runCLI(t, "", "backup", "--db", db, "--to", bk); code != exitOK {
		t.Fatalf("backup: %q", errs)
	}
	// Tamper with the live file behind lotwatch's back.
	raw, err := sql.Open("sqlite3", "file:"+db)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := raw.Exec("UPDATE audit SET actor = 'mallory' WHERE seq = 1"); err != nil {
		t.Fatal(err)
	}
	raw.Close()
	if code, out, _ := runCLI(t, "", "audit", "verify", "--db", db); code != exitFail || !strings.Contains(out, "entry 1") {
		t.Errorf("verify after tampering: %d %q", code, out)
	}
	if code, out, errs := runCLI(t, "", "restore", "--db", db, "--from", bk); code != exitOK {
		t.Fatalf("restore: %d %q %q", code, out, errs)
	}
	if code, _, _ := runCLI(t, "", "audit", "verify", "--db", db); code != exitOK {
		t.Errorf("verify after restore: %d", code)
	}
	if code, out, _ := runCLI(t, "", "restore", "--db", db, "--from", filepath.Join(dir, "missing.db")); code != exitUsage || out != "" {
		t.Errorf("restore from a missing file: %d %q", code, out)
	}
}

// `lotwatch audit verify` names a lot edited with plain SQL and fails.
func TestCLIAuditVerifyNamesEditedLot(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	csv := writeFile(t, dir, "lots.csv", "lot,time,inspected,defective\nH2-1,2025-04-01T07:00:00Z,50,1\nH2-2,2025-04-01T08:00:00Z,50,2\n")
	if code, _, errs := runCLI(t, "", "import", "--db", db, "--process", "Line 2", "--create", "--as", "kim", csv); code != exitOK {
		t.Fatalf("import: %q", errs)
	}
	if code, out, _ := runCLI(t, "", "audit", "verify", "--db", db); code != exitOK {
		t.Fatalf("verify before: %d %q", code, out)
	}
	raw, err := openRaw(db)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := raw.Exec("UPDATE lots SET count = 0 WHERE lot = 'H2-2'"); err != nil {
		t.Fatal(err)
	}
	raw.Close()
	code, out, _ := runCLI(t, "", "audit", "verify", "--db", db)
	if code != exitFail || !strings.Contains(out, `lot 2 (process "Line 2", lot code H2-2): stored values differ from the audit trail`) {
		t.Errorf("verify after the edit: %d %q", code, out)
	}
}

// `lotwatch process update` changes only what it is given, records why,
// refuses a removed category and needs a reason; --retire stops new lots.
func TestCLIProcessUpdate(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "Line 2", "--categories", "dent,scratch", "--as", "ana"); code != exitOK {
		t.Fatalf("add: %q", errs)
	}
	code, out, errs := runCLI(t, "", "process", "update", "--db", db, "--name", "Line 2", "--sigma", "2.5", "--rules", "nelson",
		"--categories", "dent,scratch,burr", "--description", "press line", "--area", "Press shop", "--reason", "agreed in review", "--as", "ana")
	if code != exitOK || !strings.Contains(out, "k=2.5, rules nelson, categories [dent, scratch, burr], time zone UTC, active") {
		t.Fatalf("update: %d %q %q", code, out, errs)
	}
	code, out, _ = runCLI(t, "", "process", "list", "--db", db, "--format", "json")
	var ps []map[string]any
	if code != exitOK || json.Unmarshal([]byte(out), &ps) != nil || len(ps) != 1 || ps[0]["description"] != "press line" || ps[0]["area"] != "Press shop" || ps[0]["limits"] != "sigma" || ps[0]["sigma"] != 2.5 {
		t.Fatalf("list after update: %q", out)
	}
	bad := []struct {
		args []string
		want string
	}{
		{[]string{"--sigma", "2"}, "--reason is required"},
		{[]string{"--reason", "x"}, "nothing to change"},
		{[]string{"--categories", "dent", "--reason", "x"}, "cannot be removed or renamed"},
		{[]string{"--sigma", "11", "--reason", "x"}, `--sigma "11"`},
		{[]string{"--tz", "Mars/Base", "--reason", "x"}, `--tz "Mars/Base"`},
		{[]string{"--retire", "--activate", "--reason", "x"}, "exclude each other"},
		{[]string{"--area", " Line 4", "--reason", "x"}, `option area, value " Line 4": must not start or end with spaces`},
	}
	for _, b := range bad {
		args := append([]string{"process", "update", "--db", db, "--name", "Line 2"}, b.args...)
		if code, out, errs := runCLI(t, "", args...); code != exitUsage || out != "" || !strings.Contains(errs, b.want) {
			t.Errorf("%v: %d %q %q, want %q", b.args, code, out, errs, b.want)
		}
	}
	if code, _, errs := runCLI(t, "", "process", "update", "--db", db, "--name", "Nope", "--sigma", "2", "--reason", "x"); code != exitUsage || !strings.Contains(errs, "not found") {
		t.Errorf("unknown process: %d %q", code, errs)
	}
	if code, out, errs := runCLI(t, "", "process", "update", "--db", db, "--name", "Line 2", "--retire", "--reason", "line closed"); code != exitOK || !strings.Contains(out, "retired") {
		t.Fatalf("retire: %d %q %q", code, out, errs)
	}
	csv := writeFile(t, dir, "lots.csv", "lot,inspected,defective\nA1,50,1\n")
	if code, _, errs := runCLI(t, "", "import", "--db", db, "--process", "Line 2", csv); code != exitUsage || !strings.Contains(errs, "retired") {
		t.Errorf("import into a retired process: %d %q", code, errs)
	}
	if code, _, errs := runCLI(t, "", "process", "update", "--db", db, "--name", "Line 2", "--activate", "--reason", "reopened"); code != exitOK {
		t.Fatalf("activate: %q", errs)
	}
	if code, _, errs := runCLI(t, "", "import", "--db", db, "--process", "Line 2", csv); code != exitOK {
		t.Errorf("import after activate: %q", errs)
	}
	if code, out, _ := runCLI(t, "", "audit", "verify", "--db", db); code != exitOK || !strings.Contains(out, "5 entries") {
		t.Errorf("verify: %d %q", code, out)
	}
}

// `lotwatch token list --format json` lists the tokens' records, never a
// token itself.
func TestCLITokenListJSON(t *testing.T) {
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "correct horse battery\n", "user", "add", "--db", db, "--name", "ana", "--role", "inspector"); code != exitOK {
		t.Fatalf("user add: %q", errs)
	}
	_, tok1, _ := runCLI(t, "", "token", "create", "--db", db, "--user", "ana", "--label", "line 3")
	_, tok2, _ := runCLI(t, "", "token", "create", "--db", db, "--user", "ana", "--label", "line 4")
	runCLI(t, "", "token", "revoke", "--db", db, "--id", "1")
	code, out, errs := runCLI(t, "", "token", "list", "--db", db, "--format", "json")
	var ts []struct {
		ID      int64  `json:"id"`
		User    string `json:"user"`
		Label   string `json:"label"`
		Created string `json:"created"`
		Revoked bool   `json:"revoked"`
	}
	if code != exitOK || json.Unmarshal([]byte(out), &ts) != nil {
		t.Fatalf("token list: %d %q %q", code, out, errs)
	}
	if len(ts) != 2 || ts[0].ID != 1 || !ts[0].Revoked || ts[1].Revoked || ts[1].Label != "line 4" || ts[0].User != "ana" || ts[0].Created == "" {
		t.Errorf("tokens %+v", ts)
	}
	for _, tok := range []string{tok1, tok2} {
		if tok == "" || strings.Contains(out, strings.TrimSpace(tok)) {
			t.Errorf("the list shows a token: %q", out)
		}
	}
	if code, _, errs := runCLI(t, "", "token", "list", "--db", db, "--format", "xml"); code != exitUsage || !strings.Contains(errs, `--format "xml"`) {
		t.Errorf("bad format: %d %q", code, errs)
	}
}

// `lotwatch import` reads the JSON that `lotwatch export --format json`
// writes (by the .json name or --format json), all or nothing and
// idempotent, with problems named by file and line.
func TestCLIImportJSON(t *testing.T) {
	dir := t.TempDir()
	db := storetest.DB(t)
	csv := writeFile(t, dir, "lots.csv", "lot,time,shift,inspected,defects,run,sag,note\n"+
		"P1,2025-04-01 07:00,early,12,3,2,1,=cmd\nP2,2025-04-01 15:00,late,10,0,,,\"a, b\"\n")
	if code, _, errs := runCLI(t, "", "import", "--db", db, "--process", "paint", "--create", "--tz", "Europe/Berlin", csv); code != exitOK {
		t.Fatalf("import csv: %q", errs)
	}
	code, js, errs := runCLI(t, "", "export", "--db", db, "--process", "paint", "--format", "json")
	if code != exitOK {
		t.Fatalf("export: %q", errs)
	}
	file := writeFile(t, dir, "paint.json", js)
	db2 := storetest.DB(t)
	code, out, errs := runCLI(t, "", "import", "--db", db2, "--create", "--as", "kim", file)
	if code != exitOK || !strings.Contains(out, `created process "paint": u chart, categories [run sag], time zone Europe/Berlin`) || !strings.Contains(out, "2 rows, 2 added, 0 unchanged, 0 conflicts") {
		t.Fatalf("import json: %d %q %q", code, out, errs)
	}
	if code, again, _ := runCLI(t, "", "export", "--db", db2, "--process", "paint", "--format", "json"); code != exitOK || again != js {
		t.Errorf("export of the imported lots differs:\n%s\n%s", again, js)
	}
	code, out, errs = runCLI(t, js, "import", "--db", db2, "--process", "paint", "--format", "json", "-")
	if code != exitOK || !strings.Contains(out, "2 rows, 0 added, 2 unchanged, 0 conflicts") {
		t.Errorf("import json again from stdin: %d %q %q", code, out, errs)
	}
	bad := writeFile(t, dir, "bad.json", strings.Replace(js, `"inspected":10`, `"inspected":0`, 1))
	code, out, errs = runCLI(t, "", "import", "--db", db2, bad)
	if code != exitUsage || out != "" || !strings.Contains(errs, "bad.json:3: column inspected") {
		t.Errorf("bad json: %d %q %q", code, out, errs)
	}
	if code, _, errs := runCLI(t, "", "import", "--db", db2, "--format", "yaml", file); code != exitUsage || !strings.Contains(errs, `--format "yaml"`) {
		t.Errorf("format yaml: %d %q", code, errs)
	}
	if code, _, errs := runCLI(t, "", "import", "--db", db2, csv); code != exitUsage || !strings.Contains(errs, "--process is required") {
		t.Errorf("csv without --process: %d %q", code, errs)
	}
}

// TestEveryCommandHelpOnStdout: `lotwatch COMMAND -h` and `lotwatch help
// COMMAND` print the command's usage on standard output, nothing on
// standard error, and exit 0, for every registered command, so that the
// help can be paged or saved (common practice, no source); a bad option is
// one line on standard error and exit 2.
func TestEveryCommandHelpOnStdout(t *testing.T) {
	if len(commands) < 15 {
		t.Fatalf("only %d commands registered", len(commands))
	}
	for name := range commands {
		for _, args := range [][]string{{name, "-h"}, {"help", name}} {
			code, out, errs := runCLI(t, "", args...)
			if code != exitOK || errs != "" || !strings.Contains(out, "lotwatch "+name) {
				t.Errorf("%v: exit %d, stderr %q, stdout %.60q", args, code, errs, out)
			}
		}
		if name == "process" || name == "user" || name == "token" || name == "audit" {
			continue // these take a subcommand first
		}
		code, out, errs := runCLI(t, "", name, "--no-such-option")
		if code != exitUsage || out != "" || strings.Count(errs, "\n") != 1 || !strings.Contains(errs, "no-such-option") {
			t.Errorf("%s --no-such-option: exit %d, stdout %q, stderr %q", name, code, out, errs)
		}
	}
}

// TestUserHelpRolesAsREADME: `lotwatch user -h` states each role with the
// words of README's table of roles (the one statement of them).
func TestUserHelpRolesAsREADME(t *testing.T) {
	b, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	_, help, _ := runCLI(t, "", "user", "-h")
	flat := strings.Join(strings.Fields(help), " ")
	n := 0
	for _, line := range strings.Split(string(b), "\n") {
		cells := strings.Split(strings.Trim(line, "| "), " | ")
		if len(cells) != 2 {
			continue
		}
		if _, err := store.ParseRole(cells[0]); err != nil || cells[0] == "" {
			continue
		}
		n++
		if want := cells[0] + " " + cells[1]; !strings.Contains(flat, want) {
			t.Errorf("user -h lacks %q", want)
		}
	}
	if n != 4 {
		t.Errorf("README's table of roles has %d rows, want 4", n)
	}
}

// TestProcessEWMAFlags: `process add|update` take the EWMA by its weight
// and either its width or the lots between its false alarms
// (--ewma-arl0, the width then designed over the lot sizes); giving both
// is refused with exit 2 naming --ewma-arl0's field and changes nothing,
// and a value that is not a number is refused too.
func TestProcessEWMAFlags(t *testing.T) {
	db := storetest.DB(t)
	monitors := func() spc.Monitors {
		t.Helper()
		s, err := store.Open(db)
		if err != nil {
			t.Fatal(err)
		}
		defer s.Close()
		p, err := s.ProcessByName(t.Context(), "press")
		if err != nil {
			t.Fatal(err)
		}
		return p.Monitors
	}
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "press", "--ewma-lambda", "0.1", "--ewma-arl0", "500", "--as", "t"); code != exitOK {
		t.Fatalf("add: exit %d: %s", code, errs)
	}
	if m := monitors(); m != (spc.Monitors{EWMALambda: 0.1, EWMAARL0: 500}) {
		t.Fatalf("after add: %+v", m)
	}
	for _, c := range []struct {
		args []string
		says string
	}{
		{[]string{"--ewma-width", "2.5"}, "ewma_arl0"},
		{[]string{"--ewma-arl0", "many"}, "--ewma-arl0"},
		{[]string{"--ewma-arl0", "0.5"}, "ewma_arl0"},
	} {
		args := append([]string{"process", "update", "--db", db, "--name", "press", "--reason", "try", "--as", "t"}, c.args...)
		if code, _, errs := runCLI(t, "", args...); code != exitUsage || !strings.Contains(errs, c.says) {
			t.Errorf("%v: exit %d, want 2 naming %s: %s", c.args, code, c.says, errs)
		}
		if m := monitors(); m != (spc.Monitors{EWMALambda: 0.1, EWMAARL0: 500}) {
			t.Errorf("%v refused, yet the monitors changed: %+v", c.args, m)
		}
	}
	if code, _, errs := runCLI(t, "", "process", "update", "--db", db, "--name", "press", "--ewma-width", "2.5", "--ewma-arl0", "0", "--reason", "a width instead", "--as", "t"); code != exitOK {
		t.Fatalf("update: exit %d: %s", code, errs)
	}
	if m := monitors(); m != (spc.Monitors{EWMALambda: 0.1, EWMAWidth: 2.5}) {
		t.Errorf("after update: %+v", m)
	}
}

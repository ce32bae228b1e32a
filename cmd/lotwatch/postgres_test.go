package main

import (
	"fmt"
	"io"
	"lotwatch/store/storetest"
	"net/http"
	"net/url"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"syscall"
	"testing"

	_ "github.com/jackc/pgx/v5/stdlib"
)

// buildLotwatch builds the binary once for a test.
func buildLotwatch(t testing.TB) string {
	t.Helper()
	if testing.Short() {
		t.Skip("builds the binary; skipped with -short")
	}
	bin := filepath.Join(t.TempDir(), "lotwatch")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// stationToken runs the set-up commands (stdin answers any password
// prompt), then creates an API token for the user "station", whom one of
// them added, and returns it.
func stationToken(t testing.TB, bin, db, stdin string, setup [][]string) string {
	t.Helper()
	for _, args := range setup {
		if code, out := lotwatchCmd(t, bin, stdin, args...); code != exitOK {
			t.Fatalf("%v: %d %s", args, code, out)
		}
	}
	tok, err := exec.Command(bin, "token", "create", "--db", db, "--user", "station", "--as", "t").Output()
	if err != nil {
		t.Fatalf("token create: %v", err)
	}
	return strings.TrimSpace(string(tok))
}

// postLot posts one lot (its JSON) with the token to the API at url and
// fails the test unless it is stored (201).
func postLot(t testing.TB, url, token, lot string) {
	t.Helper()
	if err := tryPost(http.DefaultClient, url, token, lot); err != nil {
		t.Fatal(err)
	}
}

// tryPost posts one lot (its JSON) with the token to the API at url and
// says why it was not stored (an answer other than 201), or nil; for
// posting from several goroutines, where a test may not stop.
func tryPost(client *http.Client, url, token, lot string) error {
	req, _ := http.NewRequest("POST", url, strings.NewReader(lot))
	req.Header.Set("Authorization", "Bearer "+token)
	req.Header.Set("Content-Type", "application/json")
	res, err := client.Do(req)
	if err != nil {
		return fmt.Errorf("post %s: %w", lot, err)
	}
	io.Copy(io.Discard, res.Body)
	res.Body.Close()
	if res.StatusCode != http.StatusCreated {
		return fmt.Errorf("post %s: %s", lot, res.Status)
	}
	return nil
}

// startServers starts n `lotwatch serve` on the database db, killed when
// the test ends, and returns their base URLs and processes.
func startServers(t *testing.T, bin, db string, n int, extra ...string) ([]string, []*exec.Cmd) {
	t.Helper()
	var bases []string
	var srvs []*exec.Cmd
	for range n {
		addr := freeAddr(t)
		srv := exec.Command(bin, append([]string{"serve", "--db", db, "--addr", addr}, extra...)...)
		if err := srv.Start(); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { srv.Process.Kill(); srv.Wait() })
		waitHealthy(t, "http://"+addr, srv)
		bases = append(bases, "http://"+addr)
		srvs = append(srvs, srv)
	}
	return bases, srvs
}

// TestPostgresBehavesAsSQLite runs the real binary through the commands
// of the exact contract of issue 17, once on a SQLite file and once on a
// PostgreSQL URL: the same exit statuses, and the same output wherever
// the output does not carry a time or a hash of this run (a token's
// secret, the audit head). Then `copy` moves the file to a second
// database: `export` gives the same bytes on both, `audit verify` exits 0
// on both. (The reference is the SQLite behaviour of this program.)
func TestPostgresBehavesAsSQLite(t *testing.T) {
	pg := storetest.PostgresDatabase(t)
	bin := buildLotwatch(t)
	dir := t.TempDir()
	file := filepath.Join(dir, "plant.db")
	csv, err := filepath.Abs("../../testdata/demo/line-2-housing-visual.csv")
	if err != nil {
		t.Fatal(err)
	}
	steps := []struct {
		stdin string
		args  []string
		same  bool // the output must be the same on both
	}{
		{"", []string{"process", "add", "--name", "housing", "--categories", "short shot,flash,sink mark,scratch,discolour", "--tz", "Europe/Berlin", "--as", "t"}, true},
		{"", []string{"process", "add", "--name", "panel", "--chart", "u", "--as", "t"}, true},
		{"", []string{"process", "add", "--name", "housing", "--as", "t"}, true}, // exists: exit 2
		{"", []string{"import", "--process", "housing", "--as", "t", csv}, true},
		{"", []string{"import", "--process", "housing", "--as", "t", csv}, true}, // nothing new
		{"", []string{"process", "update", "--name", "panel", "--description", "top coat", "--reason", "named", "--as", "t"}, true},
		{"", []string{"process", "list"}, true},
		{"", []string{"process", "list", "--format", "json"}, false}, // carries the creation time
		{"", []string{"export", "--process", "housing"}, true},
		{"", []string{"export", "--process", "housing", "--format", "json"}, true},
		{"a long enough password\n", []string{"user", "add", "--name", "ana", "--role", "engineer", "--as", "t"}, true},
		{"", []string{"token", "create", "--user", "ana", "--label", "station 1", "--as", "t"}, false},
		{"", []string{"token", "list"}, false},
		{"", []string{"token", "revoke", "--id", "1", "--as", "t"}, true},
		{"", []string{"token", "revoke", "--id", "9", "--as", "t"}, true}, // no such token
		{"", []string{"report", "--week", "2026-W47", "--format", "json"}, true},
		{"", []string{"report", "--week", "2026-W47"}, true},
		{"", []string{"plan", "--process", "housing", "--n", "300", "--p1", "0.05", "--format", "json"}, true},
		{"", []string{"audit", "verify"}, false},
	}
	for _, s := range steps {
		run := func(db string) (int, string) {
			args := append([]string{s.args[0]}, s.args[1:]...)
			if s.args[0] == "process" || s.args[0] == "token" || s.args[0] == "user" || s.args[0] == "audit" {
				args = append(args[:2:2], append([]string{"--db", db}, s.args[2:]...)...)
			} else {
				args = append(args[:1:1], append([]string{"--db", db}, s.args[1:]...)...)
			}
			code, out := lotwatchCmd(t, bin, s.stdin, args...)
			// The report states when it was made: the one line that may
			// differ between two runs a second apart.
			out = generatedLine.ReplaceAllString(out, "generated")
			return code, strings.ReplaceAll(out, db, "DB")
		}
		fc, fout := run(file)
		pc, pout := run(pg)
		if fc != pc {
			t.Errorf("%v: exit %d on PostgreSQL, %d on SQLite\n%s", s.args, pc, fc, pout)
			continue
		}
		if s.same && fout != pout {
			t.Errorf("%v: output differs\nSQLite:\n%s\nPostgreSQL:\n%s", s.args, fout, pout)
		}
		if strings.Contains(pout, "lotwatch-test") || strings.Contains(pout, passwordOf(pg)) {
			t.Errorf("%v: the output holds the password:\n%s", s.args, pout)
		}
	}

	// copy --from FILE --to URL: the same bytes for every process, and
	// the audit check holds on both.
	dst := storetest.PostgresDatabase(t)
	if code, out := lotwatchCmd(t, bin, "", "copy", "--from", file, "--to", dst); code != exitOK || !strings.Contains(out, "audit trail verified") {
		t.Fatalf("copy: exit %d\n%s", code, out)
	}
	if code, out := lotwatchCmd(t, bin, "", "copy", "--from", file, "--to", dst); code != exitUsage || !strings.Contains(out, "not empty") {
		t.Errorf("copy into a database with a record: exit %d\n%s\nwant 2, refused", code, out)
	}
	for _, p := range []string{"housing", "panel"} {
		_, a := lotwatchCmd(t, bin, "", "export", "--db", file, "--process", p)
		_, b := lotwatchCmd(t, bin, "", "export", "--db", dst, "--process", p)
		if a != b || a == "" {
			t.Errorf("export of %s after copy differs:\n%s\n%s", p, a, b)
		}
	}
	for _, db := range []string{file, dst} {
		if code, out := lotwatchCmd(t, bin, "", "audit", "verify", "--db", db); code != exitOK {
			t.Errorf("audit verify after copy: exit %d\n%s", code, out)
		}
	}

	// backup of the URL is a SQLite file with the same record.
	back := filepath.Join(dir, "back.db")
	if code, out := lotwatchCmd(t, bin, "", "backup", "--db", pg, "--to", back); code != exitOK || strings.Contains(out, passwordOf(pg)) {
		t.Fatalf("backup: exit %d\n%s", code, out)
	}
	_, a := lotwatchCmd(t, bin, "", "export", "--db", pg, "--process", "housing")
	_, b := lotwatchCmd(t, bin, "", "export", "--db", back, "--process", "housing")
	if a != b {
		t.Errorf("export of the backup differs:\n%s\n%s", a, b)
	}
	if code, out := lotwatchCmd(t, bin, "", "audit", "verify", "--db", back); code != exitOK {
		t.Errorf("audit verify of the backup: exit %d\n%s", code, out)
	}
}

var generatedLine = regexp.MustCompile(`(?m)^.*[Gg]enerated.*$`)

// passwordOf is the password of a URL.
func passwordOf(raw string) string {
	u, err := url.Parse(raw)
	if err != nil {
		return raw
	}
	p, _ := u.User.Password()
	if p == "" {
		return "\x00none"
	}
	return p
}

// TestPostgresConnectionErrors: an unreachable server and a refused
// login exit 1 with one line naming the host and the error, a malformed
// URL exits 2, and none of them prints the password (issue 17's exact
// contract).
func TestPostgresConnectionErrors(t *testing.T) {
	base := storetest.PostgresURL(t)
	bin := buildLotwatch(t)
	u, _ := url.Parse(base)
	const secret = "Sup3r-secret-pw"
	refused := *u
	refused.User = url.UserPassword(u.User.Username(), secret)
	closed := refused
	closed.Host = "127.0.0.1:" + strings.TrimPrefix(freeAddr(t), "127.0.0.1:")
	cases := []struct {
		name string
		db   string
		code int
		want []string
	}{
		{"unreachable", closed.String(), exitFail, []string{closed.Host, "connect"}},
		{"login refused", refused.String(), exitFail, []string{u.Host, "password authentication failed"}},
		{"malformed", "postgres://lotwatch:" + secret + "@127.0.0.1:notaport/x", exitUsage, []string{"malformed database URL"}},
	}
	for _, c := range cases {
		for _, args := range [][]string{
			{"process", "list", "--db", c.db},
			{"export", "--db", c.db, "--process", "x"},
			{"audit", "verify", "--db", c.db},
			{"report", "--db", c.db},
			{"serve", "--db", c.db, "--addr", "127.0.0.1:0"},
			{"copy", "--from", c.db, "--to", filepath.Join(t.TempDir(), "x.db")},
		} {
			code, out := lotwatchCmd(t, bin, "", args...)
			if code != c.code {
				t.Errorf("%s, %v: exit %d, want %d\n%s", c.name, args[:2], code, c.code, out)
			}
			if n := strings.Count(strings.TrimSpace(out), "\n"); n != 0 {
				t.Errorf("%s, %v: %d lines, want one:\n%s", c.name, args[:2], n+1, out)
			}
			for _, w := range c.want {
				if !strings.Contains(out, w) {
					t.Errorf("%s, %v: %q does not say %q", c.name, args[:2], out, w)
				}
			}
			if strings.Contains(out, secret) {
				t.Errorf("%s, %v: the password is printed: %s", c.name, args[:2], out)
			}
		}
	}
}

// TestTwoServersOnePostgres runs two `lotwatch serve` on one PostgreSQL
// database (issue 17's exact contract): a lot posted with a token to one
// is in the other's chart (GET /api/v1/processes/1/chart) on the next
// request after the 201, although that server had the chart cached
// before; a session cookie from one server's sign-in is accepted by the
// other; a restore is refused while the servers are connected and goes
// through once they have stopped.
func TestTwoServersOnePostgres(t *testing.T) {
	pg := storetest.PostgresDatabase(t)
	bin := buildLotwatch(t)
	token := stationToken(t, bin, pg, "two-servers-pass\n", [][]string{
		{"process", "add", "--db", pg, "--name", "weld", "--as", "t"},
		{"user", "add", "--db", pg, "--name", "station", "--role", "inspector", "--as", "t"},
		{"user", "add", "--db", pg, "--name", "eve", "--role", "engineer", "--as", "t"},
	})
	bases, srvs := startServers(t, bin, pg, 2)
	call := func(method, url, body string, hdr ...string) (int, string, *http.Response) {
		t.Helper()
		req, _ := http.NewRequest(method, url, strings.NewReader(body))
		for i := 0; i+1 < len(hdr); i += 2 {
			req.Header.Set(hdr[i], hdr[i+1])
		}
		res, err := noRedirect.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer res.Body.Close()
		b, _ := io.ReadAll(res.Body)
		return res.StatusCode, string(b), res
	}
	bearer := []string{"Authorization", "Bearer " + token, "Content-Type", "application/json"}
	for i := range 5 {
		code := fmt.Sprintf("L-%02d", i)
		from, to := bases[i%2], bases[(i+1)%2]
		if c, body, _ := call("GET", to+"/api/v1/processes/1/chart", "", bearer...); c != 200 || strings.Contains(body, code) {
			t.Fatalf("chart before the post: %d %s", c, body)
		}
		if c, body, _ := call("POST", from+"/api/v1/processes/1/lots", fmt.Sprintf(`{"lot":%q,"inspected":50,"defective":1}`, code), bearer...); c != http.StatusCreated {
			t.Fatalf("post %s: %d %s", code, c, body)
		}
		if c, body, _ := call("GET", to+"/api/v1/processes/1/chart", "", bearer...); c != 200 || !strings.Contains(body, `"`+code+`"`) {
			t.Errorf("lot %s posted to %s is not in %s's chart on the next request: %d %s", code, from, to, c, body)
		}
	}
	form := url.Values{"name": {"eve"}, "password": {"two-servers-pass"}}.Encode()
	c, _, res := call("POST", bases[0]+"/signin", form, "Content-Type", "application/x-www-form-urlencoded")
	var cookie *http.Cookie
	for _, ck := range res.Cookies() {
		if ck.Value != "" {
			cookie = ck
		}
	}
	if c != http.StatusSeeOther || cookie == nil {
		t.Fatalf("sign-in on the first server: %d, cookies %v", c, res.Cookies())
	}
	if c, body, _ := call("GET", bases[1]+"/api/v1/processes", "", "Cookie", cookie.Name+"="+cookie.Value); c != 200 || !strings.Contains(body, "weld") {
		t.Errorf("the first server's session cookie on the second server: %d %s", c, body)
	}
	if c, _, _ := call("GET", bases[1]+"/api/v1/processes", "", "Cookie", cookie.Name+"=not-a-session"); c == 200 {
		t.Errorf("a made-up session cookie was accepted")
	}

	back := filepath.Join(t.TempDir(), "back.db")
	if code, out := lotwatchCmd(t, bin, "", "backup", "--db", pg, "--to", back); code != exitOK {
		t.Fatalf("backup while serving: %d %s", code, out)
	}
	if code, out := lotwatchCmd(t, bin, "", "restore", "--db", pg, "--from", back); code != exitFail || !strings.Contains(out, "open in another program") {
		t.Errorf("restore while two servers are connected: exit %d\n%s\nwant 1, refused", code, out)
	}
	for _, srv := range srvs {
		srv.Process.Signal(syscall.SIGTERM)
		srv.Wait()
	}
	if code, out := lotwatchCmd(t, bin, "", "restore", "--db", pg, "--from", back); code != exitOK {
		t.Errorf("restore after the servers stopped: exit %d\n%s", code, out)
	}
	if code, out := lotwatchCmd(t, bin, "", "audit", "verify", "--db", pg); code != exitOK {
		t.Errorf("audit verify after restore: exit %d\n%s", code, out)
	}
	_, a := lotwatchCmd(t, bin, "", "export", "--db", pg, "--process", "weld")
	_, b := lotwatchCmd(t, bin, "", "export", "--db", back, "--process", "weld")
	if a != b || strings.Count(a, "\n") != 6 {
		t.Errorf("export after restore:\n%s\nwant the backup's 5 lots:\n%s", a, b)
	}
}

// noRedirect is a client that shows redirects instead of following them.
var noRedirect = &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}

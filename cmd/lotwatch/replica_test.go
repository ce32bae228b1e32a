package main

import (
	"fmt"
	"io"
	"lotwatch/store/storetest"
	"net/http"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"
)

// TestReadReplicaServeAndReport: `serve` and `report` with --read-db on
// the test server's streaming replica (.ci/postgres).
//   - A lot posted to one server is in the other's chart on the next
//     request, also while the replica's replay is held back: the primary
//     answers then, counted in the metrics as the replica lagging.
//   - Once the replica has caught up, it answers the reads of lots.
//   - `report` gives the same bytes with and without --read-db, with
//     replay held back or not.
//   - A --read-db that cannot be a replica of --db is refused: exit 2 for
//     a SQLite --db or another plant's database, exit 1 naming the host
//     for a server that cannot be reached; the password is never printed.
func TestReadReplicaServeAndReport(t *testing.T) {
	pg := storetest.PostgresDatabase(t)
	rep := storetest.ReplicaOf(t, pg)
	bin := buildLotwatch(t)
	csv, err := filepath.Abs("../../testdata/demo/line-2-housing-visual.csv")
	if err != nil {
		t.Fatal(err)
	}
	token := stationToken(t, bin, pg, "replica-test-pass\n", [][]string{
		{"process", "add", "--db", pg, "--name", "housing", "--categories", "short shot,flash,sink mark,scratch,discolour", "--tz", "Europe/Berlin", "--as", "t"},
		{"process", "add", "--db", pg, "--name", "weld", "--as", "t"},
		{"import", "--db", pg, "--process", "housing", "--as", "t", csv},
		{"user", "add", "--db", pg, "--name", "station", "--role", "inspector", "--as", "t"},
	})
	maddr := freeAddr(t)
	a, _ := startServers(t, bin, pg, 1, "--read-db", rep)
	b, _ := startServers(t, bin, pg, 1, "--read-db", rep, "--metrics-addr", maddr)
	get := func(url string) string {
		t.Helper()
		req, _ := http.NewRequest("GET", url, nil)
		req.Header.Set("Authorization", "Bearer "+token)
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer res.Body.Close()
		body, _ := io.ReadAll(res.Body)
		if res.StatusCode != 200 {
			t.Fatalf("GET %s: %d %s", url, res.StatusCode, body)
		}
		return string(body)
	}
	post := func(code string) {
		t.Helper()
		postLot(t, a[0]+"/api/v1/processes/2/lots", token, fmt.Sprintf(`{"lot":%q,"inspected":50,"defective":1}`, code))
	}
	reads := func() map[string]float64 {
		t.Helper()
		out := map[string]float64{}
		for _, m := range lotReads.FindAllStringSubmatch(get("http://"+maddr+"/metrics"), -1) {
			out[m[1]], _ = strconv.ParseFloat(m[2], 64)
		}
		return out
	}
	report := func(extra ...string) string {
		t.Helper()
		code, out := lotwatchCmd(t, bin, "", append([]string{"report", "--db", pg, "--week", "2026-W47", "--format", "json"}, extra...)...)
		if code != exitOK {
			t.Fatalf("report %v: exit %d\n%s", extra, code, out)
		}
		return generatedLine.ReplaceAllString(out, "generated")
	}
	plain := report()

	// Replay held back: the primary answers, and nothing is missed.
	release := storetest.HoldReplay(t, rep)
	before := reads()
	for i := range 3 {
		code := fmt.Sprintf("HELD-%d", i)
		post(code)
		if chart := get(b[0] + "/api/v1/processes/2/chart"); !strings.Contains(chart, `"`+code+`"`) {
			t.Errorf("lot %s posted to one server is not in the other's chart on the next request, replay held back", code)
		}
	}
	if got := reads(); got["primary_replica_lagging"] <= before["primary_replica_lagging"] || got["replica"] != before["replica"] {
		t.Errorf("reads with replay held back: %v, before %v; want the primary to answer, counted as lagging", got, before)
	}
	if got := report("--read-db", rep); got != plain {
		t.Errorf("report with --read-db, replay held back, differs:\n%s\nwithout:\n%s", got, plain)
	}
	release()

	// Caught up: the replica answers the lot list (no cache before it).
	answered := false
	for start := time.Now(); !answered && time.Since(start) < 30*time.Second; time.Sleep(50 * time.Millisecond) {
		before := reads()["replica"]
		if list := get(b[0] + "/api/v1/processes/2/lots"); !strings.Contains(list, `"HELD-2"`) {
			t.Fatalf("the lot list lacks a posted lot:\n%s", list)
		}
		answered = reads()["replica"] > before
	}
	if !answered {
		t.Errorf("the replica never answered a read of lots: %v", reads())
	}
	if got := report("--read-db", rep); got != plain {
		t.Errorf("report with --read-db differs:\n%s\nwithout:\n%s", got, plain)
	}

	// Refused.
	other := storetest.PostgresDatabase(t)
	if code, out := lotwatchCmd(t, bin, "", "process", "add", "--db", other, "--name", "oven", "--as", "t"); code != exitOK {
		t.Fatalf("process add on another database: %d %s", code, out)
	}
	const secret = "Sup3r-secret-pw"
	nobody := freeAddr(t)
	closed := "postgres://lotwatch:" + secret + "@" + nobody + "/lotwatch_test"
	file := filepath.Join(t.TempDir(), "plant.db")
	if code, out := lotwatchCmd(t, bin, "", "process", "add", "--db", file, "--name", "oven", "--as", "t"); code != exitOK {
		t.Fatalf("process add on a file: %d %s", code, out)
	}
	for _, c := range []struct {
		name, db, readDB string
		code             int
		says             string
	}{
		{"SQLite --db", file, rep, exitUsage, "PostgreSQL"},
		{"a file as replica", pg, file, exitUsage, "PostgreSQL"},
		{"another plant's database", pg, other, exitUsage, "not a replica"},
		{"no server there", pg, closed, exitFail, nobody},
	} {
		for _, args := range [][]string{
			{"report", "--db", c.db, "--read-db", c.readDB},
			{"serve", "--db", c.db, "--read-db", c.readDB, "--addr", "127.0.0.1:0"},
		} {
			code, out := lotwatchCmd(t, bin, "", args...)
			if code != c.code || !strings.Contains(out, c.says) || strings.Count(strings.TrimSpace(out), "\n") != 0 {
				t.Errorf("%s, %s: exit %d, want %d, one line saying %q:\n%s", c.name, args[0], code, c.code, c.says, out)
			}
			if strings.Contains(out, secret) || strings.Contains(out, passwordOf(pg)) {
				t.Errorf("%s, %s: the password is printed: %s", c.name, args[0], out)
			}
		}
	}
}

// lotReads reads the counts of lotwatch_lot_reads_total from /metrics.
var lotReads = regexp.MustCompile(`(?m)^lotwatch_lot_reads_total\{answered_by="([a-z_]+)"\} ([0-9.e+]+)$`)

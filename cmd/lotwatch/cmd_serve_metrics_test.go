package main

import (
	"io"
	"lotwatch/store/storetest"
	"net/http"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// Exact contract of issue 15, on the built binary: with --metrics-addr,
// GET /metrics on that address answers 200 in the Prometheus text format
// with a lotwatch_ metric counting stored lots, which rises by one when a
// lot is posted; the public address does not serve the metrics. `lotwatch
// version` of the built binary prints the revision the toolchain recorded.
func TestServeMetricsAddr(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary; skipped with -short")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "lotwatch")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	db := storetest.DB(t)
	token := stationToken(t, bin, db, "metrics-test-pass\n", [][]string{
		{"process", "add", "--db", db, "--name", "weld", "--as", "t"},
		{"user", "add", "--db", db, "--name", "station", "--role", "inspector", "--as", "t"},
	})
	addr, maddr := freeAddr(t), freeAddr(t)
	srv := exec.Command(bin, "serve", "--db", db, "--addr", addr, "--metrics-addr", maddr)
	var log strings.Builder
	srv.Stdout, srv.Stderr = &log, &log
	if err := srv.Start(); err != nil {
		t.Fatal(err)
	}
	defer srv.Process.Kill()
	waitHealthy(t, "http://"+addr, srv)

	stored := regexp.MustCompile(`(?m)^lotwatch_lots_stored ([0-9.e+]+)$`)
	read := func() float64 {
		t.Helper()
		res, err := http.Get("http://" + maddr + "/metrics")
		if err != nil {
			t.Fatalf("%v\n%s", err, log.String())
		}
		b, _ := io.ReadAll(res.Body)
		res.Body.Close()
		if res.StatusCode != 200 || !strings.HasPrefix(res.Header.Get("Content-Type"), "text/plain") {
			t.Fatalf("GET /metrics: %d %q", res.StatusCode, res.Header.Get("Content-Type"))
		}
		m := stored.FindSubmatch(b)
		if m == nil {
			t.Fatalf("no lotwatch_lots_stored in\n%s", b)
		}
		v, _ := strconv.ParseFloat(string(m[1]), 64)
		return v
	}
	before := read()
	postLot(t, "http://"+addr+"/api/v1/processes/1/lots", token, `{"lot":"M1","inspected":50,"defective":1}`)
	if after := read(); after != before+1 {
		t.Errorf("lotwatch_lots_stored went from %v to %v after one lot, want +1", before, after)
	}
	res, err := http.Get("http://" + addr + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	if res.StatusCode == http.StatusOK {
		t.Error("the public address serves /metrics")
	}
	// The revision printed is the one the Go toolchain recorded in the
	// binary, as `go version -m` reads it ("unknown" when the build had
	// no version control, e.g. GOFLAGS=-buildvcs=false).
	info, err := exec.Command("go", "version", "-m", bin).Output()
	if err != nil {
		t.Fatal(err)
	}
	rev := "unknown"
	if m := regexp.MustCompile(`vcs\.revision=([0-9a-f]+)`).FindSubmatch(info); m != nil {
		rev = string(m[1])
	}
	code, out := lotwatchCmd(t, bin, "", "version", "--db", db)
	if code != exitOK || !strings.HasPrefix(out, "lotwatch ") || !strings.Contains(out, "revision:   "+rev) {
		t.Errorf("version of the built binary: exit %d\n%s\nwant revision %s", code, out, rev)
	}
}

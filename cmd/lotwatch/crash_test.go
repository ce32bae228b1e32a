package main

import (
	"bufio"
	"bytes"
	"context"
	"database/sql"
	"fmt"
	"io"
	"lotwatch/store/storetest"
	"math/rand/v2"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	_ "github.com/mattn/go-sqlite3"
)

// crashRounds is the number of kill -9 rounds of TestCrashRecovery: 20 by
// default (half importer, half server), LOTWATCH_CRASH_ROUNDS for more.
func crashRounds(t *testing.T) int {
	if s := os.Getenv("LOTWATCH_CRASH_ROUNDS"); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n < 2 {
			t.Fatalf("LOTWATCH_CRASH_ROUNDS=%q: want a whole number of at least 2", s)
		}
		return n
	}
	return 20
}

// TestCrashRecovery kills the real lotwatch binary with SIGKILL at random
// points (fixed seed) while it writes: the importer in the middle of a
// large file, and the server while 8 stations post lots concurrently.
// After each kill the database must pass SQLite's PRAGMA integrity_check,
// `lotwatch audit verify` must exit 0, every lot the server acknowledged
// with 201 must be stored, and no import or posted batch may be partly
// applied: the lots of one file (or one request) are all there or none.
func TestCrashRecovery(t *testing.T) {
	storetest.SQLiteOnly(t, "the SQLite file after a kill; TestPostgresCrash kills PostgreSQL's writers")
	rounds := crashRounds(t)
	dir := t.TempDir()
	bin := filepath.Join(dir, "lotwatch")
	build := exec.Command("go", "build", "-o", bin, ".")
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	rng := rand.New(rand.NewPCG(20260105, 9))
	importRounds := rounds / 2
	t.Run("import", func(t *testing.T) { crashImports(t, bin, dir, importRounds, rng) })
	t.Run("serve", func(t *testing.T) { crashServer(t, bin, dir, rounds-importRounds, rng) })
}

// lotwatchCmd runs the binary to completion and returns its exit status
// and output.
func lotwatchCmd(t testing.TB, bin, stdin string, args ...string) (int, string) {
	t.Helper()
	c := exec.Command(bin, args...)
	c.Stdin = strings.NewReader(stdin)
	out, err := c.CombinedOutput()
	if ee, ok := err.(*exec.ExitError); ok {
		return ee.ExitCode(), string(out)
	}
	if err != nil {
		t.Fatalf("%s %v: %v", bin, args, err)
	}
	return 0, string(out)
}

// crashCheck is what must hold after every kill.
func crashCheck(t *testing.T, bin, db string) {
	t.Helper()
	raw, err := sql.Open("sqlite3", "file:"+db)
	if err != nil {
		t.Fatal(err)
	}
	defer raw.Close()
	var ic string
	if err := raw.QueryRow("PRAGMA integrity_check").Scan(&ic); err != nil || ic != "ok" {
		t.Fatalf("integrity_check: %q %v", ic, err)
	}
	raw.Close()
	if code, out := lotwatchCmd(t, bin, "", "audit", "verify", "--db", db); code != exitOK {
		t.Fatalf("audit verify: exit %d\n%s", code, out)
	}
}

// storedCodes returns the set of stored lot codes.
func storedCodes(t *testing.T, db string) map[string]bool {
	t.Helper()
	have := map[string]bool{}
	for code := range storedLots(t, db) {
		have[code] = true
	}
	return have
}

func crashImports(t *testing.T, bin, dir string, rounds int, rng *rand.Rand) {
	db := filepath.Join(dir, "import.db")
	if code, out := lotwatchCmd(t, bin, "", "process", "add", "--db", db, "--name", "weld", "--categories", "dent,scratch", "--as", "crash"); code != exitOK {
		t.Fatalf("process add: %d %s", code, out)
	}
	lots := 20000
	if !testing.Short() && os.Getenv("LOTWATCH_CRASH_ROUNDS") != "" {
		lots = 100000
	}
	// Calibrate: one import to completion gives the time a kill may fall in.
	file := crashCSV(t, dir, "R00", lots)
	t0 := time.Now()
	if code, out := lotwatchCmd(t, bin, "", "import", "--db", db, "--process", "weld", "--as", "crash", file); code != exitOK {
		t.Fatalf("import: %d %s", code, out)
	}
	full := time.Since(t0)
	committed := map[string]bool{"R00": true}
	killedMid := 0
	for r := 1; r <= rounds; r++ {
		prefix := fmt.Sprintf("R%02d", r)
		file := crashCSV(t, dir, prefix, lots)
		// A point in 0 … 1.3 × the full run: mostly mid-import, now and
		// then at the commit or just after it.
		delay := time.Duration(rng.Float64() * 1.3 * float64(full))
		c := exec.Command(bin, "import", "--db", db, "--process", "weld", "--as", "crash", file)
		var out bytes.Buffer
		c.Stdout, c.Stderr = &out, &out
		if err := c.Start(); err != nil {
			t.Fatal(err)
		}
		time.Sleep(delay)
		c.Process.Kill() // SIGKILL
		err := c.Wait()
		finished := err == nil
		crashCheck(t, bin, db)
		have := storedCodes(t, db)
		n := 0
		for i := range lots {
			if have[crashCode(prefix, i)] {
				n++
			}
		}
		switch {
		case n == lots:
			committed[prefix] = true
		case n == 0 && finished:
			t.Fatalf("round %d: the import exited 0 but none of its lots is stored: %s", r, out.String())
		case n != 0:
			t.Fatalf("round %d: killed after %v, %d of the file's %d lots are stored (partly applied)", r, delay, n, lots)
		}
		if n == 0 {
			killedMid++
		}
		for p := range committed {
			if !have[crashCode(p, 0)] || !have[crashCode(p, lots-1)] {
				t.Fatalf("round %d: the lots of the committed import %s are gone", r, p)
			}
		}
		t.Logf("round %d: killed after %v of %v: %d of %d lots stored", r, delay.Round(time.Millisecond), full.Round(time.Millisecond), n, lots)
	}
	t.Logf("%d import rounds: %d killed before the commit, %d after it; integrity, audit chain and all-or-none held each time", rounds, killedMid, rounds-killedMid)
}

func crashCode(prefix string, i int) string { return fmt.Sprintf("%s-%07d", prefix, i) }

// crashCSV writes a lot file of n lots whose codes start with prefix.
func crashCSV(t *testing.T, dir, prefix string, n int) string {
	t.Helper()
	path := filepath.Join(dir, prefix+".csv")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	w := bufio.NewWriter(f)
	w.WriteString("lot,time,shift,inspected,defective,dent,scratch,inspector,note\n")
	t0 := time.Date(2025, 1, 6, 6, 0, 0, 0, time.UTC)
	for i := range n {
		d := i % 7
		fmt.Fprintf(w, "%s,%s,%s,200,%d,%d,%d,kim,\n", crashCode(prefix, i), t0.Add(time.Duration(i)*time.Minute).Format(time.RFC3339),
			[3]string{"early", "late", "night"}[i%3], d, d/2, d-d/2)
	}
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

func crashServer(t *testing.T, bin, dir string, rounds int, rng *rand.Rand) {
	db := filepath.Join(dir, "serve.db")
	if code, out := lotwatchCmd(t, bin, "", "process", "add", "--db", db, "--name", "weld", "--as", "crash"); code != exitOK {
		t.Fatalf("process add: %d %s", code, out)
	}
	if code, out := lotwatchCmd(t, bin, "crash-test-pass-1\n", "user", "add", "--db", db, "--name", "station", "--role", "inspector", "--as", "crash"); code != exitOK {
		t.Fatalf("user add: %d %s", code, out)
	}
	c := exec.Command(bin, "token", "create", "--db", db, "--user", "station", "--as", "crash")
	tokOut, err := c.Output()
	if err != nil {
		t.Fatalf("token create: %v", err)
	}
	token := strings.TrimSpace(string(tokOut))
	const (
		stations = 8
		perPost  = 3 // lots per request: each request is all or nothing
	)
	acked := map[string]bool{} // first lot code of each acknowledged request
	var posted [][]string      // every request sent, acknowledged or not
	total201 := 0
	for r := 1; r <= rounds; r++ {
		addr := freeAddr(t)
		srv := exec.Command(bin, "serve", "--db", db, "--addr", addr)
		var log bytes.Buffer
		srv.Stdout, srv.Stderr = &log, &log
		if err := srv.Start(); err != nil {
			t.Fatal(err)
		}
		base := "http://" + addr
		waitHealthy(t, base, srv)
		url := base + "/api/v1/processes/1/lots"
		client := &http.Client{Timeout: 10 * time.Second, Transport: &http.Transport{MaxIdleConnsPerHost: stations}}
		var (
			mu   sync.Mutex
			wg   sync.WaitGroup
			stop = make(chan struct{})
		)
		for s := range stations {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for k := 0; ; k++ {
					select {
					case <-stop:
						return
					default:
					}
					codes := make([]string, perPost)
					var body strings.Builder
					body.WriteString("[")
					for j := range codes {
						codes[j] = fmt.Sprintf("S%02d-%d-%05d-%d", r, s, k, j)
						if j > 0 {
							body.WriteString(",")
						}
						fmt.Fprintf(&body, `{"lot":%q,"inspected":200,"defective":%d}`, codes[j], (k+j)%5)
					}
					body.WriteString("]")
					mu.Lock()
					posted = append(posted, codes)
					mu.Unlock()
					req, _ := http.NewRequest("POST", url, strings.NewReader(body.String()))
					req.Header.Set("Authorization", "Bearer "+token)
					req.Header.Set("Content-Type", "application/json")
					res, err := client.Do(req)
					if err != nil {
						return // the server is gone
					}
					io.Copy(io.Discard, res.Body)
					res.Body.Close()
					if res.StatusCode == http.StatusCreated {
						mu.Lock()
						acked[codes[0]] = true
						total201++
						mu.Unlock()
					} else {
						t.Errorf("round %d: status %d for %s", r, res.StatusCode, codes[0])
						return
					}
				}
			}()
		}
		delay := time.Duration(50+rng.IntN(450)) * time.Millisecond
		time.Sleep(delay)
		srv.Process.Kill() // SIGKILL, with requests in flight
		srv.Wait()
		close(stop)
		wg.Wait()
		client.CloseIdleConnections()
		crashCheck(t, bin, db)
		have := storedCodes(t, db)
		mu.Lock()
		for code := range acked {
			if !have[code] {
				t.Fatalf("round %d: lot %s was acknowledged with 201 but is not stored", r, code)
			}
		}
		for _, codes := range posted {
			n := 0
			for _, c := range codes {
				if have[c] {
					n++
				}
			}
			if n != 0 && n != len(codes) {
				t.Fatalf("round %d: %d of the %d lots of one request are stored (partly applied): %v", r, n, len(codes), codes)
			}
		}
		t.Logf("round %d: killed after %v; %d requests acknowledged so far, all stored", r, delay, len(acked))
		mu.Unlock()
	}
	if total201 == 0 {
		t.Fatal("no request was acknowledged: the server rounds tested nothing")
	}
	t.Logf("%d server rounds: %d requests (%d lots) acknowledged and all stored; integrity, audit chain and all-or-none held each time", rounds, total201, total201*perPost)
}

// freeAddr returns a loopback address with a port free at the moment.
func freeAddr(t testing.TB) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	return ln.Addr().String()
}

// waitHealthy polls /healthz until the server answers (at most 20 s).
func waitHealthy(t testing.TB, base string, srv *exec.Cmd) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	for ctx.Err() == nil {
		req, _ := http.NewRequestWithContext(ctx, "GET", base+"/healthz", nil)
		if res, err := http.DefaultClient.Do(req); err == nil {
			res.Body.Close()
			if res.StatusCode == 200 {
				return
			}
		}
		time.Sleep(20 * time.Millisecond)
	}
	srv.Process.Kill()
	t.Fatal("the server did not come up within 20 s")
}

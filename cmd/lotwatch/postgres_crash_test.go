package main

import (
	"fmt"
	"io"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// pgCluster is a PostgreSQL server of a test's own (initdb into a
// temporary folder), so that the test may stop it without disturbing
// anyone else's server.
type pgCluster struct {
	bin, dir, port string
}

func newPGCluster(t *testing.T) *pgCluster {
	t.Helper()
	bins, _ := filepath.Glob("/usr/lib/postgresql/*/bin/initdb")
	if len(bins) == 0 || os.Geteuid() != 0 {
		t.Skip("needs root and Debian's PostgreSQL server (initdb) to run a cluster of its own")
	}
	dir, err := os.MkdirTemp("/tmp", "lotwatch-pgcrash")
	if err != nil {
		t.Fatal(err)
	}
	c := &pgCluster{bin: filepath.Dir(bins[len(bins)-1]), dir: dir, port: strings.TrimPrefix(freeAddr(t), "127.0.0.1:")}
	if out, err := exec.Command("chown", "postgres", dir).CombinedOutput(); err != nil {
		t.Fatalf("chown: %v %s", err, out)
	}
	c.run(t, "initdb -D "+dir+"/data -A trust -U postgres")
	c.start(t)
	t.Cleanup(func() {
		c.ctl("stop -m immediate")
		os.RemoveAll(dir)
	})
	return c
}

func (c *pgCluster) ctl(args string) ([]byte, error) {
	return exec.Command("su", "postgres", "-c", c.bin+"/pg_ctl -D "+c.dir+"/data -l "+c.dir+"/log -w "+args).CombinedOutput()
}

func (c *pgCluster) run(t *testing.T, cmd string) {
	t.Helper()
	if out, err := exec.Command("su", "postgres", "-c", c.bin+"/"+cmd).CombinedOutput(); err != nil {
		t.Fatalf("%s: %v\n%s", cmd, err, out)
	}
}

func (c *pgCluster) start(t *testing.T) {
	t.Helper()
	if out, err := c.ctl(fmt.Sprintf(`-o "-p %s -k %s -c listen_addresses=127.0.0.1" start`, c.port, c.dir)); err != nil {
		t.Fatalf("pg_ctl start: %v\n%s", err, out)
	}
}

func (c *pgCluster) url() string { return "postgres://postgres@127.0.0.1:" + c.port + "/postgres" }

// TestPostgresCrash: two servers on one PostgreSQL database while four
// stations post lots. One server is killed (SIGKILL) and started again;
// then PostgreSQL itself stops at once (pg_ctl stop -m immediate, as a
// power cut of the database host) and comes back. Every lot answered 201
// must be stored; while the database is away the servers answer 503,
// never 500; they take lots again by themselves once it is back; the
// audit trail holds. (Issue 17's crash evidence; the reference is the
// acknowledgement itself.)
func TestPostgresCrash(t *testing.T) {
	bin := buildLotwatch(t)
	pg := newPGCluster(t)
	db := pg.url()
	token := stationToken(t, bin, db, "crash-test-pass\n", [][]string{
		{"process", "add", "--db", db, "--name", "weld", "--as", "t"},
		{"user", "add", "--db", db, "--name", "station", "--role", "inspector", "--as", "t"},
	})
	addrs := []string{freeAddr(t), freeAddr(t)}
	srvs := make([]*exec.Cmd, 2)
	logs := make([]*strings.Builder, 2)
	startServer := func(i int) {
		srv := exec.Command(bin, "serve", "--db", db, "--addr", addrs[i])
		logs[i] = &strings.Builder{}
		srv.Stdout, srv.Stderr = logs[i], logs[i]
		if err := srv.Start(); err != nil {
			t.Fatal(err)
		}
		waitHealthy(t, "http://"+addrs[i], srv)
		srvs[i] = srv
	}
	startServer(0)
	startServer(1)
	defer func() {
		for _, s := range srvs {
			s.Process.Kill()
		}
	}()

	var (
		mu       sync.Mutex
		acked    []string
		statuses = map[int]int{}
		wg       sync.WaitGroup
		stop     = make(chan struct{})
	)
	client := &http.Client{Timeout: 30 * time.Second}
	for s := range 4 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := 0; ; k++ {
				select {
				case <-stop:
					return
				default:
				}
				code := fmt.Sprintf("S%d-%05d", s, k)
				body := fmt.Sprintf(`{"lot":%q,"inspected":50,"defective":1}`, code)
				req, _ := http.NewRequest("POST", "http://"+addrs[(s+k)%2]+"/api/v1/processes/1/lots", strings.NewReader(body))
				req.Header.Set("Authorization", "Bearer "+token)
				req.Header.Set("Content-Type", "application/json")
				res, err := client.Do(req)
				if err != nil { // the server is down: no answer, nothing acknowledged
					time.Sleep(10 * time.Millisecond)
					continue
				}
				io.Copy(io.Discard, res.Body)
				res.Body.Close()
				mu.Lock()
				statuses[res.StatusCode]++
				if res.StatusCode == http.StatusCreated {
					acked = append(acked, code)
				}
				mu.Unlock()
				if res.StatusCode != http.StatusCreated {
					time.Sleep(10 * time.Millisecond)
				}
			}
		}()
	}
	// waitAcked waits (bounded) until n more lots are acknowledged.
	waitAcked := func(what string, n int) {
		t.Helper()
		mu.Lock()
		want := len(acked) + n
		mu.Unlock()
		deadline := time.Now().Add(60 * time.Second)
		for time.Now().Before(deadline) {
			mu.Lock()
			got := len(acked)
			mu.Unlock()
			if got >= want {
				return
			}
			time.Sleep(20 * time.Millisecond)
		}
		close(stop)
		t.Fatalf("%s: fewer than %d lots acknowledged within 60 s; statuses %v\nserver logs:\n%s\n%s", what, n, statuses, logs[0], logs[1])
	}
	waitAcked("start", 50)
	srvs[0].Process.Signal(syscall.SIGKILL)
	srvs[0].Wait()
	waitAcked("with one server killed", 30)
	startServer(0)
	waitAcked("after the restart of the killed server", 30)

	if out, err := pg.ctl("stop -m immediate"); err != nil {
		t.Fatalf("pg_ctl stop: %v\n%s", err, out)
	}
	mu.Lock()
	before := statuses[http.StatusServiceUnavailable]
	mu.Unlock()
	for deadline := time.Now().Add(30 * time.Second); time.Now().Before(deadline); time.Sleep(20 * time.Millisecond) {
		mu.Lock()
		n := statuses[http.StatusServiceUnavailable]
		mu.Unlock()
		if n >= before+20 {
			break
		}
	}
	pg.start(t)
	waitAcked("after PostgreSQL came back", 50)
	close(stop)
	wg.Wait()
	for _, s := range srvs {
		s.Process.Signal(syscall.SIGTERM)
		s.Wait()
	}

	if statuses[http.StatusServiceUnavailable] <= before {
		t.Errorf("no 503 while PostgreSQL was stopped: statuses %v", statuses)
	}
	for code, n := range statuses {
		if code != http.StatusCreated && code != http.StatusServiceUnavailable {
			t.Errorf("%d answers %d (want only 201 and, while the database is away, 503)", n, code)
		}
	}
	code, out := lotwatchCmd(t, bin, "", "export", "--db", db, "--process", "weld")
	if code != exitOK {
		t.Fatalf("export: %d %s", code, out)
	}
	stored := map[string]bool{}
	for _, line := range strings.Split(out, "\n")[1:] {
		if c, _, ok := strings.Cut(line, ","); ok {
			stored[c] = true
		}
	}
	lost := 0
	for _, c := range acked {
		if !stored[c] {
			lost++
			t.Errorf("lot %s was acknowledged but is not stored", c)
		}
	}
	if code, out := lotwatchCmd(t, bin, "", "audit", "verify", "--db", db); code != exitOK {
		t.Errorf("audit verify after the crashes: exit %d\n%s", code, out)
	}
	t.Logf("%d lots acknowledged, %d lost, %d stored; answers %v", len(acked), lost, len(stored), statuses)
}

package main

import (
	"fmt"
	"lotwatch/store/storetest"
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

// TestRestoreRefusedWhileServing runs the real binary: `lotwatch serve`
// on live.db while a station posts lots; `lotwatch restore` of an
// earlier backup over live.db must be refused with a message that says
// the file is open, replace nothing, and every lot acknowledged with 201
// (before and after the attempt) must be in live.db once the server has
// stopped. A command-line import meanwhile is not blocked by the server.
// (The probe of issue 12 found the restore going through, and lots
// answered 201 afterwards stored in neither file.)
func TestRestoreRefusedWhileServing(t *testing.T) {
	storetest.SQLiteOnly(t, "the lock on the SQLite file a server holds; a restore refused while servers use PostgreSQL is in TestTwoServersOnePostgres")
	if testing.Short() {
		t.Skip("builds the binary; skipped with -short")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "lotwatch")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	db := filepath.Join(dir, "live.db")
	token := stationToken(t, bin, db, "restore-test-pass\n", [][]string{
		{"process", "add", "--db", db, "--name", "weld", "--as", "t"},
		{"user", "add", "--db", db, "--name", "station", "--role", "inspector", "--as", "t"},
		{"backup", "--db", db, "--to", filepath.Join(dir, "good.db")},
	})

	addr := freeAddr(t)
	srv := exec.Command(bin, "serve", "--db", db, "--addr", addr)
	var log strings.Builder
	srv.Stdout, srv.Stderr = &log, &log
	if err := srv.Start(); err != nil {
		t.Fatal(err)
	}
	defer srv.Process.Kill()
	base := "http://" + addr
	waitHealthy(t, base, srv)

	var (
		mu    sync.Mutex
		acked []string
		wg    sync.WaitGroup
		stop  = make(chan struct{})
	)
	post := func(code string) {
		body := fmt.Sprintf(`{"lot":%q,"inspected":50,"defective":1}`, code)
		if err := tryPost(http.DefaultClient, base+"/api/v1/processes/1/lots", token, body); err != nil {
			t.Error(err)
			return
		}
		mu.Lock()
		acked = append(acked, code)
		mu.Unlock()
	}
	for s := range 2 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := 0; ; k++ {
				select {
				case <-stop:
					return
				default:
				}
				post(fmt.Sprintf("S%d-%04d", s, k))
			}
		}()
	}
	for {
		mu.Lock()
		n := len(acked)
		mu.Unlock()
		if n >= 20 {
			break
		}
		time.Sleep(5 * time.Millisecond)
	}
	code, out := lotwatchCmd(t, bin, "", "restore", "--db", db, "--from", filepath.Join(dir, "good.db"))
	if code == exitOK || !strings.Contains(out, "open in another program") || !strings.Contains(out, "nothing was replaced") {
		t.Errorf("restore while serving: exit %d\n%s\nwant it refused, saying the database is open", code, out)
	}
	csv := writeFile(t, dir, "more.csv", "lot,inspected,defective\nCLI-1,40,0\n")
	if code, out := lotwatchCmd(t, bin, "", "import", "--db", db, "--process", "weld", "--as", "t", csv); code != exitOK {
		t.Errorf("import while serving: exit %d\n%s", code, out)
	}
	for i := range 20 {
		post(fmt.Sprintf("AFTER-%02d", i))
	}
	close(stop)
	wg.Wait()
	srv.Process.Signal(syscall.SIGTERM)
	if err := srv.Wait(); err != nil {
		t.Fatalf("serve: %v\n%s", err, log.String())
	}
	have := storedCodes(t, db)
	for _, c := range append(acked, "CLI-1") {
		if !have[c] {
			t.Errorf("lot %s was acknowledged but is not in %s", c, db)
		}
	}
	ents, _ := os.ReadDir(dir)
	for _, e := range ents {
		if strings.Contains(e.Name(), "before-restore") || strings.Contains(e.Name(), "restore-part") {
			t.Errorf("the refused restore left %s", e.Name())
		}
	}
	t.Logf("%d lots acknowledged, all stored; restore said: %s", len(acked), strings.TrimSpace(out))
	// Stopped, the restore goes through.
	if code, out := lotwatchCmd(t, bin, "", "restore", "--db", db, "--from", filepath.Join(dir, "good.db")); code != exitOK {
		t.Errorf("restore after the server stopped: exit %d\n%s", code, out)
	}
}

package main

import (
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"database/sql"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"io"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
	"lotwatch/web/alert"
)

// alertCrashRounds is the number of kill -9 rounds of
// TestAlertCrashRecovery: 3 by default, LOTWATCH_ALERT_CRASH_ROUNDS for
// more (100 in the long mode of .ci/bench).
func alertCrashRounds(t *testing.T) int {
	if s := os.Getenv("LOTWATCH_ALERT_CRASH_ROUNDS"); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n < 1 {
			t.Fatalf("LOTWATCH_ALERT_CRASH_ROUNDS=%q: want a whole number of at least 1", s)
		}
		return n
	}
	return 3
}

// hookSink is a webhook receiver that checks each request as the
// Standard Webhooks specification says (its own code: HMAC-SHA256 over
// "id.timestamp.body" keyed with the base64-decoded rest of the whsec_
// secret, "v1," signatures separated by spaces, a timestamp within 5
// minutes) and counts the webhook-ids of the valid ones.
type hookSink struct {
	key  []byte
	mu   sync.Mutex
	ids  map[string]int
	bad  []string
	seen int
	// batch is the first lots.signal message (an import's); batchIDs
	// the ids such messages came under.
	batch    *alert.BatchMessage
	batchIDs map[string]bool
}

func (h *hookSink) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	body, _ := io.ReadAll(r.Body)
	id, ts, sig := r.Header.Get("webhook-id"), r.Header.Get("webhook-timestamp"), r.Header.Get("webhook-signature")
	mac := hmac.New(sha256.New, h.key)
	mac.Write([]byte(id + "." + ts + "."))
	mac.Write(body)
	want := "v1," + base64.StdEncoding.EncodeToString(mac.Sum(nil))
	ok := false
	for _, s := range strings.Fields(sig) {
		ok = ok || hmac.Equal([]byte(s), []byte(want))
	}
	sec, err := strconv.ParseInt(ts, 10, 64)
	if err != nil || time.Since(time.Unix(sec, 0)).Abs() > 5*time.Minute {
		ok = false
	}
	h.mu.Lock()
	defer h.mu.Unlock()
	h.seen++
	if !ok {
		h.bad = append(h.bad, id)
		w.WriteHeader(http.StatusUnauthorized)
		return
	}
	h.ids[id]++
	if strings.HasPrefix(id, "msg_batch") {
		var m alert.BatchMessage
		if err := json.Unmarshal(body, &m); err == nil && h.batch == nil {
			h.batch = &m
		}
		if h.batchIDs == nil {
			h.batchIDs = map[string]bool{}
		}
		h.batchIDs[id] = true
	}
	w.WriteHeader(http.StatusNoContent)
}

// imported returns the import's message and the number of ids such
// messages came under.
func (h *hookSink) imported() (*alert.BatchMessage, int) {
	h.mu.Lock()
	defer h.mu.Unlock()
	return h.batch, len(h.batchIDs)
}

func (h *hookSink) received() map[string]int {
	h.mu.Lock()
	defer h.mu.Unlock()
	out := make(map[string]int, len(h.ids))
	for k, v := range h.ids {
		out[k] = v
	}
	return out
}

// TestAlertCrashRecovery kills the real server with SIGKILL at random
// points (fixed seed) while stations post lots, a third of them far out of
// limits, and an alert rule sends them to a webhook. After each kill the
// database must pass the integrity check and `audit verify`; after the
// last round the server is started once more and every acknowledged
// out-of-limit lot's alert must arrive (its webhook-id counted once
// however often it was sent), and no alert may arrive for a lot that is
// not stored out of limits. A file of 2,000 lots, 5 of them out of
// limits, imported while no server runs, must arrive as one message
// naming the 5. Limits are frozen (p = 0.02, n = 200: UCL ≈
// 0.050) so that a lot's verdict does not depend on the others.
func TestAlertCrashRecovery(t *testing.T) {
	storetest.SQLiteOnly(t, "checks the killed server's SQLite file and reads it directly")
	if testing.Short() {
		t.Skip("builds and kills the server: not in -short")
	}
	rounds := alertCrashRounds(t)
	dir := t.TempDir()
	bin := filepath.Join(dir, "lotwatch")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	secretKey := []byte("crash-test key of 32 bytes......")
	sink := &hookSink{key: secretKey, ids: map[string]int{}}
	hooks := httptest.NewServer(sink)
	defer hooks.Close()
	db := filepath.Join(dir, "alerts.db")
	token := alertCrashSetup(t, db, hooks.URL, "whsec_"+base64.StdEncoding.EncodeToString(secretKey))

	rng := rand.New(rand.NewPCG(20261202, 16))
	addr := freeAddr(t) // the same address every round: the restarted server takes back its claims
	acked := map[string]bool{}
	for r := 1; r <= rounds; r++ {
		srv, base := startServe(t, bin, db, addr)
		n := postUntilKilled(t, base, token, srv, time.Duration(200+rng.IntN(1300))*time.Millisecond, fmt.Sprintf("R%03d", r), acked)
		crashCheck(t, bin, db)
		t.Logf("round %d: %d lots acknowledged before the kill", r, n)
	}
	// A file imported while no server runs: one message for it, naming
	// its out-of-limit lots, once a server runs again.
	file := filepath.Join(dir, "import.csv")
	var csv strings.Builder
	csv.WriteString("lot,inspected,defective\n")
	for i := range 2000 {
		d := i % 5
		if i%400 == 7 {
			d = 40
		}
		fmt.Fprintf(&csv, "IMP-%04d,200,%d\n", i, d)
	}
	if err := os.WriteFile(file, []byte(csv.String()), 0o600); err != nil {
		t.Fatal(err)
	}
	if out, err := exec.Command(bin, "import", "--db", db, "--process", "weld", "--as", "crash", file).CombinedOutput(); err != nil {
		t.Fatalf("import: %v\n%s", err, out)
	}
	// Once more, to the end: every acknowledged out-of-limit lot's alert.
	srv, _ := startServe(t, bin, db, addr)
	defer func() {
		srv.Process.Signal(syscall.SIGTERM)
		srv.Wait()
	}()
	stored := storedLots(t, db)
	want := map[string]string{} // webhook-id → lot code
	for code := range acked {
		if strings.Contains(code, "-HOT-") {
			want[fmt.Sprintf("msg_lot%d_rule1_signal", stored[code])] = code
		}
	}
	if len(want) == 0 {
		t.Fatal("no out-of-limit lot was acknowledged: the rounds tested nothing")
	}
	deadline := time.Now().Add(2 * time.Minute)
	for {
		got := sink.received()
		missing := 0
		for id := range want {
			if got[id] == 0 {
				missing++
			}
		}
		if b, _ := sink.imported(); b == nil {
			missing++
		}
		if missing == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d of %d acknowledged out-of-limit lots' alerts did not arrive", missing, len(want))
		}
		time.Sleep(100 * time.Millisecond)
	}
	byID := map[int64]string{}
	for code, id := range stored {
		byID[id] = code
	}
	got := sink.received()
	repeats := 0
	if b, ids := sink.imported(); ids != 1 || b.Data.Judged != 2000 || b.Data.Signalling != 5 || len(b.Data.Lots) != 5 || b.Data.Lots[0].Lot != "IMP-0007" {
		t.Errorf("the import's message, under %d ids: %d judged, %d signalling, lots %+v; want one id, 2000, 5, IMP-0007 first",
			ids, b.Data.Judged, b.Data.Signalling, b.Data.Lots)
	}
	for id, n := range got {
		var lot, rule int64
		if strings.HasPrefix(id, "msg_batch") {
			repeats += n - 1
			continue
		}
		if _, err := fmt.Sscanf(id, "msg_lot%d_rule%d_signal", &lot, &rule); err != nil || rule != 1 {
			t.Errorf("an alert with an id lotwatch does not make: %q", id)
			continue
		}
		if code := byID[lot]; !strings.Contains(code, "-HOT-") {
			t.Errorf("alert %s is about lot %d (%q), which is not stored out of limits", id, lot, code)
		}
		repeats += n - 1
	}
	if len(sink.bad) > 0 {
		t.Errorf("%d requests failed the signature check, e.g. %s", len(sink.bad), sink.bad[0])
	}
	t.Logf("%d kill -9 rounds: %d acknowledged out-of-limit lots, %d alerts arrived (%d unique ids, %d repeats under the same id), none missing, none invented; the imported file's one message named its 5 out-of-limit lots",
		rounds, len(want), sink.seen, len(got), repeats)
}

// alertCrashSetup makes the database: a p-chart process with frozen
// limits and no run rules, a station's token and a webhook rule.
func alertCrashSetup(t *testing.T, path, hookURL, secret string) string {
	ctx := context.Background()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	p, err := db.AddProcess(ctx, "crash", store.Process{Name: "weld", Chart: spc.ChartP, Method: spc.MethodSigma, K: 3, Rules: "none", TimeZone: "UTC", Active: true})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.FreezeLimitSet(ctx, "crash", store.LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.02,
		EffectiveFrom: time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC), Reason: "limits of the crash test"}); err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddUser(ctx, "crash", "station", store.RoleInspector, "crash-test-pass-1"); err != nil {
		t.Fatal(err)
	}
	tok, _, err := db.CreateToken(ctx, "crash", "station", "crash test")
	if err != nil {
		t.Fatal(err)
	}
	if r, err := db.AddAlertRule(ctx, "crash", store.AlertRule{ProcessID: p.ID, Webhook: hookURL, Secret: secret, On: []string{store.TriggerOutOfLimits}}); err != nil || r.ID != 1 {
		t.Fatalf("alert rule %d: %v", r.ID, err)
	}
	return tok
}

func startServe(t *testing.T, bin, db, addr string) (*exec.Cmd, string) {
	t.Helper()
	srv := exec.Command(bin, "serve", "--db", db, "--addr", addr, "--public-url", "https://lotwatch.crash.test")
	srv.Stdout, srv.Stderr = io.Discard, io.Discard
	if err := srv.Start(); err != nil {
		t.Fatal(err)
	}
	base := "http://" + addr
	waitHealthy(t, base, srv)
	return srv, base
}

// postUntilKilled has 4 stations post single lots (every third far out
// of limits) until the server is killed after delay; it notes the
// acknowledged lot codes.
func postUntilKilled(t *testing.T, base, token string, srv *exec.Cmd, delay time.Duration, prefix string, acked map[string]bool) int {
	url := base + "/api/v1/processes/1/lots"
	client := &http.Client{Timeout: 10 * time.Second}
	var mu sync.Mutex
	var wg sync.WaitGroup
	stop := make(chan struct{})
	n := 0
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
				code, d := fmt.Sprintf("%s-S%d-OK-%05d", prefix, s, k), k%10
				if k%3 == 0 {
					code, d = fmt.Sprintf("%s-S%d-HOT-%05d", prefix, s, k), 30+k%20 // 0.15 and more: far above the UCL
				}
				req, _ := http.NewRequest("POST", url, strings.NewReader(fmt.Sprintf(`{"lot":%q,"inspected":200,"defective":%d}`, code, d)))
				req.Header.Set("Authorization", "Bearer "+token)
				req.Header.Set("Content-Type", "application/json")
				resp, err := client.Do(req)
				if err != nil {
					return // the server is gone
				}
				io.Copy(io.Discard, resp.Body)
				resp.Body.Close()
				if resp.StatusCode == http.StatusCreated {
					mu.Lock()
					acked[code] = true
					n++
					mu.Unlock()
				}
			}
		}()
	}
	time.Sleep(delay)
	srv.Process.Kill() // SIGKILL
	srv.Wait()
	close(stop)
	wg.Wait()
	return n
}

// storedLots maps the stored lot codes to their ids.
func storedLots(t *testing.T, db string) map[string]int64 {
	t.Helper()
	raw, err := sql.Open("sqlite3", "file:"+db+"?mode=ro")
	if err != nil {
		t.Fatal(err)
	}
	defer raw.Close()
	rows, err := raw.Query("SELECT lot, id FROM lots")
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	out := map[string]int64{}
	for rows.Next() {
		var code string
		var id int64
		if err := rows.Scan(&code, &id); err != nil {
			t.Fatal(err)
		}
		out[code] = id
	}
	return out
}

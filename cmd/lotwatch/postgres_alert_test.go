package main

import (
	"bytes"
	"context"
	"database/sql"
	"encoding/base64"
	"fmt"
	"hash/fnv"
	"io"
	"net/http"
	"net/http/httptest"
	"os/exec"
	"sort"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"lotwatch/store/storetest"
)

// TestAlertsOnceAcrossServers runs two `lotwatch serve` on one PostgreSQL
// database with a webhook rule whose receiver is unreliable: the first
// attempt of some messages is answered 500, of others never answered
// until the sender gives up, and some answers are slow. First, lots
// posted through both servers, a third of them far out of limits: every
// out-of-limit lot's alert must arrive, each webhook-id answered 2xx
// exactly once (a retry after a failed attempt is the same id again,
// and is fine). Then the receiver holds the requests at its door, lots
// are posted through both until a server holds claimed deliveries, and
// that server is killed (SIGKILL) while none of its answered messages is
// left unlogged. Its claimed rows must be delivered by the other server,
// not before their lease ends, and still each id is sent once (see
// sentOnce).
// Limits are frozen (p = 0.02, n = 200: UCL ≈ 0.050), so that a lot's
// verdict does not depend on the others.
func TestAlertsOnceAcrossServers(t *testing.T) {
	pg := storetest.PostgresDatabase(t)
	bin := buildLotwatch(t)
	key := []byte("two-servers key of 32 bytes.....")
	sink := newFlakySink(key)
	hooks := httptest.NewServer(sink)
	defer hooks.Close()
	token := alertCrashSetup(t, pg, hooks.URL, "whsec_"+base64.StdEncoding.EncodeToString(key))
	raw, err := sql.Open("pgx", pg)
	if err != nil {
		t.Fatal(err)
	}
	defer raw.Close()

	addrs := []string{freeAddr(t), freeAddr(t)}
	var srvs []*exec.Cmd
	var bases []string
	for i, a := range addrs {
		srv := exec.Command(bin, "serve", "--db", pg, "--addr", a, "--public-url", "https://lotwatch.two.test")
		log := &syncBuffer{}
		srv.Stdout, srv.Stderr = log, log
		if err := srv.Start(); err != nil {
			t.Fatal(err)
		}
		defer func() {
			srv.Process.Signal(syscall.SIGTERM)
			srv.Wait()
			if t.Failed() {
				t.Logf("server %d's log:\n%s", i+1, log.String())
			}
		}()
		waitHealthy(t, "http://"+a, srv)
		srvs, bases = append(srvs, srv), append(bases, "http://"+a)
	}

	// Through both servers, with retries.
	acked := postLots(t, bases, token, "A", 240)
	want := hotAlerts(t, raw, acked)
	waitDelivered(t, sink, want, time.Minute)
	onceEach(t, sink.sink.received(), want)
	t.Logf("through both servers: %d lots, %d alerts, each answered 2xx once; %s", len(acked), len(want), sink.stats())

	// A server killed while it holds claims: whichever claimed first (both
	// judge and deliver from the one outbox).
	sink.hold()
	victim := -1
	for k := 0; victim < 0; k++ {
		if k == 20 {
			t.Fatal("no server claimed a delivery: nothing to take over")
		}
		for code := range postLots(t, bases, token, fmt.Sprintf("B%02d", k), 12) {
			acked[code] = true
		}
		for i, a := range addrs {
			if countRows(t, raw, "SELECT COUNT(*) FROM alert_deliveries WHERE state = 'pending' AND lease_owner = $1", "serve "+a) > 0 {
				victim = i
				break
			}
		}
	}
	waitLogged(t, sink, raw)
	srvs[victim].Process.Kill()
	srvs[victim].Wait()
	held := claimsOf(t, raw, "serve "+addrs[victim])
	heldEvents := countRows(t, raw, "SELECT COUNT(*) FROM alert_events WHERE done = 0 AND lease_owner = $1", "serve "+addrs[victim])
	sink.release()
	if len(held) == 0 {
		t.Fatal("the killed server held no claimed delivery")
	}
	want = hotAlerts(t, raw, acked)
	waitDelivered(t, sink, want, 2*time.Minute)
	waitLogged(t, sink, raw)
	waitJudged(t, raw, time.Minute) // lots claimed by the killed server whose events raise no alert
	got := sink.sink.received()
	sentOnce(t, raw, got, want)
	sent := sentAt(t, raw)
	for id, until := range held {
		if at, ok := sent[id]; !ok || at < until {
			t.Errorf("%s, claimed by the killed server until %d, sent at %d (0: never): taken before its lease ended", id, until, at)
		}
	}
	if n := countRows(t, raw, "SELECT COUNT(*) FROM alert_deliveries WHERE state <> 'sent'"); n != 0 {
		t.Errorf("%d deliveries not sent", n)
	}
	sink.sink.mu.Lock()
	if len(sink.sink.bad) > 0 {
		t.Errorf("%d requests failed the signature check, e.g. %s", len(sink.sink.bad), sink.sink.bad[0])
	}
	sink.sink.mu.Unlock()
	t.Logf("after the kill: %d lots, %d alerts, each logged sent once and never sent again after a 2xx it received; the killed server's %d claimed deliveries (and %d lots claimed for judging) done by the other after their lease; %s",
		len(acked), len(want), len(held), heldEvents, sink.stats())
}

// postLots has 4 stations post n lots between them, in turn to each of
// bases, every third far out of limits; it returns the acknowledged
// codes.
func postLots(t *testing.T, bases []string, token, prefix string, n int) map[string]bool {
	t.Helper()
	client := &http.Client{Timeout: 30 * time.Second}
	acked := map[string]bool{}
	var mu sync.Mutex
	var wg sync.WaitGroup
	for s := range 4 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := s; k < n; k += 4 {
				code, d := fmt.Sprintf("%s-OK-%04d", prefix, k), k%10
				if k%3 == 0 {
					code, d = fmt.Sprintf("%s-HOT-%04d", prefix, k), 30+k%20 // 0.15 and more: far above the UCL
				}
				body := fmt.Sprintf(`{"lot":%q,"inspected":200,"defective":%d}`, code, d)
				if err := tryPost(client, bases[k%len(bases)]+"/api/v1/processes/1/lots", token, body); err != nil {
					t.Error(err)
					continue
				}
				mu.Lock()
				acked[code] = true
				mu.Unlock()
			}
		}()
	}
	wg.Wait()
	if len(acked) != n {
		t.Fatalf("%d of %d lots acknowledged", len(acked), n)
	}
	return acked
}

// hotAlerts maps the webhook-ids of the acknowledged out-of-limit lots'
// alerts to the lots' codes; any other stored lot is not to alert.
func hotAlerts(t *testing.T, raw *sql.DB, acked map[string]bool) map[string]string {
	t.Helper()
	rows, err := raw.Query("SELECT lot, id FROM lots")
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	want := map[string]string{}
	for rows.Next() {
		var code string
		var id int64
		if err := rows.Scan(&code, &id); err != nil {
			t.Fatal(err)
		}
		if acked[code] && strings.Contains(code, "-HOT-") {
			want[fmt.Sprintf("msg_lot%d_rule1_signal", id)] = code
		}
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	return want
}

// waitDelivered waits until every alert of want was answered 2xx.
func waitDelivered(t *testing.T, sink *flakySink, want map[string]string, within time.Duration) {
	t.Helper()
	deadline := time.Now().Add(within)
	for {
		got := sink.sink.received()
		var missing []string
		for id, code := range want {
			if got[id] == 0 {
				missing = append(missing, id+" ("+code+")")
			}
		}
		if len(missing) == 0 {
			return
		}
		if time.Now().After(deadline) {
			sort.Strings(missing)
			t.Fatalf("%d of %d alerts not delivered within %s, e.g. %s; %s", len(missing), len(want), within, missing[0], sink.stats())
		}
		time.Sleep(100 * time.Millisecond)
	}
}

// onceEach checks that each id was answered 2xx exactly once, and only
// the ids of want.
func onceEach(t *testing.T, got map[string]int, want map[string]string) {
	t.Helper()
	for id, n := range got {
		switch {
		case want[id] == "":
			t.Errorf("alert %s answered 2xx: not an acknowledged out-of-limit lot's", id)
		case n != 1:
			t.Errorf("alert %s (%s) answered 2xx %d times, want once", id, want[id], n)
		}
	}
}

// sentOnce is onceEach after the receiver's door was held: a request
// that waited there until its sender gave up may be let in and answered
// 2xx just as the sender's timeout ends. The sender, seeing no answer,
// tries again, as it must (Standard Webhooks: the receiver drops an id it
// has had). So each id must be logged sent exactly once, and answered 2xx
// at most once more than the sender logged failed attempts of it: never
// sent again after a 2xx the sender received.
func sentOnce(t *testing.T, raw *sql.DB, got map[string]int, want map[string]string) {
	t.Helper()
	rows, err := raw.Query(`SELECT d.msg_id, SUM(CASE WHEN a.error = '' THEN 1 ELSE 0 END), SUM(CASE WHEN a.error <> '' THEN 1 ELSE 0 END)
		FROM alert_deliveries d JOIN alert_attempts a ON a.delivery_id = d.id GROUP BY d.msg_id`)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	sent, failed := map[string]int{}, map[string]int{}
	for rows.Next() {
		var id string
		var s, f int
		if err := rows.Scan(&id, &s, &f); err != nil {
			t.Fatal(err)
		}
		sent[id], failed[id] = s, f
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	for id, n := range got {
		switch {
		case want[id] == "":
			t.Errorf("alert %s answered 2xx: not an acknowledged out-of-limit lot's", id)
		case sent[id] != 1:
			t.Errorf("alert %s (%s) logged sent %d times, want once", id, want[id], sent[id])
		case n > 1+failed[id]:
			t.Errorf("alert %s (%s) answered 2xx %d times, with %d failed attempts logged: sent again after a 2xx its sender received", id, want[id], n, failed[id])
		case n > 1:
			t.Logf("alert %s answered 2xx %d times: %d attempts timed out at the held door as it opened", id, n, n-1)
		}
	}
}

// waitLogged waits until every message the receiver answered 2xx is
// logged sent: then no answer is lost with a killed sender, and a
// message sent twice would be the servers' doing.
func waitLogged(t *testing.T, sink *flakySink, raw *sql.DB) {
	t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for {
		sent := sentAt(t, raw)
		unlogged := 0
		for id := range sink.sink.received() {
			if _, ok := sent[id]; !ok {
				unlogged++
			}
		}
		if unlogged == 0 {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d messages answered 2xx are not logged sent after 30 s", unlogged)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// waitJudged waits until no lot waits to be judged.
func waitJudged(t *testing.T, raw *sql.DB, within time.Duration) {
	t.Helper()
	deadline := time.Now().Add(within)
	for {
		n := countRows(t, raw, "SELECT COUNT(*) FROM alert_events WHERE done = 0")
		if n == 0 {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d lots not judged within %s", n, within)
		}
		time.Sleep(100 * time.Millisecond)
	}
}

// claimsOf maps the webhook-ids of the pending deliveries owner holds to
// the end of its lease (Unix nanoseconds).
func claimsOf(t *testing.T, raw *sql.DB, owner string) map[string]int64 {
	return idTimes(t, raw, "SELECT msg_id, lease_until FROM alert_deliveries WHERE state = 'pending' AND lease_owner = $1", owner)
}

// sentAt maps the webhook-ids of the deliveries logged sent to the start
// of their successful attempt (Unix nanoseconds).
func sentAt(t *testing.T, raw *sql.DB) map[string]int64 {
	return idTimes(t, raw, `SELECT d.msg_id, a.at FROM alert_deliveries d JOIN alert_attempts a ON a.delivery_id = d.id
		WHERE d.state = 'sent' AND a.error = ''`)
}

// idTimes maps the webhook-id of each row of q to its time.
func idTimes(t *testing.T, raw *sql.DB, q string, args ...any) map[string]int64 {
	t.Helper()
	rows, err := raw.Query(q, args...)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	out := map[string]int64{}
	for rows.Next() {
		var id string
		var at int64
		if err := rows.Scan(&id, &at); err != nil {
			t.Fatal(err)
		}
		out[id] = at
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	return out
}

func countRows(t *testing.T, raw *sql.DB, q string, args ...any) int {
	t.Helper()
	var n int
	if err := raw.QueryRow(q, args...).Scan(&n); err != nil {
		t.Fatal(err)
	}
	return n
}

// flakySink is an unreliable webhook receiver in front of a hookSink
// (which checks the signature and counts the ids answered 2xx). By a hash
// of the webhook-id, the first attempt of a quarter of the messages is
// answered 500, that of one in eleven is not answered until the sender
// gives up, and one in five answers is slow (up to a second, within the
// sender's timeout). Its door can be held shut: requests then wait, and
// one whose sender went away meanwhile is not answered.
type flakySink struct {
	sink *hookSink

	mu        sync.Mutex
	tries     map[string]int
	door      chan struct{} // nil: open; closed when opened again
	answering int           // requests past the door, not yet answered
	failed    int           // answered 500
	abandoned int           // not answered: the sender gave up or was killed
}

func newFlakySink(key []byte) *flakySink {
	return &flakySink{sink: &hookSink{key: key, ids: map[string]int{}}, tries: map[string]int{}}
}

func (f *flakySink) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	// Reading the whole body first lets the server notice a sender that
	// goes away (r.Context ends).
	body, err := io.ReadAll(r.Body)
	if err != nil {
		return
	}
	r.Body = io.NopCloser(bytes.NewReader(body))
	id := r.Header.Get("webhook-id")
	h := fnv.New32a()
	h.Write([]byte(id))
	sum := h.Sum32()
	f.mu.Lock()
	f.tries[id]++
	first := f.tries[id] == 1
	f.mu.Unlock()
	switch {
	case first && sum%11 == 3:
		<-r.Context().Done()
		f.count(&f.abandoned)
		return
	case sum%5 == 1:
		select {
		case <-time.After(time.Duration(100+sum%900) * time.Millisecond):
		case <-r.Context().Done():
		}
	}
	if !f.admit(r.Context()) {
		f.count(&f.abandoned)
		return
	}
	defer f.count(&f.answering, -1)
	if first && sum%4 == 0 {
		f.count(&f.failed)
		http.Error(w, "receiver busy", http.StatusInternalServerError)
		return
	}
	f.sink.ServeHTTP(w, r)
}

// count adds d (default 1) to n under the lock.
func (f *flakySink) count(n *int, d ...int) {
	f.mu.Lock()
	defer f.mu.Unlock()
	if len(d) > 0 {
		*n += d[0]
		return
	}
	*n++
}

// admit lets a request through the door, waiting while it is shut; false
// when its sender went away first.
func (f *flakySink) admit(ctx context.Context) bool {
	for {
		f.mu.Lock()
		door := f.door
		if door == nil && ctx.Err() == nil {
			f.answering++
			f.mu.Unlock()
			return true
		}
		f.mu.Unlock()
		if door == nil {
			return false
		}
		select {
		case <-door:
		case <-ctx.Done():
			return false
		}
	}
}

// hold shuts the door and waits for the requests past it to be answered.
func (f *flakySink) hold() {
	f.mu.Lock()
	f.door = make(chan struct{})
	f.mu.Unlock()
	for {
		f.mu.Lock()
		n := f.answering
		f.mu.Unlock()
		if n == 0 {
			return
		}
		time.Sleep(time.Millisecond)
	}
}

// release opens the door.
func (f *flakySink) release() {
	f.mu.Lock()
	defer f.mu.Unlock()
	close(f.door)
	f.door = nil
}

// stats sums up what the receiver did.
func (f *flakySink) stats() string {
	f.mu.Lock()
	defer f.mu.Unlock()
	n := 0
	for _, k := range f.tries {
		n += k
	}
	return fmt.Sprintf("%d requests for %d ids: %d answered 500, %d left unanswered until the sender gave up or died", n, len(f.tries), f.failed, f.abandoned)
}

// syncBuffer is a server's log, written by the process's output copier
// and read by the test.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

package store

import (
	"errors"
	"fmt"
	"strings"
	"sync"
	"testing"
	"time"

	"lotwatch/spc"
)

func auditCount(t *testing.T, db *DB) int {
	t.Helper()
	var n int
	if err := db.r.QueryRow("SELECT COUNT(*) FROM audit").Scan(&n); err != nil {
		t.Fatal(err)
	}
	return n
}

// TestAlertRuleInput: bad rules are refused naming the field and value,
// and nothing is stored or audited.
func TestAlertRuleInput(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		before := auditCount(t, db)
		tests := []struct {
			r            AlertRule
			field, value string
		}{
			{AlertRule{Webhook: "ftp://x/hook", Secret: "s"}, "webhook", "ftp://x/hook"},
			{AlertRule{Webhook: "http:///nohost", Secret: "s"}, "webhook", "http:///nohost"},
			{AlertRule{Webhook: "http://10.0.0.5/hook"}, "secret", ""},
			{AlertRule{Webhook: "http://10.0.0.5/hook", Secret: "whsec_%%%"}, "secret", "(hidden)"},
			{AlertRule{Email: "quality at plant"}, "email", "quality at plant"},
			{AlertRule{}, "webhook", ""},
			{AlertRule{Webhook: "http://127.0.0.1:9/", Secret: "s", On: []string{"sometimes"}}, "on", "sometimes"},
			{AlertRule{Webhook: "http://127.0.0.1:9/", Secret: "s", On: []string{TriggerUnexplained}, UnexplainedAfter: time.Second}, "unexplained-after", "1s"},
			{AlertRule{Webhook: "http://127.0.0.1:9/", Secret: "s", UnexplainedAfter: time.Hour}, "unexplained-after", "1h0m0s"},
			{AlertRule{Webhook: "http://127.0.0.1:9/", Secret: "s", Digest: "06:00"}, "digest-at", "06:00"},
			{AlertRule{Email: "qa@plant.test", Digest: "25:00"}, "digest-at", "25:00"},
			{AlertRule{Email: "qa@plant.test", On: []string{TriggerOutOfLimits}, EachLot: true}, "each-lot", "true"},
		}
		for _, tc := range tests {
			tc.r.ProcessID = p.ID
			_, err := db.AddAlertRule(ctx, "tester", tc.r)
			var ve *ValidationError
			if !errors.As(err, &ve) || ve.Problems[0].Field != tc.field || ve.Problems[0].Value != tc.value {
				t.Errorf("%+v: err %v, want a problem of %s %q", tc.r, err, tc.field, tc.value)
			}
		}
		if _, err := db.AddAlertRule(ctx, "tester", AlertRule{ProcessID: 999, Webhook: "http://127.0.0.1:9/", Secret: "s"}); !errors.Is(err, ErrNotFound) {
			t.Errorf("unknown process: %v", err)
		}
		if rs, _ := db.AlertRules(ctx); len(rs) != 0 || auditCount(t, db) != before {
			t.Errorf("refused rules left %d rules and %d audit entries", len(rs), auditCount(t, db)-before)
		}
		r, err := db.AddAlertRule(ctx, "tester", AlertRule{ProcessID: p.ID, Webhook: "http://192.168.1.20:8080/hook", Secret: "s3cret", On: []string{TriggerUnexplained}})
		if err != nil || r.UnexplainedAfter != DefaultUnexplainedAfter {
			t.Fatalf("rule on a private address: %+v %v", r, err)
		}
	})
}

// TestAlertOutbox: a lot posted for a process with rules is queued in its
// own transaction (a process without rules queues nothing); claims are
// exclusive until their lease ends; finishing twice makes one delivery.
func TestAlertOutbox(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		q := addProcess(t, db, "quiet", spc.ChartP)
		if _, err := db.AddLots(ctx, "tester", p.ID, []LotInput{{Lot: "A1", Inspected: 100, Count: 1}}); err != nil {
			t.Fatal(err)
		}
		if ok, err := db.HasPendingAlertEvents(ctx); ok || err != nil {
			t.Fatalf("a lot of a process without rules was queued (%v)", err)
		}
		r, err := db.AddAlertRule(ctx, "tester", AlertRule{ProcessID: p.ID, Webhook: "http://127.0.0.1:9/", Secret: "s"})
		if err != nil {
			t.Fatal(err)
		}
		lots, err := db.AddLots(ctx, "tester", p.ID, []LotInput{{Lot: "A2", Inspected: 100, Count: 1}, {Lot: "A3", Inspected: 100, Count: 9}})
		if err != nil {
			t.Fatal(err)
		}
		if _, err := db.AddLots(ctx, "tester", q.ID, []LotInput{{Lot: "Q1", Inspected: 100, Count: 1}}); err != nil {
			t.Fatal(err)
		}
		// A repeated post of a stored lot queues nothing new.
		if _, err := db.AddLots(ctx, "tester", p.ID, []LotInput{{Lot: "A2", Inspected: 100, Count: 1, Time: lots[0].Time}}); err != nil {
			t.Fatal(err)
		}
		if ok, err := db.HasPendingAlertEvents(ctx); !ok || err != nil {
			t.Fatalf("the lots queued are not pending (%v)", err)
		}
		one, err := db.ClaimAlertEvents(ctx, "one", time.Minute, 10)
		if err != nil || len(one) != 2 || one[0].LotID != lots[0].ID || one[1].LotID != lots[1].ID {
			t.Fatalf("claim: %+v %v", one, err)
		}
		if two, err := db.ClaimAlertEvents(ctx, "two", time.Minute, 10); err != nil || len(two) != 0 {
			t.Fatalf("a second owner claimed %d claimed events (%v)", len(two), err)
		}
		d := NewDelivery{MsgID: "msg_x", RuleID: r.ID, LotID: lots[1].ID, Type: "lot.signal", Payload: "{}"}
		for range 2 {
			if err := db.FinishAlertEvents(ctx, []int64{one[0].ID, one[1].ID}, []NewDelivery{d}); err != nil {
				t.Fatal(err)
			}
		}
		if ok, err := db.HasPendingAlertEvents(ctx); ok || err != nil {
			t.Errorf("finished events still pending (%v)", err)
		}
		ds, _ := db.Deliveries(ctx, r.ID, 10)
		if len(ds) != 1 || ds[0].State != DeliveryPending {
			t.Fatalf("deliveries %+v", ds)
		}
		// Claim, fail, give up; the attempts are kept.
		got, err := db.ClaimDeliveries(ctx, "one", time.Minute, 5)
		if err != nil || len(got) != 1 || got[0].Rule.Secret != "s" {
			t.Fatalf("claim deliveries: %+v %v", got, err)
		}
		if again, _ := db.ClaimDeliveries(ctx, "two", time.Minute, 5); len(again) != 0 {
			t.Error("a claimed delivery was claimed again")
		}
		if err := db.RecordAttempt(ctx, "one", got[0].ID, Attempt{At: time.Now(), Status: 500, Error: "the receiver answered 500"}, time.Time{}); err != nil {
			t.Fatal(err)
		}
		ds, _ = db.Deliveries(ctx, r.ID, 10)
		as, _ := db.Attempts(ctx, ds[0].ID)
		if ds[0].State != DeliveryFailed || ds[0].Attempts != 1 || len(as) != 1 || as[0].Status != 500 {
			t.Errorf("after giving up: %+v, attempts %+v", ds[0], as)
		}
	})
}

// TestAlertRulesAudited: adding and removing rules is in the audit
// trail (the secret only as a hash), and a rule changed with plain SQL is
// named by VerifyAudit.
func TestAlertRulesAudited(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, path := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		r, err := db.AddAlertRule(ctx, "ana", AlertRule{ProcessID: p.ID, Webhook: "http://127.0.0.1:9/", Secret: "very secret"})
		if err != nil {
			t.Fatal(err)
		}
		r2, err := db.AddAlertRule(ctx, "ana", AlertRule{ProcessID: p.ID, Email: "qa@plant.test"})
		if err != nil {
			t.Fatal(err)
		}
		if err := db.RemoveAlertRule(ctx, "ben", r2.ID); err != nil {
			t.Fatal(err)
		}
		if err := db.RemoveAlertRule(ctx, "ben", r2.ID); !errors.Is(err, ErrNotFound) {
			t.Errorf("removing twice: %v", err)
		}
		es, _ := db.AuditFor(ctx, "alertrule", r.ID)
		if len(es) != 1 || strings.Contains(es[0].New, "very secret") || !strings.Contains(es[0].New, "secret_sha256") {
			t.Errorf("audit of the rule: %+v", es)
		}
		if es, _ := db.AuditFor(ctx, "alertrule", r2.ID); len(es) != 2 || es[1].Action != "remove" || es[1].Actor != "ben" {
			t.Errorf("audit of the removed rule: %+v", es)
		}
		if c, err := db.VerifyAudit(ctx); err != nil || !c.OK {
			t.Fatalf("verify: %+v %v", c, err)
		}
		if _, err := rawSQL(t, path).Exec("UPDATE alert_rules SET webhook = 'http://attacker.example/' WHERE id = ?", r.ID); err != nil {
			t.Fatal(err)
		}
		if c, err := db.VerifyAudit(ctx); err != nil || c.OK || !strings.Contains(c.Entity, "alert rule") {
			t.Errorf("verify after tampering: %+v %v", c, err)
		}
	})
}

// outboxRows counts the rows of the outbox tables.
func outboxRows(t *testing.T, db *DB) (events, batches int) {
	t.Helper()
	if err := db.r.QueryRow("SELECT (SELECT COUNT(*) FROM alert_events), (SELECT COUNT(*) FROM alert_batches)").Scan(&events, &batches); err != nil {
		t.Fatal(err)
	}
	return events, batches
}

// TestAlertOutboxChanges: an import, a correction, a void and a frozen
// limit set each write their outbox rows in their own transaction, for a
// process with rules only: an import one batch however many lots it adds
// (and none when it is refused), a correction the lot and the 15 lots
// after it, a void the 15 lots after it, a freeze one batch from the
// set's start.
func TestAlertOutboxChanges(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		t0 := time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)
		csv := func(from, n int) string {
			var b strings.Builder
			b.WriteString("lot,time,inspected,defective\n")
			for i := from; i < from+n; i++ {
				b.WriteString(fmt.Sprintf("M%04d,%s,100,%d\n", i, t0.Add(time.Duration(i)*time.Minute).Format(time.RFC3339), i%3))
			}
			return b.String()
		}
		if _, err := db.Import(ctx, "tester", strings.NewReader(csv(0, 50)), ImportOptions{Process: "press"}); err != nil {
			t.Fatal(err)
		}
		if ev, ba := outboxRows(t, db); ev != 0 || ba != 0 {
			t.Fatalf("without rules: %d events, %d batches", ev, ba)
		}
		if _, err := db.AddAlertRule(ctx, "tester", AlertRule{ProcessID: p.ID, Webhook: "http://127.0.0.1:9/", Secret: "s"}); err != nil {
			t.Fatal(err)
		}
		if _, err := db.Import(ctx, "tester", strings.NewReader(csv(50, 40)+"BAD,2026-03-02T06:00:00Z,100,500\n"), ImportOptions{Process: "press"}); err == nil {
			t.Fatal("a file with a bad lot was imported")
		}
		if ev, ba := outboxRows(t, db); ev != 0 || ba != 0 {
			t.Fatalf("a refused file wrote %d events, %d batches", ev, ba)
		}
		res, err := db.Import(ctx, "importer", strings.NewReader(csv(50, 1000)), ImportOptions{Process: "press"})
		if err != nil {
			t.Fatal(err)
		}
		bs, err := db.ClaimAlertBatches(ctx, "one", time.Minute, 10)
		if err != nil || len(bs) != 1 || bs[0].Kind != BatchImport || bs[0].Last-bs[0].First+1 != int64(res.Added) || bs[0].Cause != "1000 lots imported by importer" {
			t.Fatalf("after an import of %d lots: %+v %v", res.Added, bs, err)
		}
		if ev, _ := outboxRows(t, db); ev != 0 {
			t.Errorf("an import wrote %d lot events", ev)
		}
		if err := db.FinishAlertBatch(ctx, bs[0].ID, nil); err != nil {
			t.Fatal(err)
		}
		lots, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		l := lots[10]
		in := l.LotInput
		in.Count = 7
		if _, err := db.CorrectLot(ctx, "kim", "count misread", l.ID, in); err != nil {
			t.Fatal(err)
		}
		evs, err := db.ClaimAlertEvents(ctx, "one", time.Minute, 100)
		if err != nil || len(evs) != 1+RuleLookBack || evs[0].LotID != l.ID || evs[1].LotID != lots[11].ID || evs[RuleLookBack].LotID != lots[10+RuleLookBack].ID ||
			evs[0].Cause != "lot M0010 corrected by kim: count misread" {
			t.Fatalf("after a correction: %d events %+v (%v)", len(evs), evs, err)
		}
		if err := db.VoidLot(ctx, "kim", "wrong line", lots[20].ID); err != nil {
			t.Fatal(err)
		}
		evs, err = db.ClaimAlertEvents(ctx, "one", time.Minute, 100)
		if err != nil || len(evs) != RuleLookBack || evs[0].LotID != lots[21].ID || evs[0].Cause != "lot M0020 voided by kim: wrong line" {
			t.Fatalf("after a void: %d events %+v (%v)", len(evs), evs, err)
		}
		from := t0.Add(500 * time.Minute)
		if _, err := db.FreezeLimitSet(ctx, "ann", LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.01, EffectiveFrom: from, Reason: "new die"}); err != nil {
			t.Fatal(err)
		}
		bs, err = db.ClaimAlertBatches(ctx, "one", time.Minute, 10)
		if err != nil || len(bs) != 1 || bs[0].Kind != BatchLimits || !bs[0].From.Equal(from) || bs[0].Cause != "limit set 1 frozen by ann: new die" {
			t.Fatalf("after a freeze: %+v %v", bs, err)
		}
		// A change of the process's settings: only one that changes how
		// lots are judged re-judges them all.
		p.Description = "press 4, left die"
		if p, err = db.UpdateProcess(ctx, "ann", "describe", p); err != nil {
			t.Fatal(err)
		}
		if bs, err = db.ClaimAlertBatches(ctx, "one", time.Minute, 10); err != nil || len(bs) != 0 {
			t.Fatalf("after a new description: %+v %v, want no batch", bs, err)
		}
		p.Rules = "nelson"
		if p, err = db.UpdateProcess(ctx, "ann", "customer asks for Nelson rules", p); err != nil {
			t.Fatal(err)
		}
		bs, err = db.ClaimAlertBatches(ctx, "one", time.Minute, 10)
		if err != nil || len(bs) != 1 || bs[0].Kind != BatchSettings || !bs[0].From.IsZero() ||
			bs[0].Cause != "settings of process "+p.Name+" changed by ann: customer asks for Nelson rules" {
			t.Fatalf("after new run rules: %+v %v", bs, err)
		}
	})
}

// TestHostAllowed checks the allow-list's matching: names exactly (any
// case), *.domain for the names under the domain (not the domain itself,
// not a name that merely ends alike), IP addresses and ranges (CIDR as
// RFC 4632 defines it) for literal addresses only.
func TestHostAllowed(t *testing.T) {
	list, ps := CheckWebhookHosts(" Chat.Plant.Example, *.pager.example ,10.1.0.0/16, 192.168.7.9,::1 ")
	if len(ps) > 0 || len(list) != 5 {
		t.Fatalf("list %v, problems %v", list, ps)
	}
	for _, tc := range []struct {
		host string
		want bool
	}{
		{"chat.plant.example", true},
		{"CHAT.plant.example.", true},
		{"evil-chat.plant.example", false},
		{"a.pager.example", true},
		{"x.y.pager.example", true},
		{"pager.example", false},
		{"notpager.example", false},
		{"10.1.200.3", true},
		{"10.2.0.1", false},
		{"192.168.7.9", true},
		{"192.168.7.10", false},
		{"::1", true},
		{"attacker.example", false},
	} {
		if got := HostAllowed(list, tc.host); got != tc.want {
			t.Errorf("%s: allowed %v, want %v", tc.host, got, tc.want)
		}
	}
	if !HostAllowed(nil, "anywhere.example") {
		t.Error("no list must allow any host")
	}
	for _, bad := range []string{"http://chat.example", "chat example", "10.0.0.0/33", "*.", "a..b"} {
		if _, ps := CheckWebhookHosts(bad); len(ps) != 1 || ps[0].Field != "hosts" {
			t.Errorf("%q: problems %v", bad, ps)
		}
	}
}

// TestWebhookHostsSetting: with an allow-list set, a rule to another host
// is refused naming the field and nothing is stored; the change of the
// list is in the audit trail; an empty list allows any host again.
func TestWebhookHostsSetting(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP)
		if _, err := db.SetWebhookHosts(ctx, "admin", "", "chat.plant.example"); err == nil {
			t.Error("a change without a reason was taken")
		}
		before := auditCount(t, db)
		list, err := db.SetWebhookHosts(ctx, "admin", "plant data stays on site", "chat.plant.example, 10.0.0.0/8")
		if err != nil || strings.Join(list, ",") != "chat.plant.example,10.0.0.0/8" || auditCount(t, db) != before+1 {
			t.Fatalf("set: %v %v, %d audit entries", list, err, auditCount(t, db)-before)
		}
		_, err = db.AddAlertRule(ctx, "eng", AlertRule{ProcessID: p.ID, Webhook: "https://hooks.outside.example/x", Secret: "s"})
		var ve *ValidationError
		if !errors.As(err, &ve) || ve.Problems[0].Field != "webhook" || !strings.Contains(ve.Problems[0].Reason, "chat.plant.example") {
			t.Fatalf("rule to a host left out: %v", err)
		}
		if rs, _ := db.AlertRules(ctx); len(rs) != 0 {
			t.Fatalf("%d rules stored", len(rs))
		}
		for _, u := range []string{"http://chat.plant.example:8080/hook", "http://10.3.4.5/hook"} {
			if _, err := db.AddAlertRule(ctx, "eng", AlertRule{ProcessID: p.ID, Webhook: u, Secret: "s"}); err != nil {
				t.Errorf("%s: %v", u, err)
			}
		}
		if _, err := db.AddAlertRule(ctx, "eng", AlertRule{ProcessID: p.ID, Email: "qa@outside.example"}); err != nil {
			t.Errorf("an e-mail rule was refused by the webhook hosts: %v", err)
		}
		if _, err := db.SetWebhookHosts(ctx, "admin", "open again", ""); err != nil {
			t.Fatal(err)
		}
		if list, err := db.WebhookHosts(ctx); err != nil || len(list) != 0 {
			t.Errorf("after clearing: %v %v", list, err)
		}
		if rep, err := db.VerifyAudit(ctx); err != nil || !rep.OK {
			t.Errorf("audit verify: %+v %v", rep, err)
		}
	})
}

// TestNextDigest: a digest at HH:MM goes out at the next such wall-clock
// time in the process's zone, across the change to summer time (Europe/
// Berlin moves from 02:00 CET to 03:00 CEST on the last Sunday of March,
// 29 March 2026: EU summer-time rule, from memory).
func TestNextDigest(t *testing.T) {
	berlin, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	for _, tc := range []struct {
		hhmm string
		now  time.Time
		want time.Time
	}{
		{"06:00", time.Date(2026, 3, 2, 5, 59, 0, 0, berlin), time.Date(2026, 3, 2, 6, 0, 0, 0, berlin)},
		{"06:00", time.Date(2026, 3, 2, 6, 0, 0, 0, berlin), time.Date(2026, 3, 3, 6, 0, 0, 0, berlin)},
		{"06:00", time.Date(2026, 3, 28, 7, 0, 0, 0, berlin), time.Date(2026, 3, 29, 4, 0, 0, 0, time.UTC)},
		{"00:00", time.Date(2026, 12, 31, 22, 30, 0, 0, time.UTC), time.Date(2027, 1, 1, 0, 0, 0, 0, berlin)}, // 23:30 in Berlin
		{"", time.Date(2026, 3, 2, 5, 0, 0, 0, berlin), time.Time{}},
	} {
		if got := NextDigest(tc.hhmm, berlin, tc.now); !got.Equal(tc.want) {
			t.Errorf("%q at %v: %v, want %v", tc.hhmm, tc.now, got, tc.want)
		}
	}
}

// TestAlertClaimsExclusive: two stores on one database, as two servers
// sharing it, each with six claimers, take the outbox's events, batches
// and deliveries at the same time. No row is handed to a second owner
// while the first holds it; every row is taken; a delivery that fails k
// times before it goes is claimed k+1 times and has k+1 attempts logged.
func TestAlertClaimsExclusive(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		one, path := open(t)
		two := openAgain(t, path)
		p := addProcess(t, one, "press", spc.ChartP)
		r, err := one.AddAlertRule(ctx, "tester", AlertRule{ProcessID: p.ID, Webhook: "http://127.0.0.1:9/", Secret: "s"})
		if err != nil {
			t.Fatal(err)
		}
		const lots, batches = 300, 40
		in := make([]LotInput, lots)
		ds := make([]NewDelivery, lots)
		for i := range in {
			in[i] = LotInput{Lot: fmt.Sprintf("L%03d", i), Inspected: 100, Count: int64(i % 7)}
			ds[i] = NewDelivery{MsgID: fmt.Sprintf("msg_claim_%03d", i), RuleID: r.ID, Type: "lot.signal", Payload: "{}"}
		}
		if _, err := one.AddLots(ctx, "tester", p.ID, in); err != nil {
			t.Fatal(err)
		}
		if err := one.AddDeliveries(ctx, ds); err != nil {
			t.Fatal(err)
		}
		for i := range batches {
			b := AlertBatch{ProcessID: p.ID, Kind: BatchImport, First: 1, Last: 2, Cause: fmt.Sprintf("file %d", i)}
			if err := one.write(ctx, func(w *wtx) error { return w.queueAlertBatch(b) }); err != nil {
				t.Fatal(err)
			}
		}

		c := &claimCheck{events: map[int64]string{}, batches: map[int64]string{}, held: map[int64]string{}, tries: map[int64]int{}}
		var wg sync.WaitGroup
		for s, db := range []*DB{one, two} {
			for g := range 6 {
				wg.Add(1)
				go func() {
					defer wg.Done()
					if err := c.work(db, fmt.Sprintf("server%d/%d", s+1, g)); err != nil {
						t.Error(err)
					}
				}()
			}
		}
		wg.Wait()

		for i, s := range c.twice {
			if i == 5 {
				t.Errorf("… %d rows handed to two owners in all", len(c.twice))
				break
			}
			t.Error(s)
		}
		if len(c.events) != lots || len(c.batches) != batches {
			t.Errorf("%d of %d events and %d of %d batches were claimed", len(c.events), lots, len(c.batches), batches)
		}
		got, err := one.Deliveries(ctx, r.ID, 2*lots)
		if err != nil || len(got) != lots {
			t.Fatalf("%d deliveries (%v), want %d", len(got), err, lots)
		}
		for _, d := range got {
			want := failuresOf(d.ID) + 1
			if d.State != DeliverySent || d.Attempts != want || c.tries[d.ID] != want {
				t.Errorf("delivery %d: %s after %d attempts logged, %d made; want sent after %d", d.ID, d.State, d.Attempts, c.tries[d.ID], want)
			}
		}
	})
}

// claimCheck follows who holds which outbox row in TestAlertClaimsExclusive.
type claimCheck struct {
	mu sync.Mutex
	// events and batches: the owner each was handed to. They are finished
	// by that owner and the leases outlast the test, so each is handed
	// out once.
	events, batches map[int64]string
	held            map[int64]string // delivery → the owner trying it now
	tries           map[int64]int    // delivery → attempts made
	twice           []string         // rows handed to a second owner
}

// failuresOf is how many attempts of delivery id fail before one goes.
func failuresOf(id int64) int { return int(id % 3) }

// work claims, finishes and tries outbox rows as owner until none is
// left pending.
func (c *claimCheck) work(db *DB, owner string) error {
	stop := time.Now().Add(30 * time.Second) // a row lost by a claim would keep the others waiting for ever
	for time.Now().Before(stop) {
		evs, err := db.ClaimAlertEvents(ctx, owner, time.Hour, 7)
		if err != nil {
			return fmt.Errorf("%s: claim events: %w", owner, err)
		}
		bs, err := db.ClaimAlertBatches(ctx, owner, time.Hour, 2)
		if err != nil {
			return fmt.Errorf("%s: claim batches: %w", owner, err)
		}
		ds, err := db.ClaimDeliveries(ctx, owner, time.Hour, 7)
		if err != nil {
			return fmt.Errorf("%s: claim deliveries: %w", owner, err)
		}
		ids := make([]int64, len(evs))
		c.mu.Lock()
		for i, e := range evs {
			ids[i] = e.ID
			c.take(c.events, "event", e.ID, owner)
		}
		for _, b := range bs {
			c.take(c.batches, "batch", b.ID, owner)
		}
		for _, d := range ds {
			c.take(c.held, "delivery", d.ID, owner)
		}
		c.mu.Unlock()
		if len(ids) > 0 {
			if err := db.FinishAlertEvents(ctx, ids, nil); err != nil {
				return fmt.Errorf("%s: finish events: %w", owner, err)
			}
		}
		for _, b := range bs {
			if err := db.FinishAlertBatch(ctx, b.ID, nil); err != nil {
				return fmt.Errorf("%s: finish batch %d: %w", owner, b.ID, err)
			}
		}
		for _, d := range ds {
			if err := c.try(db, owner, d.ID); err != nil {
				return err
			}
		}
		if len(evs)+len(bs)+len(ds) > 0 {
			continue
		}
		left, err := pendingRows(db)
		if err != nil || left == 0 {
			return err
		}
		time.Sleep(time.Millisecond)
	}
	return fmt.Errorf("%s: rows still pending after 30 s", owner)
}

// take notes that row id of a kind (events, batches or deliveries held)
// was handed to owner; c.mu is held.
func (c *claimCheck) take(m map[int64]string, kind string, id int64, owner string) {
	if had, ok := m[id]; ok {
		c.twice = append(c.twice, fmt.Sprintf("%s %d handed to %s while %s has it", kind, id, owner, had))
		return
	}
	m[id] = owner
}

// try makes one attempt of delivery id: a failure due again at once for
// its first failuresOf(id) attempts, then success. The row is let go
// before the attempt is logged, since the logging ends the claim.
func (c *claimCheck) try(db *DB, owner string, id int64) error {
	c.mu.Lock()
	if c.held[id] == owner {
		delete(c.held, id)
	}
	c.tries[id]++
	fail := c.tries[id] <= failuresOf(id)
	c.mu.Unlock()
	a := Attempt{At: time.Now(), Status: 204}
	if fail {
		a.Status, a.Error = 500, "the receiver answered 500"
	}
	if err := db.RecordAttempt(ctx, owner, id, a, time.Now()); err != nil {
		return fmt.Errorf("%s: delivery %d: %w", owner, id, err)
	}
	return nil
}

// pendingRows counts the outbox rows not finished yet.
func pendingRows(db *DB) (int, error) {
	var n int
	err := db.r.QueryRowContext(ctx, `SELECT (SELECT COUNT(*) FROM alert_events WHERE done = 0) + (SELECT COUNT(*) FROM alert_batches WHERE done = 0)
		+ (SELECT COUNT(*) FROM alert_deliveries WHERE state = 'pending')`).Scan(&n)
	return n, err
}

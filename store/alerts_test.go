package store

import (
	"errors"
	"strings"
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
		if ok, _ := db.HasPendingAlertEvents(ctx); ok {
			t.Fatal("a lot of a process without rules was queued")
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
		if ok, _ := db.HasPendingAlertEvents(ctx); ok {
			t.Error("finished events still pending")
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

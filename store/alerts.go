package store

import (
	"context"
	"database/sql"
	"encoding/base64"
	"errors"
	"fmt"
	"net"
	"net/mail"
	"net/url"
	"sort"
	"strings"
	"time"
)

// The triggers of an alert rule.
const (
	TriggerOutOfLimits = "out_of_limits" // a lot beyond a control limit
	TriggerRunRule     = "run_rule"      // a lot that completes a run-rule signal (or extends one, for a rule with EachLot)
	TriggerShift       = "shift"         // a small-shift monitor (CUSUM, EWMA) signals at the lot
	TriggerUnexplained = "unexplained"   // a lot still needing attention after a delay
)

// Triggers lists every trigger, in the order they are shown.
var Triggers = []string{TriggerOutOfLimits, TriggerRunRule, TriggerShift, TriggerUnexplained}

// DefaultTriggers is what a rule listens for when none are named.
var DefaultTriggers = []string{TriggerOutOfLimits, TriggerRunRule, TriggerShift}

// DefaultUnexplainedAfter is the delay of an unexplained rule given none
// (half a shift; common practice, no source).
const DefaultUnexplainedAfter = 4 * time.Hour

// AlertRule says which lots of a process raise an alert and where it
// goes: a webhook (URL and signing secret) or an e-mail address.
type AlertRule struct {
	ID               int64
	ProcessID        int64
	Process          string // the process's name (filled on read)
	Webhook          string // URL; "" for e-mail
	Secret           string // the webhook's signing secret
	Email            string // address; "" for a webhook
	On               []string
	UnexplainedAfter time.Duration // 0 unless On holds unexplained
	// EachLot makes the rule hear of every lot that extends a run-rule or
	// shift signal; otherwise it hears of the lot that starts the signal
	// only (the unexplained trigger reminds of it).
	EachLot bool
	// Digest, for an e-mail rule, is the time of day (HH:MM in the
	// process's time zone) when the messages made since the last digest
	// go out as one e-mail; "" sends each message at once.
	Digest    string
	Active    bool
	Created   time.Time
	CreatedBy string
}

// Target is where the rule's alerts go: the webhook URL or the address.
func (r AlertRule) Target() string {
	if r.Webhook != "" {
		return r.Webhook
	}
	return r.Email
}

// Has reports whether the rule listens for trigger t.
func (r AlertRule) Has(t string) bool {
	for _, o := range r.On {
		if o == t {
			return true
		}
	}
	return false
}

// CheckTriggers reads a comma list of triggers; an empty list is the
// default. Problems name the field "on".
func CheckTriggers(s string) ([]string, []Problem) {
	if strings.TrimSpace(s) == "" {
		return append([]string(nil), DefaultTriggers...), nil
	}
	var out []string
	seen := map[string]bool{}
	for _, t := range strings.Split(s, ",") {
		t = strings.TrimSpace(t)
		known := false
		for _, k := range Triggers {
			known = known || k == t
		}
		if !known {
			return nil, []Problem{{Field: "on", Value: t, Reason: "is not a trigger (want a comma list of " + strings.Join(Triggers, ", ") + ")"}}
		}
		if !seen[t] {
			seen[t] = true
			out = append(out, t)
		}
	}
	return out, nil
}

// CheckWebhookURL reports why u cannot be a webhook target: it must be an
// absolute http or https URL with a host. Addresses on loopback or the
// plant's private network are fine.
func CheckWebhookURL(u string) []Problem {
	if ps := checkText("webhook", u, 2000, true); len(ps) > 0 {
		return ps
	}
	p, err := url.Parse(u)
	switch {
	case err != nil:
		return []Problem{{Field: "webhook", Value: u, Reason: "is not a URL"}}
	case p.Scheme != "http" && p.Scheme != "https":
		return []Problem{{Field: "webhook", Value: u, Reason: "is not an http or https URL"}}
	case p.Host == "" || p.Hostname() == "":
		return []Problem{{Field: "webhook", Value: u, Reason: "has no host"}}
	}
	return nil
}

// WebhookKey is the key a webhook secret signs with, as the Standard
// Webhooks specification says: for a secret starting "whsec_", the
// base64-decoded rest; otherwise the secret's UTF-8 bytes exactly as
// given.
func WebhookKey(secret string) ([]byte, error) {
	if rest, ok := strings.CutPrefix(secret, "whsec_"); ok {
		k, err := base64.StdEncoding.DecodeString(rest)
		if err != nil {
			return nil, errors.New("starts with whsec_ but the rest is not base64")
		}
		return k, nil
	}
	return []byte(secret), nil
}

// CheckAlertRule checks a rule as given: exactly one of webhook (with a
// secret) and e-mail, known triggers, a delay for unexplained. It fills
// in the default triggers and delay.
func CheckAlertRule(r *AlertRule) []Problem {
	var ps []Problem
	switch {
	case r.Webhook == "" && r.Email == "":
		ps = append(ps, Problem{Field: "webhook", Reason: "is not given: a rule needs a webhook URL with a secret, or an e-mail address"})
	case r.Webhook != "" && r.Email != "":
		ps = append(ps, Problem{Field: "email", Value: r.Email, Reason: "is given with a webhook: a rule has one destination"})
	case r.Webhook != "":
		ps = append(ps, CheckWebhookURL(r.Webhook)...)
		if r.Secret == "" {
			ps = append(ps, Problem{Field: "secret", Reason: "is empty: a webhook needs a secret to sign its messages"})
		} else if p := checkText("secret", r.Secret, 1000, true); len(p) > 0 {
			ps = append(ps, Problem{Field: "secret", Value: "(hidden)", Reason: p[0].Reason})
		} else if _, err := WebhookKey(r.Secret); err != nil {
			ps = append(ps, Problem{Field: "secret", Value: "(hidden)", Reason: err.Error()})
		}
	default:
		if r.Secret != "" {
			ps = append(ps, Problem{Field: "secret", Value: "(hidden)", Reason: "is given with an e-mail address: only a webhook has a secret"})
		}
		if a, err := mail.ParseAddress(r.Email); err != nil || a.Address != r.Email || len(r.Email) > 254 {
			ps = append(ps, Problem{Field: "email", Value: r.Email, Reason: "is not an e-mail address (want name@example.com)"})
		}
	}
	if len(r.On) == 0 {
		r.On = append([]string(nil), DefaultTriggers...)
	}
	for _, t := range r.On {
		if _, p := CheckTriggers(t); len(p) > 0 {
			ps = append(ps, p...)
		}
	}
	if r.Digest != "" {
		if r.Email == "" {
			ps = append(ps, Problem{Field: "digest-at", Value: r.Digest, Reason: "is for e-mail rules only (a webhook gets each message at once)"})
		} else if _, err := time.Parse("15:04", r.Digest); err != nil {
			ps = append(ps, Problem{Field: "digest-at", Value: r.Digest, Reason: "is not a time of day HH:MM (e.g. 06:00)"})
		}
	}
	if r.EachLot && !r.Has(TriggerRunRule) && !r.Has(TriggerShift) {
		ps = append(ps, Problem{Field: "each-lot", Value: "true", Reason: "is given but the rule listens for neither run_rule nor shift"})
	}
	if !r.Has(TriggerUnexplained) {
		if r.UnexplainedAfter != 0 {
			ps = append(ps, Problem{Field: "unexplained-after", Value: r.UnexplainedAfter.String(), Reason: "is given but the rule does not listen for unexplained"})
		}
	} else {
		if r.UnexplainedAfter == 0 {
			r.UnexplainedAfter = DefaultUnexplainedAfter
		}
		if r.UnexplainedAfter < time.Minute || r.UnexplainedAfter > 90*24*time.Hour {
			ps = append(ps, Problem{Field: "unexplained-after", Value: r.UnexplainedAfter.String(), Reason: "must be between 1m and 90 days"})
		}
	}
	return ps
}

// AddAlertRule stores a rule for an active process. Bad input gives a
// *ValidationError naming the field ("webhook", "secret", "email", "on",
// "unexplained-after") and nothing is stored.
func (db *DB) AddAlertRule(ctx context.Context, actor string, r AlertRule) (AlertRule, error) {
	if ps := CheckAlertRule(&r); len(ps) > 0 {
		return AlertRule{}, invalid(ps...)
	}
	err := db.write(ctx, func(w *wtx) error {
		p, err := w.activeProcess(r.ProcessID)
		if err != nil {
			return err
		}
		if r.Webhook != "" {
			if err := w.checkWebhookHost(r.Webhook); err != nil {
				return err
			}
		}
		r.Process, r.Active, r.Created, r.CreatedBy = p.Name, true, w.now, actor
		err = w.QueryRow(`INSERT INTO alert_rules (process_id, webhook, secret, email, triggers, unexplained_after, each_lot, digest, active, created, created_by)
			VALUES (?, ?, ?, ?, ?, ?, ?, ?, 1, ?, ?) RETURNING id`, r.ProcessID, r.Webhook, r.Secret, r.Email, strings.Join(r.On, ","), int64(r.UnexplainedAfter), boolInt(r.EachLot), r.Digest, w.now.UnixNano(), actor).Scan(&r.ID)
		if err != nil {
			return err
		}
		return w.audit(actor, "add", "alertrule", r.ID, r.ID, nil, auditAlertRule(r), "")
	})
	if err != nil {
		return AlertRule{}, err
	}
	return r, nil
}

// RemoveAlertRule stops a rule. The rule stays stored, marked removed,
// so its deliveries keep their history; messages already made are still
// delivered.
func (db *DB) RemoveAlertRule(ctx context.Context, actor string, id int64) error {
	return db.write(ctx, func(w *wtx) error {
		r, err := alertRule(ctx, w.Tx, id)
		if err != nil {
			return err
		}
		if !r.Active {
			return fmt.Errorf("alert rule %d is already removed: %w", id, ErrNotFound)
		}
		if _, err := w.Exec("UPDATE alert_rules SET active = 0 WHERE id = ?", id); err != nil {
			return err
		}
		old := auditAlertRule(r)
		r.Active = false
		return w.audit(actor, "remove", "alertrule", id, id, old, auditAlertRule(r), "")
	})
}

const alertRuleCols = `r.id, r.process_id, p.name, r.webhook, r.secret, r.email, r.triggers, r.unexplained_after, r.each_lot, r.digest, r.active, r.created, r.created_by`

func scanAlertRule(s interface{ Scan(...any) error }) (AlertRule, error) {
	var r AlertRule
	var on string
	var after, created int64
	err := s.Scan(&r.ID, &r.ProcessID, &r.Process, &r.Webhook, &r.Secret, &r.Email, &on, &after, &r.EachLot, &r.Digest, &r.Active, &created, &r.CreatedBy)
	if on != "" {
		r.On = strings.Split(on, ",")
	}
	r.UnexplainedAfter, r.Created = time.Duration(after), fromNanos(created, time.UTC)
	return r, err
}

// AlertRules lists the rules in force (not removed), by id.
func (db *DB) AlertRules(ctx context.Context) ([]AlertRule, error) {
	rows, err := db.r.QueryContext(ctx, "SELECT "+alertRuleCols+" FROM alert_rules r JOIN processes p ON p.id = r.process_id WHERE r.active = 1 ORDER BY r.id")
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []AlertRule
	for rows.Next() {
		r, err := scanAlertRule(rows)
		if err != nil {
			return nil, err
		}
		out = append(out, r)
	}
	return out, rows.Err()
}

// AlertRule returns one rule, removed or not.
func (db *DB) AlertRule(ctx context.Context, id int64) (AlertRule, error) {
	return alertRule(ctx, db.r, id)
}

func alertRule(ctx context.Context, q ctxQueryer, id int64) (AlertRule, error) {
	r, err := scanAlertRule(q.QueryRowContext(ctx, "SELECT "+alertRuleCols+" FROM alert_rules r JOIN processes p ON p.id = r.process_id WHERE r.id = ?", id))
	if errors.Is(err, sql.ErrNoRows) {
		return AlertRule{}, fmt.Errorf("alert rule %d: %w", id, ErrNotFound)
	}
	return r, err
}

// lotRange is the lots first..last of a process, added by one job.
type lotRange struct{ processID, first, last int64 }

// queueAlertEvents puts the lots first..last in the outbox, in the
// transaction that stores them, when the process has alert rules; they
// are written with the batch's other lots when it ends (writeAlertEvents).
func (w *wtx) queueAlertEvents(processID, first, last int64) error {
	w.added = append(w.added, lotRange{processID, first, last})
	return nil
}

// rangesPerInsert bounds the lot ranges of one outbox statement.
const rangesPerInsert = 64

// writeAlertEvents queues the lots the batch added for judging, for the
// processes with a rule in force: one statement for many jobs' lots. The
// writers take turns (see dialect.headSelect), so a job's id range holds
// only its own lots of the process.
func (w *wtx) writeAlertEvents() error {
	for rs := w.added; len(rs) > 0; rs = rs[min(len(rs), rangesPerInsert):] {
		args := []any{w.now.UnixNano()}
		var ranges []string
		for _, r := range rs[:min(len(rs), rangesPerInsert)] {
			ranges = append(ranges, "(l.id BETWEEN ? AND ? AND l.process_id = ?)")
			args = append(args, r.first, r.last, r.processID)
		}
		q := `INSERT INTO alert_events (lot_id, process_id, created)
			SELECT l.id, l.process_id, ? FROM lots l WHERE (` + strings.Join(ranges, " OR ") + `)
			AND EXISTS (SELECT 1 FROM alert_rules r WHERE r.process_id = l.process_id AND r.active = 1) ORDER BY l.id`
		if _, err := w.Exec(q, args...); err != nil {
			return fmt.Errorf("store: alert outbox: %w", err)
		}
	}
	return nil
}

// RuleLookBack is how many lots a run rule looks at, at most (the
// longest pattern, Nelson 4's 14 lots alternating, plus one): a change to
// one lot can complete a signal at it or at up to this many lots after.
const RuleLookBack = 15

// queueAlertFollowing puts in the outbox, with cause, the lot id itself
// when self, and the RuleLookBack lots of the process that follow it at
// time t (in chart order, not voided): the lots whose judging a change
// to lot id can alter. Nothing is written when the process has no rule
// in force.
func (w *wtx) queueAlertFollowing(processID, id int64, t time.Time, self bool, cause string) error {
	has, err := w.hasAlertRules(processID)
	if err != nil || !has {
		return err
	}
	now := w.now.UnixNano()
	if self {
		if _, err := w.Exec("INSERT INTO alert_events (lot_id, process_id, created, cause) VALUES (?, ?, ?, ?)", id, processID, now, cause); err != nil {
			return err
		}
	}
	_, err = w.Exec(`INSERT INTO alert_events (lot_id, process_id, created, cause)
		SELECT id, process_id, ?, ? FROM lots WHERE process_id = ? AND voided = 0 AND id <> ? AND (time > ? OR (time = ? AND id > ?))
		ORDER BY time, id LIMIT ?`, now, cause, processID, id, t.UnixNano(), t.UnixNano(), id, RuleLookBack)
	return err
}

// queueAlertCorrection puts in the outbox the lots whose judging the
// correction of lot id can alter: the lot and those after it, and when
// its time changed, those after the place it left.
func (w *wtx) queueAlertCorrection(processID, id int64, was, now time.Time, cause string) error {
	if err := w.queueAlertFollowing(processID, id, now, true, cause); err != nil || was.Equal(now) {
		return err
	}
	return w.queueAlertFollowing(processID, id, was, false, cause)
}

// queueAlertImport puts the lots an import added in the outbox as one
// batch (one message per rule, however many lots).
func (a *lotAdder) queueAlertImport() error {
	if a.n == 0 {
		return nil
	}
	return a.w.queueAlertBatch(AlertBatch{ProcessID: a.p.ID, Kind: BatchImport, First: a.first, Last: a.last,
		Cause: fmt.Sprintf("%d lots imported by %s", a.n, a.actor)})
}

func (w *wtx) hasAlertRules(processID int64) (bool, error) {
	var n int
	err := w.QueryRow("SELECT COUNT(*) FROM alert_rules WHERE process_id = ? AND active = 1", processID).Scan(&n)
	return n > 0, err
}

// boolInt is a flag as the INTEGER 0 or 1 the tables keep it in.
func boolInt(b bool) int {
	if b {
		return 1
	}
	return 0
}

// AlertEvent is a stored lot waiting to be judged for alerts.
type AlertEvent struct {
	ID, LotID, ProcessID int64
	Created              time.Time
	// Cause is "" for a lot posted; otherwise the change that put the
	// lot in the outbox again, in plain words.
	Cause string
}

// ClaimAlertEvents takes up to limit pending events for owner until
// lease ends; an event claimed by another whose lease has not ended is
// left alone. The claim is in the database, and two claims at once never
// take the same row (see dialect.claimRows), so several servers sharing
// it each take different events.
func (db *DB) ClaimAlertEvents(ctx context.Context, owner string, lease time.Duration, limit int) ([]AlertEvent, error) {
	var out []AlertEvent
	err := db.write(ctx, func(w *wtx) error {
		out = out[:0]
		now := w.now.UnixNano()
		rows, err := w.Query(`UPDATE alert_events SET lease_owner = ?, lease_until = ?
			WHERE id IN (SELECT id FROM alert_events WHERE done = 0 AND lease_until < ? ORDER BY id LIMIT ?`+w.db.d.claimRows+`)
			RETURNING id, lot_id, process_id, created, cause`, owner, now+int64(lease), now, limit)
		if err != nil {
			return err
		}
		defer rows.Close()
		for rows.Next() {
			var e AlertEvent
			var c int64
			if err := rows.Scan(&e.ID, &e.LotID, &e.ProcessID, &c, &e.Cause); err != nil {
				return err
			}
			e.Created = fromNanos(c, time.UTC)
			out = append(out, e)
		}
		return rows.Err()
	})
	// RETURNING gives no order on PostgreSQL: the events in the order
	// they were written.
	sort.Slice(out, func(i, j int) bool { return out[i].ID < out[j].ID })
	return out, err
}

// HasPendingAlertEvents reports whether some event waits to be judged
// (claimed or not), without writing.
func (db *DB) HasPendingAlertEvents(ctx context.Context) (bool, error) {
	// EXISTS is a boolean on PostgreSQL and 0 or 1 on SQLite: both scan
	// into a bool.
	var pending bool
	err := db.r.QueryRowContext(ctx, "SELECT EXISTS (SELECT 1 FROM alert_events WHERE done = 0)").Scan(&pending)
	return pending, err
}

// NewDelivery is a message to make: MsgID is its stable id (the
// webhook-id); making one whose MsgID exists already does nothing.
type NewDelivery struct {
	MsgID   string
	RuleID  int64
	LotID   int64 // 0 when about no lot (a test)
	Type    string
	Payload string
	// NotBefore holds the message back until then (a rule's digest
	// time); zero sends it at once.
	NotBefore time.Time
}

// NextDigest is when a rule with a digest at hhmm (HH:MM in loc) next
// sends its digest after now; zero when hhmm is "".
func NextDigest(hhmm string, loc *time.Location, now time.Time) time.Time {
	at, err := time.Parse("15:04", hhmm)
	if err != nil {
		return time.Time{}
	}
	n := now.In(loc)
	t := time.Date(n.Year(), n.Month(), n.Day(), at.Hour(), at.Minute(), 0, 0, loc)
	if !t.After(n) {
		t = time.Date(n.Year(), n.Month(), n.Day()+1, at.Hour(), at.Minute(), 0, 0, loc)
	}
	return t
}

// FinishAlertEvents makes the deliveries of judged events and marks them
// done, in one transaction: a crash before it leaves the events pending
// (they are judged again, and the stable ids keep a message from being
// made twice); after it, the messages are in the outbox.
func (db *DB) FinishAlertEvents(ctx context.Context, events []int64, ds []NewDelivery) error {
	return db.write(ctx, func(w *wtx) error {
		if err := w.addDeliveries(ds); err != nil {
			return err
		}
		for _, id := range events {
			if _, err := w.Exec("UPDATE alert_events SET done = ?, lease_owner = '', lease_until = 0 WHERE id = ? AND done = 0", w.now.UnixNano(), id); err != nil {
				return err
			}
		}
		return nil
	})
}

// AddDeliveries makes messages (a test alert, an escalation); those whose
// MsgID is stored already are left as they are.
func (db *DB) AddDeliveries(ctx context.Context, ds []NewDelivery) error {
	return db.write(ctx, func(w *wtx) error { return w.addDeliveries(ds) })
}

func (w *wtx) addDeliveries(ds []NewDelivery) error {
	for _, d := range ds {
		var lot any
		if d.LotID != 0 {
			lot = d.LotID
		}
		next := max(w.now.UnixNano(), nanos(d.NotBefore))
		if _, err := w.Exec(`INSERT INTO alert_deliveries (msg_id, rule_id, lot_id, type, payload, created, state, next_at)
			VALUES (?, ?, ?, ?, ?, ?, 'pending', ?) ON CONFLICT (msg_id) DO NOTHING`,
			d.MsgID, d.RuleID, lot, d.Type, d.Payload, w.now.UnixNano(), next); err != nil {
			return fmt.Errorf("store: delivery %s: %w", d.MsgID, err)
		}
	}
	return nil
}

// Delivery states.
const (
	DeliveryPending = "pending"
	DeliverySent    = "sent"
	DeliveryFailed  = "failed"
)

// Delivery is one message to one rule's destination and where it stands.
type Delivery struct {
	ID        int64
	MsgID     string
	RuleID    int64
	LotID     int64
	Type      string
	Payload   string
	Created   time.Time
	State     string
	Attempts  int
	NextAt    time.Time
	DoneAt    time.Time
	LastError string
	Rule      AlertRule // the rule it goes to (filled by ClaimDeliveries and Deliveries)
}

const deliveryCols = `d.id, d.msg_id, d.rule_id, COALESCE(d.lot_id, 0), d.type, d.payload, d.created, d.state, d.attempts, d.next_at, d.done_at, d.last_error`

func scanDelivery(s interface{ Scan(...any) error }, d *Delivery, extra ...any) error {
	var created, next, done int64
	dest := append([]any{&d.ID, &d.MsgID, &d.RuleID, &d.LotID, &d.Type, &d.Payload, &created, &d.State, &d.Attempts, &next, &done, &d.LastError}, extra...)
	err := s.Scan(dest...)
	d.Created, d.NextAt, d.DoneAt = fromNanos(created, time.UTC), fromNanos(next, time.UTC), fromNanos(done, time.UTC)
	return err
}

// ClaimDeliveries takes up to limit pending deliveries that are due, for
// owner until lease ends, with their rules.
func (db *DB) ClaimDeliveries(ctx context.Context, owner string, lease time.Duration, limit int) ([]Delivery, error) {
	return db.claimDeliveries(ctx, owner, lease, limit, 0)
}

// ClaimRuleDeliveries is ClaimDeliveries for the deliveries of one rule
// (those of a digest, sent as one e-mail).
func (db *DB) ClaimRuleDeliveries(ctx context.Context, owner string, lease time.Duration, limit int, ruleID int64) ([]Delivery, error) {
	return db.claimDeliveries(ctx, owner, lease, limit, ruleID)
}

func (db *DB) claimDeliveries(ctx context.Context, owner string, lease time.Duration, limit int, ruleID int64) ([]Delivery, error) {
	var ids []int64
	err := db.write(ctx, func(w *wtx) error {
		ids = ids[:0]
		now := w.now.UnixNano()
		rows, err := w.Query(`UPDATE alert_deliveries SET lease_owner = ?, lease_until = ?
			WHERE id IN (SELECT id FROM alert_deliveries WHERE state = 'pending' AND next_at <= ? AND lease_until < ? AND (? = 0 OR rule_id = ?)
			ORDER BY next_at LIMIT ?`+w.db.d.claimRows+`)
			RETURNING id`, owner, now+int64(lease), now, now, ruleID, ruleID, limit)
		if err != nil {
			return err
		}
		defer rows.Close()
		for rows.Next() {
			var id int64
			if err := rows.Scan(&id); err != nil {
				return err
			}
			ids = append(ids, id)
		}
		return rows.Err()
	})
	if err != nil || len(ids) == 0 {
		return nil, err
	}
	out := make([]Delivery, 0, len(ids))
	for _, id := range ids {
		d, err := db.Delivery(ctx, id)
		if err != nil {
			return nil, err
		}
		out = append(out, d)
	}
	return out, nil
}

// NextDeliveryDue returns when the earliest pending delivery is due
// (zero when none is pending).
func (db *DB) NextDeliveryDue(ctx context.Context) (time.Time, error) {
	var n sql.NullInt64
	err := db.r.QueryRowContext(ctx, "SELECT MIN("+db.d.greatest+"(next_at, lease_until)) FROM alert_deliveries WHERE state = 'pending'").Scan(&n)
	if err != nil || !n.Valid {
		return time.Time{}, err
	}
	return fromNanos(n.Int64, time.UTC), nil
}

// Delivery returns one delivery with its rule.
func (db *DB) Delivery(ctx context.Context, id int64) (Delivery, error) {
	var d Delivery
	err := scanDelivery(db.r.QueryRowContext(ctx, "SELECT "+deliveryCols+" FROM alert_deliveries d WHERE d.id = ?", id), &d)
	if errors.Is(err, sql.ErrNoRows) {
		return Delivery{}, fmt.Errorf("delivery %d: %w", id, ErrNotFound)
	}
	if err != nil {
		return Delivery{}, err
	}
	d.Rule, err = db.AlertRule(ctx, d.RuleID)
	return d, err
}

// Attempt is one try of a delivery.
type Attempt struct {
	N      int
	At     time.Time
	Status int    // HTTP status or SMTP reply code; 0 when no answer came
	Error  string // "" when delivered
	Took   time.Duration
}

// RecordAttempt logs an attempt of a delivery and sets where it stands:
// sent when a.Error is empty; otherwise pending again from next on, or
// failed when next is zero. Only the owner of the claim records; a
// delivery no longer claimed by owner (its lease ran out and another took
// it) gets the attempt logged but its state is left to the other.
func (db *DB) RecordAttempt(ctx context.Context, owner string, id int64, a Attempt, next time.Time) error {
	return db.write(ctx, func(w *wtx) error {
		// Counting in the UPDATE locks the row until the commit: two
		// servers logging attempts of one delivery at once (a lease run
		// out mid-attempt) number them one after the other, and the
		// owner read is the one in force.
		var n int
		var held string
		if err := w.QueryRow("UPDATE alert_deliveries SET attempts = attempts + 1 WHERE id = ? RETURNING attempts, lease_owner", id).Scan(&n, &held); err != nil {
			return err
		}
		if _, err := w.Exec("INSERT INTO alert_attempts (delivery_id, n, at, status, error, took) VALUES (?, ?, ?, ?, ?, ?)",
			id, n, a.At.UnixNano(), a.Status, a.Error, int64(a.Took)); err != nil {
			return err
		}
		state, nextAt, doneAt := DeliveryPending, nanos(next), int64(0)
		switch {
		case a.Error == "":
			state, nextAt, doneAt = DeliverySent, 0, w.now.UnixNano()
		case next.IsZero():
			state, doneAt = DeliveryFailed, w.now.UnixNano()
		}
		if held != owner {
			return nil
		}
		_, err := w.Exec(`UPDATE alert_deliveries SET state = ?, next_at = ?, done_at = ?, last_error = ?, lease_owner = '', lease_until = 0
			WHERE id = ?`, state, nextAt, doneAt, a.Error, id)
		return err
	})
}

// Deliveries lists the latest deliveries of a rule (all rules for 0),
// newest first, at most limit.
func (db *DB) Deliveries(ctx context.Context, ruleID int64, limit int) ([]Delivery, error) {
	rows, err := db.r.QueryContext(ctx, "SELECT "+deliveryCols+" FROM alert_deliveries d WHERE ? = 0 OR d.rule_id = ? ORDER BY d.id DESC LIMIT ?", ruleID, ruleID, limit)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []Delivery
	for rows.Next() {
		var d Delivery
		if err := scanDelivery(rows, &d); err != nil {
			return nil, err
		}
		out = append(out, d)
	}
	return out, rows.Err()
}

// Attempts lists the attempts of a delivery, oldest first.
func (db *DB) Attempts(ctx context.Context, deliveryID int64) ([]Attempt, error) {
	rows, err := db.r.QueryContext(ctx, "SELECT n, at, status, error, took FROM alert_attempts WHERE delivery_id = ? ORDER BY n", deliveryID)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []Attempt
	for rows.Next() {
		var a Attempt
		var at, took int64
		if err := rows.Scan(&a.N, &at, &a.Status, &a.Error, &took); err != nil {
			return nil, err
		}
		a.At, a.Took = fromNanos(at, time.UTC), time.Duration(took)
		out = append(out, a)
	}
	return out, rows.Err()
}

// DeliveryCounts counts the deliveries by state.
func (db *DB) DeliveryCounts(ctx context.Context) (map[string]int, error) {
	rows, err := db.r.QueryContext(ctx, "SELECT state, COUNT(*) FROM alert_deliveries GROUP BY state")
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	out := map[string]int{}
	for rows.Next() {
		var s string
		var n int
		if err := rows.Scan(&s, &n); err != nil {
			return nil, err
		}
		out[s] = n
	}
	return out, rows.Err()
}

// ReleaseAlertClaims ends the claims owner holds on outbox rows: a
// server restarted after a crash takes its unfinished work back at once
// instead of waiting for its old claims to run out.
func (db *DB) ReleaseAlertClaims(ctx context.Context, owner string) error {
	return db.write(ctx, func(w *wtx) error {
		if _, err := w.Exec("UPDATE alert_events SET lease_until = 0, lease_owner = '' WHERE done = 0 AND lease_owner = ?", owner); err != nil {
			return err
		}
		if _, err := w.Exec("UPDATE alert_batches SET lease_until = 0, lease_owner = '' WHERE done = 0 AND lease_owner = ?", owner); err != nil {
			return err
		}
		_, err := w.Exec("UPDATE alert_deliveries SET lease_until = 0, lease_owner = '' WHERE state = 'pending' AND lease_owner = ?", owner)
		return err
	})
}

// AlertEventTimes returns, for those of the lots that were put in the
// outbox, when they were (the first time): the start of an unexplained
// rule's delay. Lots stored while their process had no rule are left out.
func (db *DB) AlertEventTimes(ctx context.Context, lotIDs []int64) (map[int64]time.Time, error) {
	out := map[int64]time.Time{}
	for len(lotIDs) > 0 {
		n := min(len(lotIDs), 500)
		args := make([]any, n)
		for i, id := range lotIDs[:n] {
			args[i] = id
		}
		rows, err := db.r.QueryContext(ctx, "SELECT lot_id, MIN(created) FROM alert_events WHERE lot_id IN (?"+strings.Repeat(", ?", n-1)+") GROUP BY lot_id", args...)
		if err != nil {
			return nil, err
		}
		for rows.Next() {
			var id, c int64
			if err := rows.Scan(&id, &c); err != nil {
				rows.Close()
				return nil, err
			}
			out[id] = fromNanos(c, time.UTC)
		}
		rows.Close()
		if err := rows.Err(); err != nil {
			return nil, err
		}
		lotIDs = lotIDs[n:]
	}
	return out, nil
}

// DeliveriesMade reports which of the message ids are made already.
func (db *DB) DeliveriesMade(ctx context.Context, msgIDs []string) (map[string]bool, error) {
	out := map[string]bool{}
	for len(msgIDs) > 0 {
		n := min(len(msgIDs), 500)
		args := make([]any, n)
		for i, id := range msgIDs[:n] {
			args[i] = id
		}
		rows, err := db.r.QueryContext(ctx, "SELECT msg_id FROM alert_deliveries WHERE msg_id IN (?"+strings.Repeat(", ?", n-1)+")", args...)
		if err != nil {
			return nil, err
		}
		for rows.Next() {
			var id string
			if err := rows.Scan(&id); err != nil {
				rows.Close()
				return nil, err
			}
			out[id] = true
		}
		rows.Close()
		if err := rows.Err(); err != nil {
			return nil, err
		}
		msgIDs = msgIDs[n:]
	}
	return out, nil
}

// Kinds of alert batches.
const (
	BatchImport   = "import"   // the lots an imported file added
	BatchLimits   = "limits"   // the lots a frozen limit set judges
	BatchSettings = "settings" // every lot, when the process's way of judging changed
)

// AlertBatch is a change that judges many lots at once, waiting to be
// judged for alerts: it raises one message per rule, not one per lot.
type AlertBatch struct {
	ID, ProcessID int64
	Kind          string    // BatchImport, BatchLimits or BatchSettings
	First, Last   int64     // import: the ids of the lots it added
	From          time.Time // limits: the set is in force from then (settings: zero, every lot)
	Cause         string    // the change in plain words
	Created       time.Time
}

// queueAlertBatch puts b in the outbox, in the transaction of its change,
// when the process has a rule in force.
func (w *wtx) queueAlertBatch(b AlertBatch) error {
	has, err := w.hasAlertRules(b.ProcessID)
	if err != nil || !has {
		return err
	}
	_, err = w.Exec(`INSERT INTO alert_batches (process_id, kind, first_lot, last_lot, from_time, cause, created) VALUES (?, ?, ?, ?, ?, ?, ?)`,
		b.ProcessID, b.Kind, b.First, b.Last, nanos(b.From), b.Cause, w.now.UnixNano())
	return err
}

// ClaimAlertBatches takes up to limit pending batches for owner until
// lease ends, as ClaimAlertEvents does events.
func (db *DB) ClaimAlertBatches(ctx context.Context, owner string, lease time.Duration, limit int) ([]AlertBatch, error) {
	var out []AlertBatch
	err := db.write(ctx, func(w *wtx) error {
		out = out[:0]
		now := w.now.UnixNano()
		rows, err := w.Query(`UPDATE alert_batches SET lease_owner = ?, lease_until = ?
			WHERE id IN (SELECT id FROM alert_batches WHERE done = 0 AND lease_until < ? ORDER BY id LIMIT ?`+w.db.d.claimRows+`)
			RETURNING id, process_id, kind, first_lot, last_lot, from_time, cause, created`, owner, now+int64(lease), now, limit)
		if err != nil {
			return err
		}
		defer rows.Close()
		for rows.Next() {
			var b AlertBatch
			var from, c int64
			if err := rows.Scan(&b.ID, &b.ProcessID, &b.Kind, &b.First, &b.Last, &from, &b.Cause, &c); err != nil {
				return err
			}
			b.From, b.Created = fromNanos(from, time.UTC), fromNanos(c, time.UTC)
			out = append(out, b)
		}
		return rows.Err()
	})
	sort.Slice(out, func(i, j int) bool { return out[i].ID < out[j].ID })
	return out, err
}

// HasPendingAlertBatches reports whether some batch waits to be judged.
func (db *DB) HasPendingAlertBatches(ctx context.Context) (bool, error) {
	var n int
	err := db.r.QueryRowContext(ctx, "SELECT COUNT(*) FROM alert_batches WHERE done = 0").Scan(&n)
	return n > 0, err
}

// FinishAlertBatch makes the messages of a judged batch and marks it
// done, in one transaction (see FinishAlertEvents).
func (db *DB) FinishAlertBatch(ctx context.Context, id int64, ds []NewDelivery) error {
	return db.write(ctx, func(w *wtx) error {
		if err := w.addDeliveries(ds); err != nil {
			return err
		}
		_, err := w.Exec("UPDATE alert_batches SET done = ?, lease_owner = '', lease_until = 0 WHERE id = ? AND done = 0", w.now.UnixNano(), id)
		return err
	})
}

// The webhook hosts allow-list: a plant setting naming the hosts webhooks
// may go to, so that nobody can be talked into adding a rule that posts
// the plant's figures to an outside address. Unset, any host is allowed
// (receivers on the plant network are the usual case). It is set from the
// command line only (lotwatch alert hosts), by whoever runs the server.

// webhookHostsKey is the plant_settings key of the allow-list.
const webhookHostsKey = "webhook_hosts"

// CheckWebhookHosts reads an allow-list: a comma list of host names
// (chat.plant.example), host names under a domain (*.plant.example), IP
// addresses and IP ranges (10.0.0.0/8). Problems name the field "hosts".
func CheckWebhookHosts(s string) ([]string, []Problem) {
	var out []string
	for _, h := range strings.Split(s, ",") {
		h = strings.ToLower(strings.TrimSpace(h))
		if h == "" {
			continue
		}
		name := strings.TrimPrefix(h, "*.")
		_, _, cidrErr := net.ParseCIDR(h)
		ok := cidrErr == nil || net.ParseIP(h) != nil
		if !ok && !strings.Contains(h, "/") && len(name) <= 253 {
			ok = true
			for _, label := range strings.Split(name, ".") {
				ok = ok && label != "" && len(label) <= 63 && strings.Trim(label, "abcdefghijklmnopqrstuvwxyz0123456789-") == ""
			}
		}
		if !ok {
			return nil, []Problem{{Field: "hosts", Value: h, Reason: "is not a host name, *.domain, IP address or IP range (e.g. chat.plant.example, *.plant.example, 10.0.0.0/8)"}}
		}
		out = append(out, h)
	}
	return out, nil
}

// HostAllowed reports whether the host of a webhook URL is on the
// allow-list; every host is when the list is empty.
func HostAllowed(list []string, host string) bool {
	if len(list) == 0 {
		return true
	}
	host = strings.ToLower(strings.TrimSuffix(host, "."))
	ip := net.ParseIP(host)
	for _, h := range list {
		switch _, n, err := net.ParseCIDR(h); {
		case err == nil:
			if ip != nil && n.Contains(ip) {
				return true
			}
		case strings.HasPrefix(h, "*."):
			if strings.HasSuffix(host, h[1:]) {
				return true
			}
		case ip != nil && net.ParseIP(h) != nil:
			if ip.Equal(net.ParseIP(h)) {
				return true
			}
		case h == host:
			return true
		}
	}
	return false
}

// checkWebhookHost refuses a webhook URL whose host the allow-list
// leaves out, naming the field "webhook".
func (w *wtx) checkWebhookHost(u string) error {
	list, err := webhookHosts(context.Background(), w.Tx)
	if err != nil {
		return err
	}
	if p, err := url.Parse(u); err == nil && !HostAllowed(list, p.Hostname()) {
		return invalid(Problem{Field: "webhook", Value: u, Reason: "goes to a host the plant's webhook hosts leave out (" + strings.Join(list, ", ") + "; see lotwatch alert hosts)"})
	}
	return nil
}

// WebhookHosts returns the allow-list of webhook hosts (empty: any host).
func (db *DB) WebhookHosts(ctx context.Context) ([]string, error) {
	return webhookHosts(ctx, db.r)
}

func webhookHosts(ctx context.Context, q ctxQueryer) ([]string, error) {
	var s string
	err := q.QueryRowContext(ctx, "SELECT value FROM plant_settings WHERE key = ?", webhookHostsKey).Scan(&s)
	if errors.Is(err, sql.ErrNoRows) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	list, _ := CheckWebhookHosts(s)
	return list, nil
}

// SetWebhookHosts sets the allow-list of webhook hosts (s as
// CheckWebhookHosts reads it; empty allows any host) with a reason; the
// change is in the audit trail (entity "plant"). Rules already stored
// whose host it leaves out stay, but their messages are not sent: each
// fails at once, saying why, on the Alerts page.
func (db *DB) SetWebhookHosts(ctx context.Context, actor, reason, s string) ([]string, error) {
	list, ps := CheckWebhookHosts(s)
	ps = append(ps, checkReason(reason, "say why webhooks may go to these hosts")...)
	if len(ps) > 0 {
		return nil, invalid(ps...)
	}
	err := db.write(ctx, func(w *wtx) error {
		old, err := webhookHosts(context.Background(), w.Tx)
		if err != nil {
			return err
		}
		// ON CONFLICT … DO UPDATE is understood by SQLite and PostgreSQL alike.
		if _, err := w.Exec("INSERT INTO plant_settings (key, value) VALUES (?, ?) ON CONFLICT(key) DO UPDATE SET value = excluded.value",
			webhookHostsKey, strings.Join(list, ",")); err != nil {
			return err
		}
		return w.audit(actor, "update", "plant", 0, 0, map[string]string{webhookHostsKey: strings.Join(old, ",")},
			map[string]string{webhookHostsKey: strings.Join(list, ",")}, reason)
	})
	if err != nil {
		return nil, err
	}
	return list, nil
}

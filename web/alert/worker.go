package alert

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/url"
	"strconv"
	"strings"
	"sync"
	"time"

	"lotwatch/store"
)

// Judge judges lots of a process the way its chart does and returns the
// verdicts of those of ids still on the chart (a voided lot is left out).
type Judge func(ctx context.Context, p store.Process, ids []int64) (map[int64]Verdict, error)

// Attention lists the lots of a process that still need attention: out
// of limits or in a signal, and nobody has recorded a cause or the
// finding that none was found.
type Attention func(ctx context.Context, p store.Process) ([]int64, error)

// Config configures a Worker.
type Config struct {
	DB        *store.DB
	Judge     Judge
	Attention Attention // for unexplained rules; nil: they never fire
	// EscalateEvery is how often unexplained lots are looked for;
	// default 30 s.
	EscalateEvery time.Duration
	// Now is the clock the delays of unexplained rules are measured with;
	// default time.Now (tests set a fake clock).
	Now       func() time.Time
	PublicURL string  // the server's address as people reach it, for links to lots
	Mail      *Mailer // nil: e-mail rules fail with a message saying so
	Log       *slog.Logger
	// Owner names this server in the claims it puts on outbox rows; it
	// should stay the same across restarts of the same server (then a
	// restarted server takes back its own claims at once) and differ
	// between servers sharing a database. Default: "lotwatch".
	Owner string
	Poll  time.Duration // how often the outbox is looked at; default 1 s
	// Timeout bounds one attempt; default 10 s.
	Timeout time.Duration
	// RetryBase is the wait after the first failed attempt, doubled after
	// each further one (see Backoff); default 5 s. Tests shorten it.
	RetryBase time.Duration
	// Client sends the webhooks; default: no proxy, no redirects followed.
	Client *http.Client
}

// Worker judges the outbox's lots and delivers their alerts.
type Worker struct {
	cfg      Config
	wake     chan struct{}
	mu       sync.Mutex
	inflight map[int64]bool
	sends    sync.WaitGroup
	// escalated is when unexplained lots were last looked for.
	escalated time.Time
}

// Lease is how long a claim on an outbox row holds: long enough for an
// attempt (Timeout) and its logging, short enough that another server
// takes over soon after one stops.
func (w *Worker) lease() time.Duration { return 3*w.cfg.Timeout + 10*time.Second }

// maxInflight bounds the messages being sent at once.
const maxInflight = 16

// NewWorker checks the configuration and fills in defaults.
func NewWorker(cfg Config) (*Worker, error) {
	if cfg.DB == nil || cfg.Judge == nil {
		return nil, errors.New("alert: the worker needs a database and a judge")
	}
	if cfg.Log == nil {
		cfg.Log = slog.Default()
	}
	if cfg.Owner == "" {
		cfg.Owner = "lotwatch"
	}
	if cfg.Poll <= 0 {
		cfg.Poll = time.Second
	}
	if cfg.Timeout <= 0 {
		cfg.Timeout = 10 * time.Second
	}
	if cfg.Now == nil {
		cfg.Now = time.Now
	}
	if cfg.EscalateEvery <= 0 {
		cfg.EscalateEvery = 30 * time.Second
	}
	if cfg.RetryBase <= 0 {
		cfg.RetryBase = 5 * time.Second
	}
	if cfg.Client == nil {
		cfg.Client = &http.Client{
			Transport: &http.Transport{Proxy: nil, MaxIdleConnsPerHost: 4, IdleConnTimeout: time.Minute},
			CheckRedirect: func(*http.Request, []*http.Request) error {
				return http.ErrUseLastResponse
			},
		}
	}
	return &Worker{cfg: cfg, wake: make(chan struct{}, 1), inflight: map[int64]bool{}}, nil
}

// Wake makes the worker look at the outbox now rather than at its next
// poll (after a lot was posted, a test alert asked for).
func (w *Worker) Wake() {
	select {
	case w.wake <- struct{}{}:
	default:
	}
}

// Run works until ctx ends, then waits for the attempts in flight.
func (w *Worker) Run(ctx context.Context) {
	log := w.cfg.Log
	if w.cfg.DB.ReadOnly() {
		log.Warn("alerts are not delivered: the database cannot be written (the outbox needs it)")
		<-ctx.Done()
		return
	}
	if err := w.cfg.DB.ReleaseAlertClaims(context.WithoutCancel(ctx), w.cfg.Owner); err != nil {
		log.Error("alerts: taking back the claims of an earlier run", "err", err)
	}
	t := time.NewTicker(w.cfg.Poll)
	defer t.Stop()
	for {
		if err := w.Step(ctx); err != nil && ctx.Err() == nil {
			log.Error("alerts", "err", err)
		}
		select {
		case <-ctx.Done():
			w.sends.Wait()
			return
		case <-t.C:
		case <-w.wake:
		}
	}
}

// Step judges the pending events and starts the attempts that are due.
func (w *Worker) Step(ctx context.Context) error {
	for {
		n, err := w.judgeEvents(ctx)
		if err != nil {
			return err
		}
		if n == 0 {
			break
		}
	}
	if err := w.judgeBatches(ctx); err != nil {
		return err
	}
	if err := w.escalate(ctx); err != nil {
		return err
	}
	return w.sendDue(ctx)
}

// Drain runs Step and waits for its attempts: for tests and for
// one-off runs.
func (w *Worker) Drain(ctx context.Context) error {
	err := w.Step(ctx)
	w.sends.Wait()
	return err
}

// eventBatch is how many events are judged together.
const eventBatch = 256

// judgeEvents judges one batch of pending events and returns how many it
// took.
func (w *Worker) judgeEvents(ctx context.Context) (int, error) {
	db := w.cfg.DB
	if ok, err := db.HasPendingAlertEvents(ctx); err != nil || !ok {
		return 0, err
	}
	evs, err := db.ClaimAlertEvents(ctx, w.cfg.Owner, w.lease(), eventBatch)
	if err != nil || len(evs) == 0 {
		return 0, err
	}
	rules, err := db.AlertRules(ctx)
	if err != nil {
		return 0, err
	}
	byProc := map[int64][]store.AlertEvent{}
	var order []int64
	for _, e := range evs {
		if byProc[e.ProcessID] == nil {
			order = append(order, e.ProcessID)
		}
		byProc[e.ProcessID] = append(byProc[e.ProcessID], e)
	}
	var done []int64
	var ds []store.NewDelivery
	for _, pid := range order {
		es := byProc[pid]
		made, err := w.judgeProcess(ctx, pid, es, rules)
		if err != nil {
			// Left claimed: taken again when the claim runs out.
			w.cfg.Log.Error("alerts: judging lots", "process", pid, "err", err)
			continue
		}
		ds = append(ds, made...)
		for _, e := range es {
			done = append(done, e.ID)
		}
	}
	if len(done) == 0 {
		return 0, nil
	}
	if err := db.FinishAlertEvents(ctx, done, ds); err != nil {
		return 0, err
	}
	if len(ds) > 0 {
		w.Wake()
	}
	return len(evs), nil
}

// judgeProcess makes the messages of one process's events.
func (w *Worker) judgeProcess(ctx context.Context, pid int64, es []store.AlertEvent, rules []store.AlertRule) ([]store.NewDelivery, error) {
	var mine []store.AlertRule
	for _, r := range rules {
		if r.ProcessID == pid {
			mine = append(mine, r)
		}
	}
	if len(mine) == 0 {
		return nil, nil
	}
	p, err := w.cfg.DB.Process(ctx, pid)
	if err != nil {
		return nil, err
	}
	ids := make([]int64, len(es))
	for i, e := range es {
		ids[i] = e.LotID
	}
	vs, err := w.cfg.Judge(ctx, p, ids)
	if err != nil {
		return nil, err
	}
	var ds []store.NewDelivery
	for _, e := range es {
		v, ok := vs[e.LotID]
		if !ok || !v.Signals() {
			continue
		}
		for _, r := range mine {
			if len(matches(r, v)) == 0 {
				continue
			}
			body, err := encode(lotMessage(TypeSignal, p, heard(r, v), e.Created, w.cfg.PublicURL, e.Cause))
			if err != nil {
				return nil, err
			}
			ds = append(ds, store.NewDelivery{MsgID: MsgID(TypeSignal, e.LotID, r.ID), RuleID: r.ID, LotID: e.LotID, Type: TypeSignal, Payload: body,
				NotBefore: w.digestTime(r, p)})
		}
	}
	return ds, nil
}

// digestTime is when a message of rule r about process p may go: the
// rule's next digest, or zero (at once) for a rule without one.
func (w *Worker) digestTime(r store.AlertRule, p store.Process) time.Time {
	return store.NextDigest(r.Digest, p.Location(), w.cfg.Now())
}

// sendDue claims the deliveries that are due and starts their attempts.
func (w *Worker) sendDue(ctx context.Context) error {
	w.mu.Lock()
	room := maxInflight - len(w.inflight)
	w.mu.Unlock()
	if room <= 0 {
		return nil
	}
	due, err := w.cfg.DB.NextDeliveryDue(ctx)
	if err != nil || due.IsZero() || due.After(time.Now()) {
		return err
	}
	ds, err := w.cfg.DB.ClaimDeliveries(ctx, w.cfg.Owner, w.lease(), room)
	if err != nil {
		return err
	}
	digests := map[int64][]store.Delivery{}
	for _, d := range ds {
		if d.Rule.Digest != "" && d.Type != TypeTest {
			digests[d.RuleID] = append(digests[d.RuleID], d)
			continue
		}
		w.start(ctx, []store.Delivery{d}, w.attempt)
	}
	for rule, ds := range digests {
		// The rest of the rule's due messages join the digest.
		more, err := w.cfg.DB.ClaimRuleDeliveries(ctx, w.cfg.Owner, w.lease(), digestMax-len(ds), rule)
		if err != nil {
			return err
		}
		w.start(ctx, append(ds, more...), w.attemptDigest)
	}
	return nil
}

// digestMax bounds the messages of one digest e-mail; more go in the next.
const digestMax = 500

// start tries deliveries ds (one message, or a digest's) in the
// background with try, unless one of them is being tried already.
func (w *Worker) start(ctx context.Context, ds []store.Delivery, try func(context.Context, []store.Delivery)) {
	w.mu.Lock()
	for _, d := range ds {
		if w.inflight[d.ID] {
			w.mu.Unlock()
			return
		}
	}
	for _, d := range ds {
		w.inflight[d.ID] = true
	}
	w.mu.Unlock()
	w.sends.Add(1)
	go func() {
		defer w.sends.Done()
		defer func() {
			w.mu.Lock()
			for _, d := range ds {
				delete(w.inflight, d.ID)
			}
			w.mu.Unlock()
			// Room for the next message: a backlog (a receiver back
			// after a while, a server restarted) is sent at the pace
			// of the receiver, not one handful per poll.
			w.Wake()
		}()
		try(context.WithoutCancel(ctx), ds)
	}()
}

// attempt tries one delivery (ds[0]) once and logs the attempt.
func (w *Worker) attempt(ctx context.Context, ds []store.Delivery) {
	start := time.Now()
	status, err := w.deliver(ctx, ds[0])
	w.record(ctx, ds, start, status, err)
}

// attemptDigest mails the deliveries ds of one digest rule as one
// e-mail and logs the attempt on each.
func (w *Worker) attemptDigest(ctx context.Context, ds []store.Delivery) {
	start := time.Now()
	var status int
	err := errors.New("no SMTP server is set up (serve --smtp-addr HOST:PORT --smtp-from ADDR)")
	if w.cfg.Mail != nil {
		dctx, cancel := context.WithTimeout(ctx, w.cfg.Timeout)
		status, err = w.cfg.Mail.SendDigest(dctx, ds[0].Rule.Email, ds)
		cancel()
	}
	w.record(ctx, ds, start, status, err)
}

// record logs an attempt (its answer status and error) on each of ds and
// sets when each is tried again. A message held for a digest counts its
// day of retries from the latest digest it could wait for.
func (w *Worker) record(ctx context.Context, ds []store.Delivery, start time.Time, status int, err error) {
	a := store.Attempt{At: start, Status: status, Took: time.Since(start)}
	for _, d := range ds {
		var next time.Time
		if err != nil {
			a.Error = err.Error()
			if len(a.Error) > 1000 {
				a.Error = a.Error[:1000] + "…"
			}
			from := d.Created
			if d.Rule.Digest != "" {
				from = from.Add(24 * time.Hour)
			}
			next = nextAttempt(from, time.Now(), d.Attempts+1, w.cfg.RetryBase)
			if errors.Is(err, errHostLeftOut) {
				next = time.Time{} // no retry can succeed
			}
			w.cfg.Log.Warn("alerts: delivery failed", "msg", d.MsgID, "target", d.Rule.Target(), "attempt", d.Attempts+1, "err", err)
		}
		if err := w.cfg.DB.RecordAttempt(ctx, w.cfg.Owner, d.ID, a, next); err != nil {
			w.cfg.Log.Error("alerts: logging an attempt", "msg", d.MsgID, "err", err)
		}
	}
}

// deliver sends d to its rule's destination once.
func (w *Worker) deliver(ctx context.Context, d store.Delivery) (int, error) {
	ctx, cancel := context.WithTimeout(ctx, w.cfg.Timeout)
	defer cancel()
	if d.Rule.Email != "" {
		if w.cfg.Mail == nil {
			return 0, errors.New("no SMTP server is set up (serve --smtp-addr HOST:PORT --smtp-from ADDR)")
		}
		return w.cfg.Mail.Send(ctx, d.Rule.Email, d.MsgID, []byte(d.Payload))
	}
	list, err := w.cfg.DB.WebhookHosts(ctx)
	if err != nil {
		return 0, err
	}
	if u, err := url.Parse(d.Rule.Webhook); err != nil || !store.HostAllowed(list, u.Hostname()) {
		return 0, fmt.Errorf("%w (%s): the message is not sent", errHostLeftOut, strings.Join(list, ", "))
	}
	return SendWebhook(ctx, w.cfg.Client, d.Rule.Webhook, d.Rule.Secret, d.MsgID, []byte(d.Payload), time.Now())
}

// errHostLeftOut is the failure of a message to a webhook whose host the
// plant's allow-list (set after the rule was added) leaves out.
var errHostLeftOut = errors.New("the webhook's host is not among the plant's webhook hosts")

// SendWebhook posts body to url with the Standard Webhooks headers:
// webhook-id msgID, webhook-timestamp now in Unix seconds and
// webhook-signature (see Sign). Any 2xx answer is delivery.
func SendWebhook(ctx context.Context, c *http.Client, url, secret, msgID string, body []byte, now time.Time) (int, error) {
	ts := now.Unix()
	sig, err := Sign(secret, msgID, ts, body)
	if err != nil {
		return 0, fmt.Errorf("the secret %w", err)
	}
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, url, bytes.NewReader(body))
	if err != nil {
		return 0, err
	}
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("User-Agent", "lotwatch-alerts")
	req.Header.Set("webhook-id", msgID)
	req.Header.Set("webhook-timestamp", strconv.FormatInt(ts, 10))
	req.Header.Set("webhook-signature", sig)
	resp, err := c.Do(req)
	if err != nil {
		return 0, err
	}
	defer resp.Body.Close()
	io.Copy(io.Discard, io.LimitReader(resp.Body, 64<<10))
	if resp.StatusCode < 200 || resp.StatusCode > 299 {
		return resp.StatusCode, fmt.Errorf("the receiver answered %s", resp.Status)
	}
	return resp.StatusCode, nil
}

// Test puts a test message for rule in the outbox and wakes the worker:
// it is sent, retried and logged like an alert.
func (w *Worker) Test(ctx context.Context, rule store.AlertRule, now time.Time) error {
	msg := Message{Type: TypeTest, Timestamp: now.UTC().Format(time.RFC3339), Data: LotData{
		ProcessID: rule.ProcessID, Process: rule.Process, Kinds: []string{}, Rules: []string{},
		URL: strings.TrimRight(w.cfg.PublicURL, "/") + "/alerts", Verdict: "test alert"}}
	body, err := encode(msg)
	if err != nil {
		return err
	}
	id := fmt.Sprintf("msg_test_rule%d_%d", rule.ID, now.UnixNano())
	if err := w.cfg.DB.AddDeliveries(ctx, []store.NewDelivery{{MsgID: id, RuleID: rule.ID, Type: TypeTest, Payload: body}}); err != nil {
		return err
	}
	w.Wake()
	return nil
}

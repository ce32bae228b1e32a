package web

import (
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"mime"
	"mime/multipart"
	"net"
	"net/http"
	"net/http/httptest"
	netmail "net/mail"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/emersion/go-smtp"

	"lotwatch/store"
	"lotwatch/web/alert"
)

// hook is one request a test receiver got.
type hook struct {
	id, ts, sig string
	body        []byte
	status      int // what the receiver answered
	problem     string
}

// receiver is a webhook endpoint that checks every request as the
// Standard Webhooks specification says a receiver does, with its own code
// (not lotwatch's): the signed content is "id.timestamp.body", the key
// the base64-decoded rest of a "whsec_" secret or else the secret's
// bytes, the signature HMAC-SHA256 in base64 after "v1,", several
// signatures separated by spaces, and the timestamp within 5 minutes of
// now (the specification's suggested tolerance).
type receiver struct {
	secret string
	mu     sync.Mutex
	hooks  []hook
	down   func(n int) bool // answer 503 to the n-th request (from 0) while true
	srv    *httptest.Server
}

func newReceiver(t *testing.T, secret string) *receiver {
	rc := &receiver{secret: secret}
	rc.srv = httptest.NewServer(http.HandlerFunc(rc.serve))
	t.Cleanup(rc.srv.Close)
	return rc
}

func (rc *receiver) serve(w http.ResponseWriter, r *http.Request) {
	body, _ := io.ReadAll(r.Body)
	h := hook{id: r.Header.Get("webhook-id"), ts: r.Header.Get("webhook-timestamp"), sig: r.Header.Get("webhook-signature"), body: body}
	h.problem = verifyStandardWebhook(rc.secret, h, time.Now())
	rc.mu.Lock()
	defer rc.mu.Unlock()
	h.status = http.StatusNoContent
	if rc.down != nil && rc.down(len(rc.hooks)) {
		h.status = http.StatusServiceUnavailable
	} else if h.problem != "" {
		h.status = http.StatusUnauthorized
	}
	rc.hooks = append(rc.hooks, h)
	w.WriteHeader(h.status)
}

func verifyStandardWebhook(secret string, h hook, now time.Time) string {
	if h.id == "" || h.ts == "" || h.sig == "" {
		return "a webhook header is missing"
	}
	ts, err := strconv.ParseInt(h.ts, 10, 64)
	if err != nil {
		return "webhook-timestamp is not Unix seconds: " + h.ts
	}
	if d := now.Unix() - ts; d > 300 || d < -300 {
		return "webhook-timestamp is more than 5 minutes away"
	}
	key := []byte(secret)
	if strings.HasPrefix(secret, "whsec_") {
		if key, err = base64.StdEncoding.DecodeString(secret[len("whsec_"):]); err != nil {
			return "bad test secret"
		}
	}
	mac := hmac.New(sha256.New, key)
	mac.Write([]byte(h.id + "." + h.ts + "."))
	mac.Write(h.body)
	want := mac.Sum(nil)
	for _, s := range strings.Fields(h.sig) {
		v, b64, ok := strings.Cut(s, ",")
		got, err := base64.StdEncoding.DecodeString(b64)
		if ok && v == "v1" && err == nil && hmac.Equal(got, want) {
			return ""
		}
	}
	return "no signature matches"
}

// delivered returns, per webhook-id, the requests answered 2xx.
func (rc *receiver) delivered() map[string][]hook {
	rc.mu.Lock()
	defer rc.mu.Unlock()
	out := map[string][]hook{}
	for _, h := range rc.hooks {
		if h.status < 300 {
			out[h.id] = append(out[h.id], h)
		}
	}
	return out
}

func (rc *receiver) all() []hook {
	rc.mu.Lock()
	defer rc.mu.Unlock()
	return append([]hook(nil), rc.hooks...)
}

// alertServer is a second server on the test's database that delivers
// alerts, polling often and retrying soon.
func alertServer(t *testing.T, e *testEnv, cfg AlertsConfig) *Server {
	t.Helper()
	if cfg.Poll == 0 {
		cfg.Poll = 20 * time.Millisecond
	}
	cfg.RetryBase = 20 * time.Millisecond
	srv, err := NewServer(Config{DB: e.db, Alerts: cfg, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { defer close(done); srv.RunAlerts(ctx) }()
	t.Cleanup(func() { cancel(); <-done })
	return srv
}

// waitFor polls cond until it holds or the contract's 10 seconds are
// over.
func waitFor(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("%s: not within 10 seconds", what)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

func (e *testEnv) postLot(t *testing.T, code string, defective int) store.Lot {
	t.Helper()
	rec := e.do(req{method: "POST", path: lotsPath(e), token: e.tokens[store.RoleInspector],
		body: fmt.Sprintf(`{"lot":%q,"inspected":200,"defective":%d}`, code, defective)})
	if rec.Code != http.StatusCreated {
		t.Fatalf("post %s: status %d: %s", code, rec.Code, rec.Body.String())
	}
	lots, err := e.db.Lots(context.Background(), e.proc.ID, time.Time{}, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	for _, l := range lots {
		if l.Lot == code {
			return l
		}
	}
	t.Fatalf("lot %s not stored", code)
	return store.Lot{}
}

func (e *testEnv) alertRule(t *testing.T, r store.AlertRule) store.AlertRule {
	t.Helper()
	r.ProcessID = e.proc.ID
	r, err := e.db.AddAlertRule(context.Background(), "engineer1", r)
	if err != nil {
		t.Fatal(err)
	}
	return r
}

// TestAlertWebhooks posts an out-of-limit lot and a lot within limits
// through the API: each webhook rule listening for out_of_limits gets one
// message within 10 seconds, signed as the specification says (checked by
// the receiver's own code, with a plain and a whsec_ secret), carrying the
// fields of the contract; a receiver that fails twice gets the same
// webhook-id on every retry; a rule listening only for run rules gets
// nothing; every attempt is logged and shown on the alerts page.
func TestAlertWebhooks(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return 4 }) // p̄ = 0.02, n = 200: UCL ≈ 0.05 (10 defective)
	plain := newReceiver(t, "plant secret ✓ not base64")
	whsec := newReceiver(t, "whsec_"+base64.StdEncoding.EncodeToString([]byte("0123456789abcdef0123456789abcdef")))
	whsec.down = func(n int) bool { return n < 2 }
	runOnly := newReceiver(t, "run only")
	rPlain := e.alertRule(t, store.AlertRule{Webhook: plain.srv.URL + "/hook", Secret: plain.secret})
	rWhsec := e.alertRule(t, store.AlertRule{Webhook: whsec.srv.URL, Secret: whsec.secret, On: []string{store.TriggerOutOfLimits}})
	rRun := e.alertRule(t, store.AlertRule{Webhook: runOnly.srv.URL, Secret: runOnly.secret, On: []string{store.TriggerRunRule}})
	alertServer(t, e, AlertsConfig{PublicURL: "https://lotwatch.plant.test/"})

	hot := e.postLot(t, "HOT-1", 40) // 0.20, far above the UCL
	e.postLot(t, "OK-1", 4)
	waitFor(t, "both out_of_limits rules reached", func() bool {
		return len(plain.delivered()) == 1 && len(whsec.delivered()) == 1
	})
	for _, rc := range []*receiver{plain, whsec} {
		for _, h := range rc.all() {
			if h.problem != "" {
				t.Errorf("receiver %s: %s", rc.srv.URL, h.problem)
			}
		}
	}
	// The retries carry the same id.
	hs := whsec.all()
	if len(hs) != 3 || hs[0].status != 503 || hs[1].status != 503 || hs[2].id != hs[0].id || hs[1].id != hs[0].id {
		t.Errorf("whsec receiver: want 503, 503, then success with one webhook-id; got %d requests %+v", len(hs), hs)
	}
	want := alert.MsgID(alert.TypeSignal, hot.ID, rWhsec.ID)
	if hs[0].id != want {
		t.Errorf("webhook-id %q, want %q", hs[0].id, want)
	}
	var msg struct {
		Type      string `json:"type"`
		Timestamp string `json:"timestamp"`
		Data      struct {
			ProcessID int64    `json:"process_id"`
			Process   string   `json:"process"`
			Lot       string   `json:"lot"`
			LotID     int64    `json:"lot_id"`
			Time      string   `json:"time"`
			Kinds     []string `json:"kinds"`
			Rules     []string `json:"rules"`
			Value     float64  `json:"value"`
			UCL       float64  `json:"ucl"`
			LCL       float64  `json:"lcl"`
			URL       string   `json:"url"`
		} `json:"data"`
	}
	for id, h := range plain.delivered() {
		if err := json.Unmarshal(h[0].body, &msg); err != nil {
			t.Fatalf("%s: %v", id, err)
		}
	}
	d := msg.Data
	if msg.Type != "lot.signal" || d.ProcessID != e.proc.ID || d.Process != e.proc.Name || d.Lot != "HOT-1" || d.LotID != hot.ID {
		t.Errorf("message: %+v", msg)
	}
	if _, err := time.Parse(time.RFC3339, msg.Timestamp); err != nil {
		t.Errorf("timestamp %q: %v", msg.Timestamp, err)
	}
	if lt, err := time.Parse(time.RFC3339, d.Time); err != nil || !lt.Equal(hot.Time.Truncate(time.Second)) {
		t.Errorf("time %q, want the lot's %v", d.Time, hot.Time)
	}
	// 40/200 (the lot's own figures); the limits bracket the centre.
	if d.Value != 0.2 || !(d.UCL > 0.02 && d.UCL < 0.2 && d.LCL < 0.02) {
		t.Errorf("value %v, limits %v … %v", d.Value, d.LCL, d.UCL)
	}
	if strings.Join(d.Kinds, ",") != "out_of_limits" || strings.Join(d.Rules, ",") != "we1" {
		t.Errorf("kinds %v, rules %v: want out_of_limits by we1", d.Kinds, d.Rules)
	}
	if d.URL != fmt.Sprintf("https://lotwatch.plant.test/lots/%d", hot.ID) {
		t.Errorf("url %q", d.URL)
	}
	// Everything judged; nothing for the run-rule rule.
	waitFor(t, "the outbox judged", func() bool {
		p, err := e.db.HasPendingAlertEvents(context.Background())
		return err == nil && !p
	})
	if ds, _ := e.db.Deliveries(context.Background(), rRun.ID, 10); len(ds) != 0 || len(runOnly.all()) != 0 {
		t.Errorf("the run_rule rule got %d messages", len(ds))
	}
	waitFor(t, "the attempts logged", func() bool {
		ds, _ := e.db.Deliveries(context.Background(), rWhsec.ID, 10)
		return len(ds) == 1 && ds[0].State == store.DeliverySent
	})
	ds, _ := e.db.Deliveries(context.Background(), rWhsec.ID, 10)
	as, err := e.db.Attempts(context.Background(), ds[0].ID)
	if err != nil || len(as) != 3 || as[0].Status != 503 || as[0].Error == "" || as[2].Status != 204 || as[2].Error != "" {
		t.Errorf("attempts %+v (%v)", as, err)
	}
	page := e.do(req{method: "GET", path: "/alerts", cookie: e.signIn(t, "engineer1", testPassword)}).Body.String()
	for _, s := range []string{ds[0].MsgID, "503", plain.srv.URL + "/hook", fmt.Sprintf("Rule %d", rPlain.ID)} {
		if !strings.Contains(page, s) {
			t.Errorf("the alerts page does not show %q", s)
		}
	}
	if strings.Contains(page, plain.secret) {
		t.Error("the alerts page shows a secret")
	}
}

// TestAlertReceiverDownThenUp: while the receiver answers 503, the
// messages are retried; once it is up, every one arrives, once each.
func TestAlertReceiverDownThenUp(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return 4 })
	rc := newReceiver(t, "down then up")
	upNow := make(chan struct{})
	rc.down = func(n int) bool {
		select {
		case <-upNow:
			return false
		default:
			return true
		}
	}
	e.alertRule(t, store.AlertRule{Webhook: rc.srv.URL, Secret: rc.secret})
	alertServer(t, e, AlertsConfig{})
	for i := range 5 {
		e.postLot(t, fmt.Sprintf("HOT-%d", i), 40+i)
	}
	waitFor(t, "every message tried and refused", func() bool {
		ids := map[string]bool{}
		for _, h := range rc.all() {
			ids[h.id] = true
		}
		return len(ids) == 5
	})
	close(upNow)
	waitFor(t, "every message delivered once the receiver is up", func() bool { return len(rc.delivered()) == 5 })
	for id, hs := range rc.delivered() {
		if len(hs) != 1 {
			t.Errorf("%s delivered %d times", id, len(hs))
		}
	}
}

// TestAlertTwoServers runs two servers' workers on one database: the
// claims in the database make each message arrive once.
func TestAlertTwoServers(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return 4 })
	rc := newReceiver(t, "shared")
	e.alertRule(t, store.AlertRule{Webhook: rc.srv.URL, Secret: rc.secret})
	alertServer(t, e, AlertsConfig{Owner: "one", Poll: 5 * time.Millisecond})
	alertServer(t, e, AlertsConfig{Owner: "two", Poll: 5 * time.Millisecond})
	const n = 20
	for i := range n {
		e.postLot(t, fmt.Sprintf("HOT-%d", i), 40+i%10)
	}
	waitFor(t, "every message delivered", func() bool { return len(rc.delivered()) == n })
	waitFor(t, "every delivery recorded", func() bool {
		c, err := e.db.DeliveryCounts(context.Background())
		return err == nil && c[store.DeliverySent] == n
	})
	if hs := rc.all(); len(hs) != n {
		t.Errorf("%d requests for %d messages: a message was sent by both servers", len(hs), n)
	}
}

// smtpBackend is an in-process SMTP server (github.com/emersion/go-smtp)
// keeping every message it receives.
type smtpBackend struct {
	mu   sync.Mutex
	msgs []smtpMsg
}

type smtpMsg struct {
	from string
	to   []string
	data []byte
}

type smtpSession struct {
	b   *smtpBackend
	cur smtpMsg
}

func (b *smtpBackend) NewSession(*smtp.Conn) (smtp.Session, error) { return &smtpSession{b: b}, nil }
func (s *smtpSession) Reset()                                      { s.cur = smtpMsg{} }
func (s *smtpSession) Logout() error                               { return nil }
func (s *smtpSession) Mail(from string, _ *smtp.MailOptions) error { s.cur.from = from; return nil }
func (s *smtpSession) Rcpt(to string, _ *smtp.RcptOptions) error {
	s.cur.to = append(s.cur.to, to)
	return nil
}
func (s *smtpSession) Data(r io.Reader) error {
	b, err := io.ReadAll(r)
	if err != nil {
		return err
	}
	s.cur.data = b
	s.b.mu.Lock()
	s.b.msgs = append(s.b.msgs, s.cur)
	s.b.mu.Unlock()
	return nil
}

// TestAlertEmail sends an out-of-limit lot's alert through a real SMTP
// server on loopback: the subject names process, lot and verdict, and the
// plain-text and HTML parts carry the facts and the link to the lot.
func TestAlertEmail(t *testing.T) {
	be := &smtpBackend{}
	ss := smtp.NewServer(be)
	ss.Domain = "localhost"
	ss.ErrorLog = nil
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	go ss.Serve(ln)
	t.Cleanup(func() { ss.Close() })
	mailer, err := alert.NewMailer(alert.MailConfig{Addr: ln.Addr().String(), From: "lotwatch@plant.test"})
	if err != nil {
		t.Fatal(err)
	}
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return 4 })
	e.alertRule(t, store.AlertRule{Email: "quality@plant.test"})
	alertServer(t, e, AlertsConfig{PublicURL: "https://lotwatch.plant.test", Mail: mailer})
	hot := e.postLot(t, "HOT-9", 40)
	waitFor(t, "the e-mail received", func() bool { be.mu.Lock(); defer be.mu.Unlock(); return len(be.msgs) == 1 })
	m := be.msgs[0]
	if m.from != "lotwatch@plant.test" || len(m.to) != 1 || m.to[0] != "quality@plant.test" {
		t.Errorf("envelope from %q to %v", m.from, m.to)
	}
	msg, err := netmail.ReadMessage(strings.NewReader(string(m.data)))
	if err != nil {
		t.Fatal(err)
	}
	subject, _ := new(mime.WordDecoder).DecodeHeader(msg.Header.Get("Subject"))
	for _, s := range []string{e.proc.Name, "HOT-9", "above the upper control limit"} {
		if !strings.Contains(subject, s) {
			t.Errorf("subject %q lacks %q", subject, s)
		}
	}
	link := fmt.Sprintf("https://lotwatch.plant.test/lots/%d", hot.ID)
	mt, params, err := mime.ParseMediaType(msg.Header.Get("Content-Type"))
	if err != nil || mt != "multipart/alternative" {
		t.Fatalf("content type %q (%v): want multipart/alternative", msg.Header.Get("Content-Type"), err)
	}
	parts := map[string]string{}
	mr := multipart.NewReader(msg.Body, params["boundary"])
	for {
		p, err := mr.NextPart()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(p) // NextPart undoes quoted-printable
		ct, _, _ := mime.ParseMediaType(p.Header.Get("Content-Type"))
		parts[ct] = string(b)
	}
	if p := parts["text/plain"]; !strings.Contains(p, link) || !strings.Contains(p, "HOT-9") || !strings.Contains(p, "above the upper control limit") {
		t.Errorf("plain part lacks the facts or the link:\n%s", p)
	}
	if h := parts["text/html"]; !strings.Contains(h, `href="`+link+`"`) || !strings.Contains(h, "HOT-9") {
		t.Errorf("HTML part lacks the facts or the link:\n%s", h)
	}
}

// TestAlertRuleForm: the page adds a rule; bad input is refused naming
// the field and nothing is stored.
func TestAlertRuleForm(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "engineer1", testPassword)
	post := func(body string) *httptest.ResponseRecorder {
		return e.do(req{method: "POST", path: "/alerts", body: body, form: true, cookie: c, headers: map[string]string{"Sec-Fetch-Site": "same-origin"}})
	}
	pid := strconv.FormatInt(e.proc.ID, 10)
	for _, tc := range []struct{ body, want string }{
		{"process=" + pid + "&target=webhook&webhook=ftp://x/&secret=s&on=out_of_limits", "not an http or https URL"},
		{"process=" + pid + "&target=webhook&webhook=http://127.0.0.1:9/&secret=&on=out_of_limits", "secret"},
		{"process=" + pid + "&target=email&email=not-an-address&on=out_of_limits", "not an e-mail address"},
		{"process=" + pid + "&target=webhook&webhook=http://127.0.0.1:9/&secret=s&on=sometimes", "sometimes"},
		{"process=" + pid + "&target=webhook&webhook=http://127.0.0.1:9/&secret=s&on=unexplained&unexplained_after=soon", "soon"},
		{"process=" + pid + "&target=webhook&webhook=http://127.0.0.1:9/&secret=s&on=out_of_limits&digest_at=06:00", "for e-mail rules only"},
		{"process=" + pid + "&target=email&email=qa@plant.test&on=out_of_limits&digest_at=noon", "not a time of day"},
	} {
		rec := post(tc.body)
		if rec.Code != http.StatusBadRequest || !strings.Contains(rec.Body.String(), tc.want) {
			t.Errorf("%s: status %d, want 400 naming %q", tc.body, rec.Code, tc.want)
		}
	}
	if rs, _ := e.db.AlertRules(context.Background()); len(rs) != 0 {
		t.Fatalf("refused forms stored %d rules", len(rs))
	}
	rec := post("process=" + pid + "&target=webhook&webhook=http://10.1.2.3:8080/hook&secret=s&on=out_of_limits&on=unexplained&unexplained_after=2h")
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("add: status %d: %s", rec.Code, rec.Body.String())
	}
	rs, _ := e.db.AlertRules(context.Background())
	if len(rs) != 1 || rs[0].Webhook != "http://10.1.2.3:8080/hook" || rs[0].UnexplainedAfter != 2*time.Hour || strings.Join(rs[0].On, ",") != "out_of_limits,unexplained" || rs[0].EachLot {
		t.Errorf("stored %+v", rs)
	}
	rec = post("process=" + pid + "&target=webhook&webhook=http://10.1.2.3:8080/runs&secret=s&on=run_rule&each_lot=1")
	if rs, _ := e.db.AlertRules(context.Background()); rec.Code != http.StatusSeeOther || len(rs) != 2 || !rs[1].EachLot {
		t.Errorf("add with each_lot: status %d, stored %+v", rec.Code, rs)
	}
}

// TestAlertUnexplained: an unexplained rule alerts once per lot that
// still needs attention after its delay (measured on the server's clock,
// here a test clock moved on by two hours); a lot whose cause was recorded
// in time is not escalated.
func TestAlertUnexplained(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return 4 })
	rc := newReceiver(t, "escalate")
	r := e.alertRule(t, store.AlertRule{Webhook: rc.srv.URL, Secret: rc.secret, On: []string{store.TriggerUnexplained}, UnexplainedAfter: time.Hour})
	srv, err := NewServer(Config{DB: e.db, Now: e.clock.Now, Logger: slog.New(slog.NewTextHandler(io.Discard, nil)),
		Alerts: AlertsConfig{Poll: 10 * time.Millisecond, RetryBase: 10 * time.Millisecond, EscalateEvery: time.Nanosecond}})
	if err != nil {
		t.Fatal(err)
	}
	hot := e.postLot(t, "HOT-1", 40)
	explained := e.postLot(t, "HOT-2", 45)
	if _, err := e.db.AddAnnotation(context.Background(), "inspector1", store.Annotation{ProcessID: e.proc.ID, LotID: explained.ID, Cause: "die worn"}); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	step := func() {
		if err := srv.alerts.Drain(ctx); err != nil {
			t.Fatal(err)
		}
	}
	step() // judged; within the delay: nothing yet
	step()
	if hs := rc.all(); len(hs) != 0 {
		t.Fatalf("%d messages before the delay ran out", len(hs))
	}
	e.clock.Advance(2 * time.Hour)
	step() // escalates
	step() // sends
	step() // looks again: nothing new
	got := rc.delivered()
	want := alert.MsgID(alert.TypeUnexplained, hot.ID, r.ID)
	if len(got) != 1 || len(got[want]) != 1 {
		t.Fatalf("delivered %v, want one message %s", got, want)
	}
	var msg alert.Message
	if err := json.Unmarshal(got[want][0].body, &msg); err != nil || msg.Type != "lot.unexplained" || msg.Data.Lot != "HOT-1" {
		t.Errorf("message %+v (%v)", msg, err)
	}
	if hs := rc.all(); len(hs) != 1 {
		t.Errorf("%d requests: a lot was escalated more than once", len(hs))
	}
}

// TestFailedAlertShown: a message given up after its day of attempts is
// shown on the status board and on the alerts page.
func TestFailedAlertShown(t *testing.T) {
	e := newTestEnv(t)
	ctx := context.Background()
	r := e.alertRule(t, store.AlertRule{Webhook: "http://127.0.0.1:9/hook", Secret: "s"})
	if err := e.db.AddDeliveries(ctx, []store.NewDelivery{{MsgID: "msg_test_failed", RuleID: r.ID, Type: alert.TypeTest, Payload: "{}"}}); err != nil {
		t.Fatal(err)
	}
	ds, err := e.db.ClaimDeliveries(ctx, "test", time.Minute, 1)
	if err != nil || len(ds) != 1 {
		t.Fatalf("claim: %v %v", ds, err)
	}
	if err := e.db.RecordAttempt(ctx, "test", ds[0].ID, store.Attempt{At: time.Now(), Error: "connection refused"}, time.Time{}); err != nil {
		t.Fatal(err)
	}
	board := e.do(req{method: "GET", path: "/", cookie: e.signIn(t, "viewer1", testPassword)}).Body.String()
	if !strings.Contains(board, "1 alert message was not delivered after a day of attempts") {
		t.Error("the board does not show the failed message")
	}
	page := e.do(req{method: "GET", path: "/alerts", cookie: e.signIn(t, "engineer1", testPassword)}).Body.String()
	for _, s := range []string{"given up after a day", "msg_test_failed", "connection refused", "<strong>failed</strong>"} {
		if !strings.Contains(page, s) {
			t.Errorf("the alerts page does not show %q", s)
		}
	}
}

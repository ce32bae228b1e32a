package web

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"mime"
	"mime/multipart"
	"net"
	"net/http"
	netmail "net/mail"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/emersion/go-smtp"

	"lotwatch/spc"
	"lotwatch/spc/chartjson"
	"lotwatch/store"
	"lotwatch/web/alert"
)

// freezeAt freezes sigma limits (k = 3) around centre p, in force from
// the start of 2026, so that the tests' lots are judged against fixed
// limits: with lots of 200 at p = 0.02, σ = √(0.02·0.98/200) = 0.0099,
// the UCL is 0.0497 (9.9 defective) and 1σ above the centre is 0.0299
// (6 defective). Formulas: Montgomery, Introduction to Statistical
// Quality Control, p chart (from memory).
func (e *testEnv) freezeAt(t *testing.T, p float64, from time.Time, why string) {
	t.Helper()
	if _, err := e.db.FreezeLimitSet(t.Context(), "engineer1", store.LimitSet{ProcessID: e.proc.ID, Method: spc.MethodSigma, K: 3,
		Center: p, SigmaZ: 1, EffectiveFrom: from, Reason: why}); err != nil {
		t.Fatal(err)
	}
}

var start2026 = time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)

// lotMsg reads a lot.signal body.
func lotMsg(t *testing.T, h hook) alert.Message {
	t.Helper()
	var m alert.Message
	if err := json.Unmarshal(h.body, &m); err != nil {
		t.Fatalf("%s: %v", h.id, err)
	}
	return m
}

// drain runs an alert worker of the test's server to the end of its work,
// step by step, as often as asked.
func drain(t *testing.T, srv *Server, n int) {
	t.Helper()
	for range n {
		if err := srv.alerts.Drain(context.Background()); err != nil {
			t.Fatal(err)
		}
	}
}

func quietServer(t *testing.T, e *testEnv) *Server {
	t.Helper()
	srv, err := NewServer(Config{DB: e.db, Now: e.clock.Now, Logger: slog.New(slog.NewTextHandler(io.Discard, nil)),
		Alerts: AlertsConfig{PublicURL: "https://lotwatch.plant.test", RetryBase: time.Millisecond}})
	if err != nil {
		t.Fatal(err)
	}
	return srv
}

// TestAlertSignalStartsOnce: 10 lots in a row above the centre line (5 of
// 200 against a frozen centre of 2 %, within 1σ, so only the 8-in-a-row
// rule, Western Electric 4, can signal) are one signal. It starts at the
// 8th lot (the Western Electric handbook's rule: 8 successive points on
// one side); the rule as set by default hears of that lot only, a rule
// asking for every lot hears of the 8th, 9th and 10th, the later ones
// saying that they extend the signal.
func TestAlertSignalStartsOnce(t *testing.T) {
	e := newTestEnv(t)
	e.freezeAt(t, 0.02, start2026, "the customer's 2 %")
	e.addLots(t, 20, func(int) int64 { return 4 }) // on the centre line
	once := newReceiver(t, "start only")
	every := newReceiver(t, "every lot")
	rOnce := e.alertRule(t, store.AlertRule{Webhook: once.srv.URL, Secret: once.secret})
	e.alertRule(t, store.AlertRule{Webhook: every.srv.URL, Secret: every.secret, EachLot: true})
	srv := quietServer(t, e)
	var lots []store.Lot
	for i := range 10 {
		lots = append(lots, e.postLot(t, fmt.Sprintf("P%02d", i+1), 5))
		if i%3 == 0 { // judged in batches of several lots and of one
			drain(t, srv, 2)
		}
	}
	drain(t, srv, 3)
	got := once.delivered()
	want := alert.MsgID(alert.TypeSignal, lots[7].ID, rOnce.ID)
	if len(got) != 1 || len(got[want]) != 1 {
		t.Fatalf("the default rule got %d messages %v, want one about P08", len(got), keys(got))
	}
	m := lotMsg(t, got[want][0])
	if m.Data.Lot != "P08" || strings.Join(m.Data.Kinds, ",") != "run_rule" || strings.Join(m.Data.Rules, ",") != "we4" {
		t.Errorf("message %+v", m.Data)
	}
	var each []string
	for _, hs := range every.delivered() {
		m := lotMsg(t, hs[0])
		each = append(each, m.Data.Lot)
		if (m.Data.Lot != "P08") != strings.Contains(m.Data.Verdict, "extends") {
			t.Errorf("%s: verdict %q", m.Data.Lot, m.Data.Verdict)
		}
	}
	slices.Sort(each)
	if strings.Join(each, ",") != "P08,P09,P10" {
		t.Errorf("the every-lot rule heard of %v, want P08, P09, P10", each)
	}
	for _, rc := range []*receiver{once, every} {
		for _, h := range rc.all() {
			if h.problem != "" {
				t.Errorf("%s", h.problem)
			}
		}
	}
}

func keys(m map[string][]hook) []string {
	var out []string
	for k := range m {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}

// TestAlertShiftSignal: a process watched by a CUSUM and an EWMA (as in
// TestShiftSignalsOnTheChart: 1 % in lots of 200, then a sustained rise
// to about 2.6 % that no lot shows beyond its limit) has lots posted
// through the API; a rule listening for shift only gets, for each shift
// signal of the chart, one signed lot.signal naming the lot where it
// starts (where the CUSUM reaches h, where the EWMA first leaves its
// limits), of kind "shift" and rule cusum or ewma, and nothing else.
func TestAlertShiftSignal(t *testing.T) {
	e := newTestEnv(t)
	ctx := t.Context()
	p := e.proc
	p.Monitors = spc.Monitors{CUSUMShift: 0.02, EWMALambda: 0.2}
	p, err := e.db.UpdateProcess(ctx, "setup", "watch for a small rise", p)
	if err != nil {
		t.Fatal(err)
	}
	e.proc = p
	e.freezeAt(t, 0.01, start2026, "the customer's 1 %")
	e.addLots(t, 40, func(i int) int64 { return int64([]int{2, 1, 3, 2, 2}[i%5]) })
	rc := newReceiver(t, "whsec_"+"c2hpZnQgd2F0Y2ggc2VjcmV0IGtleQ==")
	r := e.alertRule(t, store.AlertRule{Webhook: rc.srv.URL, Secret: rc.secret, On: []string{store.TriggerShift}})
	alertServer(t, e, AlertsConfig{})
	for i := range 25 {
		e.postLot(t, fmt.Sprintf("S%02d", i), []int{5, 6, 4, 6, 5}[i%5])
	}
	// Where the chart says the shift signals start.
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/api/v1/processes/%d/chart", p.ID), token: e.tokens[store.RoleViewer]})
	var chart chartjson.Chart
	if err := json.Unmarshal(rec.Body.Bytes(), &chart); err != nil {
		t.Fatal(err)
	}
	starts := map[string][]string{} // lot → rules
	for _, s := range chart.Signals {
		switch s.Rule {
		case "cusum":
			starts[s.Lots[len(s.Lots)-1]] = append(starts[s.Lots[len(s.Lots)-1]], s.Rule)
		case "ewma":
			starts[s.Lots[0]] = append(starts[s.Lots[0]], s.Rule)
		}
	}
	if len(starts) == 0 {
		t.Fatalf("no shift signal on the chart: %+v", chart.Signals)
	}
	waitFor(t, "a message per lot where a shift signal starts", func() bool { return len(rc.delivered()) == len(starts) })
	for id, hs := range rc.delivered() {
		if hs[0].problem != "" {
			t.Errorf("%s: %s", id, hs[0].problem)
		}
		m := lotMsg(t, hs[0])
		want, ok := starts[m.Data.Lot]
		if m.Type != "lot.signal" || !ok || !slices.Contains(m.Data.Kinds, "shift") || id != alert.MsgID(alert.TypeSignal, m.Data.LotID, r.ID) {
			t.Errorf("message %s %+v: want a lot.signal of kind shift at one of %v", id, m, starts)
			continue
		}
		for _, rule := range want {
			if !slices.Contains(m.Data.Rules, rule) {
				t.Errorf("%s: rules %v lack %s", m.Data.Lot, m.Data.Rules, rule)
			}
		}
	}
}

// TestAlertImportOneMessage: a file of 600 lots uploaded on the page, 3 of
// them beyond the UCL (40 of 200 against a centre of 2 %), raises one
// lots.signal message per rule naming the 3, not one message per lot;
// freezing limits that judge the imported lots again (a centre of 0.4 %,
// under which 4 of 200 is beyond the UCL of 1.74 %) raises one message
// listing the first 20 of the 600 lots it finds out of limits and
// counting the rest.
func TestAlertImportOneMessage(t *testing.T) {
	e := newTestEnv(t)
	e.freezeAt(t, 0.02, start2026, "the customer's 2 %")
	rc := newReceiver(t, "import")
	r := e.alertRule(t, store.AlertRule{Webhook: rc.srv.URL, Secret: rc.secret})
	srv := quietServer(t, e)
	var b strings.Builder
	b.WriteString("lot,time,inspected,defective\n")
	t0 := time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)
	hot := map[int]bool{100: true, 300: true, 500: true}
	for i := range 600 {
		d := 4
		if hot[i] {
			d = 40
		}
		fmt.Fprintf(&b, "F%04d,%s,200,%d\n", i, t0.Add(time.Duration(i)*time.Minute).Format(time.RFC3339), d)
	}
	c := e.signIn(t, "inspector1", testPassword)
	action := confirmAction(t, e.uploadFile(c, b.String()))
	if rec := e.do(req{method: "POST", path: action, cookie: c, form: true, headers: sameOriginForm()}); rec.Code != http.StatusOK {
		t.Fatalf("confirm: status %d", rec.Code)
	}
	drain(t, srv, 3)
	got := rc.delivered()
	if len(got) != 1 {
		t.Fatalf("%d messages for one imported file, want 1: %v", len(got), keys(got))
	}
	var m alert.BatchMessage
	for id, hs := range got {
		if err := json.Unmarshal(hs[0].body, &m); err != nil {
			t.Fatal(err)
		}
		if hs[0].problem != "" || !strings.HasPrefix(id, "msg_batch") || !strings.HasSuffix(id, fmt.Sprintf("_rule%d", r.ID)) {
			t.Errorf("%s: %s", id, hs[0].problem)
		}
	}
	d := m.Data
	var listed []string
	for _, l := range d.Lots {
		listed = append(listed, l.Lot)
	}
	if m.Type != "lots.signal" || d.Change != "import" || d.Judged != 600 || d.Signalling != 3 || d.Counts["out_of_limits"] != 3 ||
		strings.Join(listed, ",") != "F0100,F0300,F0500" || d.More != 0 || !strings.Contains(d.Cause, "600 lots imported by inspector1") ||
		d.URL != fmt.Sprintf("https://lotwatch.plant.test/processes/%d", e.proc.ID) {
		t.Errorf("import message %+v", d)
	}
	e.freezeAt(t, 0.004, t0, "new supplier, tighter")
	drain(t, srv, 3)
	got = rc.delivered()
	if len(got) != 2 {
		t.Fatalf("%d messages after the freeze, want 2", len(got))
	}
	for _, hs := range got {
		var m alert.BatchMessage // a fresh one each: the lists must not share memory
		if err := json.Unmarshal(hs[0].body, &m); err != nil {
			t.Fatal(err)
		}
		if m.Data.Change == "limits" {
			d = m.Data
		}
	}
	if d.Change != "limits" || d.Judged != 600 || d.Signalling != 600 || len(d.Lots) != alert.BatchListed || d.More != 600-alert.BatchListed ||
		d.Lots[0].Lot != "F0000" || !strings.Contains(d.Cause, "limit set 2 frozen by engineer1: new supplier, tighter") {
		t.Errorf("limits message: %d judged, %d signalling, %d listed (first %s), %d more, cause %q", d.Judged, d.Signalling, len(d.Lots), d.Lots[0].Lot, d.More, d.Cause)
	}
}

// TestAlertCorrectionAndVoid: correcting a lot posted within limits to a
// count beyond the UCL raises its lot.signal, saying it was corrected; a
// correction of a lot already alerted raises nothing new; voiding the one
// lot below the centre line that broke a run of 8 above it completes the
// run (Western Electric 4) at its 8th lot, which is alerted, saying the
// void caused it.
func TestAlertCorrectionAndVoid(t *testing.T) {
	e := newTestEnv(t)
	e.freezeAt(t, 0.02, start2026, "the customer's 2 %")
	e.addLots(t, 20, func(int) int64 { return 4 })
	rc := newReceiver(t, "changes")
	r := e.alertRule(t, store.AlertRule{Webhook: rc.srv.URL, Secret: rc.secret})
	srv := quietServer(t, e)
	ctx := t.Context()
	ok := e.postLot(t, "C01", 4)
	e.postLot(t, "C02", 2) // below the centre line: no run goes on across it
	drain(t, srv, 2)
	if n := len(rc.all()); n != 0 {
		t.Fatalf("%d messages for a lot within limits", n)
	}
	in := ok.LotInput
	in.Count = 40
	if _, err := e.db.CorrectLot(ctx, "inspector1", "count misread", ok.ID, in); err != nil {
		t.Fatal(err)
	}
	drain(t, srv, 2)
	hs := rc.delivered()[alert.MsgID(alert.TypeSignal, ok.ID, r.ID)]
	if len(hs) != 1 {
		t.Fatalf("corrected lot: %d messages", len(hs))
	}
	if m := lotMsg(t, hs[0]); m.Data.Lot != "C01" || m.Data.Cause != "lot C01 corrected by inspector1: count misread" || strings.Join(m.Data.Kinds, ",") != "out_of_limits" {
		t.Errorf("message %+v", m.Data)
	}
	in.Count, in.Note = 41, "recounted"
	if _, err := e.db.CorrectLot(ctx, "inspector1", "recounted", ok.ID, in); err != nil {
		t.Fatal(err)
	}
	drain(t, srv, 2)
	if n := len(rc.all()); n != 1 {
		t.Fatalf("%d messages after a second correction of an alerted lot, want still 1", n)
	}
	// The run: 7 above the centre, one below, one above: no 8 in a row.
	var run []store.Lot
	for i := range 9 {
		d := 5
		if i == 7 {
			d = 2
		}
		run = append(run, e.postLot(t, fmt.Sprintf("V%02d", i), d))
	}
	drain(t, srv, 2)
	if n := len(rc.all()); n != 1 {
		t.Fatalf("%d messages before the void, want still 1", n)
	}
	if err := e.db.VoidLot(ctx, "engineer1", "sample from the wrong line", run[7].ID); err != nil {
		t.Fatal(err)
	}
	drain(t, srv, 2)
	hs = rc.delivered()[alert.MsgID(alert.TypeSignal, run[8].ID, r.ID)]
	if len(hs) != 1 || len(rc.all()) != 2 {
		t.Fatalf("after the void: %d messages %v, want one more about V08", len(rc.all()), keys(rc.delivered()))
	}
	if m := lotMsg(t, hs[0]); m.Data.Cause != "lot V07 voided by engineer1: sample from the wrong line" || strings.Join(m.Data.Rules, ",") != "we4" {
		t.Errorf("message %+v", m.Data)
	}
}

// TestAlertHostLeftOut: a rule added before the plant's webhook hosts
// were restricted keeps its place, but its messages are not sent: each
// fails at once (no retries for a day) with the reason on the Alerts
// page, and the receiver gets nothing. The Alerts page names the hosts.
func TestAlertHostLeftOut(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(int) int64 { return 4 })
	rc := newReceiver(t, "left out")
	r := e.alertRule(t, store.AlertRule{Webhook: rc.srv.URL, Secret: rc.secret})
	if _, err := e.db.SetWebhookHosts(t.Context(), "admin", "plant data stays on site", "chat.plant.example"); err != nil {
		t.Fatal(err)
	}
	srv := quietServer(t, e)
	e.postLot(t, "HOT-1", 40)
	drain(t, srv, 3)
	ds, err := e.db.Deliveries(t.Context(), r.ID, 10)
	if err != nil || len(ds) != 1 || ds[0].State != store.DeliveryFailed || ds[0].Attempts != 1 || !strings.Contains(ds[0].LastError, "not among the plant's webhook hosts") {
		t.Fatalf("deliveries %+v (%v): want one failed at its first attempt", ds, err)
	}
	if n := len(rc.all()); n != 0 {
		t.Errorf("the receiver got %d requests", n)
	}
	page := e.do(req{method: "GET", path: "/alerts", cookie: e.signIn(t, "engineer1", testPassword)}).Body.String()
	for _, s := range []string{"not among the plant&#39;s webhook hosts", "chat.plant.example"} {
		if !strings.Contains(page, s) {
			t.Errorf("the alerts page does not show %q", s)
		}
	}
}

// TestAlertEmailDigest: an e-mail rule with a daily digest holds its
// messages until the digest time in the process's zone (a time an hour
// before now: tomorrow), then sends those due as one e-mail through a
// real SMTP server: the subject counts them, both parts list each lot
// with its link, and every message is logged as sent by that one attempt.
func TestAlertEmailDigest(t *testing.T) {
	be, mailer := smtpServer(t)
	for _, due := range []bool{false, true} {
		e := newTestEnv(t)
		e.addLots(t, 30, func(int) int64 { return 4 })
		loc := e.proc.Location()
		at := e.clock.Now().In(loc).Add(-time.Hour).Format("15:04")
		r := e.alertRule(t, store.AlertRule{Email: "digest@plant.test", Digest: at})
		if due { // the server's clock two days back: its next digest time is past
			e.clock.Advance(-48 * time.Hour)
		}
		srv, err := NewServer(Config{DB: e.db, Now: e.clock.Now, Logger: slog.New(slog.NewTextHandler(io.Discard, nil)),
			Alerts: AlertsConfig{PublicURL: "https://lotwatch.plant.test", Mail: mailer, RetryBase: time.Millisecond}})
		if err != nil {
			t.Fatal(err)
		}
		var hot []store.Lot
		for i := range 3 {
			hot = append(hot, e.postLot(t, fmt.Sprintf("HOT-%d", i), 40+i))
		}
		drain(t, srv, 3)
		ds, err := e.db.Deliveries(t.Context(), r.ID, 10)
		if err != nil || len(ds) != 3 {
			t.Fatalf("deliveries %+v (%v)", ds, err)
		}
		if !due {
			n := e.clock.Now().In(loc)
			hm, _ := time.Parse("15:04", at)
			want := time.Date(n.Year(), n.Month(), n.Day()+1, hm.Hour(), hm.Minute(), 0, 0, loc)
			for _, d := range ds {
				if d.State != store.DeliveryPending || !d.NextAt.Equal(want) {
					t.Errorf("%s: %s, next at %v, want pending until %v", d.MsgID, d.State, d.NextAt, want)
				}
			}
			if n := be.count(); n != 0 {
				t.Fatalf("%d e-mails before the digest time", n)
			}
			continue
		}
		for _, d := range ds {
			if as, _ := e.db.Attempts(t.Context(), d.ID); d.State != store.DeliverySent || len(as) != 1 {
				t.Errorf("%s: %s after %d attempts", d.MsgID, d.State, len(as))
			}
		}
		if n := be.count(); n != 1 {
			t.Fatalf("%d e-mails, want one digest", n)
		}
		subject, parts := decodeMail(t, be.msgs[0].data)
		if want := "lotwatch digest: " + e.proc.Name + ", 3 alerts"; subject != want {
			t.Errorf("subject %q, want %q", subject, want)
		}
		for _, l := range hot {
			link := fmt.Sprintf("https://lotwatch.plant.test/lots/%d", l.ID)
			if !strings.Contains(parts["text/plain"], link) || !strings.Contains(parts["text/plain"], l.Lot) || !strings.Contains(parts["text/html"], `href="`+link+`"`) {
				t.Errorf("the digest lacks lot %s or its link %s:\n%s", l.Lot, link, parts["text/plain"])
			}
		}
	}
}

// smtpServer starts an in-process SMTP server on loopback (see
// smtpBackend) and a Mailer sending to it.
func smtpServer(t *testing.T) (*smtpBackend, *alert.Mailer) {
	t.Helper()
	be := &smtpBackend{}
	ss := smtp.NewServer(be)
	ss.Domain = "localhost"
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
	return be, mailer
}

func (b *smtpBackend) count() int {
	b.mu.Lock()
	defer b.mu.Unlock()
	return len(b.msgs)
}

// decodeMail reads a received e-mail: its decoded subject and its parts
// by content type.
func decodeMail(t *testing.T, data []byte) (string, map[string]string) {
	t.Helper()
	msg, err := netmail.ReadMessage(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	subject, _ := new(mime.WordDecoder).DecodeHeader(msg.Header.Get("Subject"))
	_, params, err := mime.ParseMediaType(msg.Header.Get("Content-Type"))
	if err != nil {
		t.Fatal(err)
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
		b, _ := io.ReadAll(p)
		ct, _, _ := mime.ParseMediaType(p.Header.Get("Content-Type"))
		parts[ct] = string(b)
	}
	return subject, parts
}

// TestAlertSettingsChange: narrowing the trial limits of a process from 3
// to 2 standard deviations puts its one high lot (9 of 200 against a
// centre of 2.125 %: UCL 5.19 % at 3σ, 4.17 % at 2σ, from the binomial
// standard error) out of limits, and raises one lots.signal message per
// rule, change "settings", naming that lot and the change (and the run of
// lots below the centre line, which signals under either width: the
// message states the judging after the change); a new description, which
// judges nothing differently, raises none.
func TestAlertSettingsChange(t *testing.T) {
	e := newTestEnv(t)
	lots := e.addLots(t, 20, func(i int) int64 {
		if i == 12 {
			return 9
		}
		return 4
	})
	rc := newReceiver(t, "settings")
	e.alertRule(t, store.AlertRule{Webhook: rc.srv.URL, Secret: rc.secret})
	srv := quietServer(t, e)
	p := e.proc
	p.Description = "left die"
	p, err := e.db.UpdateProcess(t.Context(), "engineer1", "describe", p)
	if err != nil {
		t.Fatal(err)
	}
	drain(t, srv, 3)
	if got := rc.delivered(); len(got) != 0 {
		t.Fatalf("%d messages after a new description, want none", len(got))
	}
	p.K = 2
	if _, err := e.db.UpdateProcess(t.Context(), "engineer1", "tighter watch after the complaint", p); err != nil {
		t.Fatal(err)
	}
	drain(t, srv, 3)
	got := rc.delivered()
	if len(got) != 1 {
		t.Fatalf("%d messages after narrower limits, want 1", len(got))
	}
	for _, hs := range got {
		var m alert.BatchMessage
		if err := json.Unmarshal(hs[0].body, &m); err != nil {
			t.Fatal(err)
		}
		d := m.Data
		var out []string
		for _, l := range d.Lots {
			if slices.Contains(l.Kinds, "out_of_limits") {
				out = append(out, l.Lot)
			}
		}
		if m.Type != "lots.signal" || d.Change != "settings" || d.Judged != 20 || d.Counts["out_of_limits"] != 1 || fmt.Sprint(out) != "["+lots[12].Lot+"]" ||
			!strings.Contains(d.Cause, "changed by engineer1: tighter watch after the complaint") {
			t.Errorf("settings message %+v", d)
		}
	}
}

package alert

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"html/template"
	"net"
	"strconv"
	"strings"
	textTemplate "text/template"
	"time"

	mail "github.com/wneessen/go-mail"

	"lotwatch/store"
)

// MailConfig is the SMTP server alerts are sent through.
type MailConfig struct {
	Addr string // HOST:PORT
	From string // the sender address
	// User and Password, when User is set, log in to the server
	// (the mechanism the server offers; STARTTLS is used when offered).
	User, Password string
}

// Mailer sends alerts by e-mail.
type Mailer struct {
	cfg  MailConfig
	host string
	port int
}

// NewMailer checks the configuration.
func NewMailer(cfg MailConfig) (*Mailer, error) {
	host, ps, err := net.SplitHostPort(cfg.Addr)
	if err != nil || host == "" {
		return nil, fmt.Errorf("--smtp-addr %q: want HOST:PORT", cfg.Addr)
	}
	port, err := strconv.Atoi(ps)
	if err != nil || port < 1 || port > 65535 {
		return nil, fmt.Errorf("--smtp-addr %q: the port is not a number from 1 to 65535", cfg.Addr)
	}
	if cfg.From == "" {
		return nil, errors.New("--smtp-from is required with --smtp-addr")
	}
	if err := mail.NewMsg().From(cfg.From); err != nil {
		return nil, fmt.Errorf("--smtp-from %q: not an e-mail address", cfg.From)
	}
	return &Mailer{cfg: cfg, host: host, port: port}, nil
}

// Send mails the message (a webhook body, see Message) to one address.
// The Message-ID is derived from msgID, so repeats can be recognised. It
// returns the server's reply code when the server refused.
func (m *Mailer) Send(ctx context.Context, to, msgID string, body []byte) (int, error) {
	msg, err := readMail(body)
	if err != nil {
		return 0, err
	}
	em, err := m.compose(to, msgID, msg)
	if err != nil {
		return 0, err
	}
	return m.send(ctx, em)
}

// send hands em to the SMTP server.
func (m *Mailer) send(ctx context.Context, em *mail.Msg) (int, error) {
	opts := []mail.Option{mail.WithPort(m.port), mail.WithTLSPolicy(mail.TLSOpportunistic), mail.WithTimeout(30 * time.Second)}
	if m.cfg.User != "" {
		opts = append(opts, mail.WithSMTPAuth(mail.SMTPAuthAutoDiscover), mail.WithUsername(m.cfg.User), mail.WithPassword(m.cfg.Password))
	}
	c, err := mail.NewClient(m.host, opts...)
	if err != nil {
		return 0, err
	}
	if err := c.DialAndSendWithContext(ctx, em); err != nil {
		var se *mail.SendError
		if errors.As(err, &se) {
			return se.ErrorCode(), err
		}
		return 0, err
	}
	return 250, nil
}

// mailFacts is what an e-mail says: a message about one lot, or (Batch
// set) about a change that judged many.
type mailFacts struct {
	Type  string
	Data  LotData
	Batch *BatchData
}

// readMail reads a stored message body (a webhook body) for mailing.
func readMail(body []byte) (mailFacts, error) {
	var head struct {
		Type string          `json:"type"`
		Data json.RawMessage `json:"data"`
	}
	err := json.Unmarshal(body, &head)
	f := mailFacts{Type: head.Type}
	if err == nil && head.Type == TypeBatch {
		f.Batch = &BatchData{}
		err = json.Unmarshal(head.Data, f.Batch)
	} else if err == nil {
		err = json.Unmarshal(head.Data, &f.Data)
	}
	if err != nil {
		return mailFacts{}, fmt.Errorf("the stored message is unreadable: %w", err)
	}
	return f, nil
}

// Subject is the e-mail subject of a message: process, lot and verdict
// (for a batch, the process, the change and how many lots signal).
func Subject(msg Message) string {
	return mailFacts{Type: msg.Type, Data: msg.Data}.subject()
}

func (f mailFacts) subject() string {
	if b := f.Batch; b != nil {
		lots := "lots signal"
		if b.Signalling == 1 {
			lots = "lot signals"
		}
		return fmt.Sprintf("lotwatch: %s: %d %s after %s", b.Process, b.Signalling, lots, b.Cause)
	}
	d := f.Data
	switch f.Type {
	case TypeTest:
		return fmt.Sprintf("lotwatch test alert for %s", d.Process)
	case TypeUnexplained:
		return fmt.Sprintf("lotwatch: %s lot %s still unexplained: %s", d.Process, d.Lot, d.Verdict)
	}
	return fmt.Sprintf("lotwatch: %s lot %s %s", d.Process, d.Lot, d.Verdict)
}

var plainMail = textTemplate.Must(textTemplate.New("plain").Parse(`{{if .Batch}}{{with .Batch}}Process:  {{.Process}}
Change:   {{.Cause}}
Verdict:  {{.Verdict}}
{{range .Lots}}
- lot {{.Lot}} (logged {{.Time}}): {{.Verdict}}; value {{.Value}} (limits {{.LCL}} to {{.UCL}}) {{.URL}}{{end}}
{{if .More}}
… and {{.More}} more signalling lots: see the chart.
{{end}}
Open the chart: {{.URL}}
{{end}}{{else if eq .Type "alert.test"}}This is a test alert from lotwatch for process {{.Data.Process}}: the rule's e-mail address is reached.
{{else}}Process:  {{.Data.Process}}
Lot:      {{.Data.Lot}} (logged {{.Data.Time}})
Verdict:  {{.Data.Verdict}}
Value:    {{.Data.Value}} (limits {{.Data.LCL}} to {{.Data.UCL}})
{{with .Data.Cause}}Judged again after: {{.}}
{{end}}{{if eq .Type "lot.unexplained"}}
No cause has been recorded for this lot yet. Recording one on the lot page
stops these reminders.
{{end}}
Open the lot: {{.Data.URL}}
{{end}}
A chart in control is not proof that the product meets its specification;
follow the plant's quality system for release and containment.
`))

var htmlMail = template.Must(template.New("html").Parse(`<!doctype html>
<html><body>
{{if .Batch}}{{with .Batch}}<table>
<tr><th align="left">Process</th><td>{{.Process}}</td></tr>
<tr><th align="left">Change</th><td>{{.Cause}}</td></tr>
<tr><th align="left">Verdict</th><td>{{.Verdict}}</td></tr>
</table>
<ul>{{range .Lots}}<li><a href="{{.URL}}">lot {{.Lot}}</a> (logged {{.Time}}): {{.Verdict}}; value {{.Value}} (limits {{.LCL}} to {{.UCL}})</li>{{end}}</ul>
{{if .More}}<p>… and {{.More}} more signalling lots: see the chart.</p>{{end}}
<p><a href="{{.URL}}">Open the chart in lotwatch</a></p>
{{end}}{{else if eq .Type "alert.test"}}<p>This is a test alert from lotwatch for process <b>{{.Data.Process}}</b>: the rule's e-mail address is reached.</p>
{{else}}<table>
<tr><th align="left">Process</th><td>{{.Data.Process}}</td></tr>
<tr><th align="left">Lot</th><td>{{.Data.Lot}} (logged {{.Data.Time}})</td></tr>
<tr><th align="left">Verdict</th><td>{{.Data.Verdict}}</td></tr>
<tr><th align="left">Value</th><td>{{.Data.Value}} (limits {{.Data.LCL}} to {{.Data.UCL}})</td></tr>
{{with .Data.Cause}}<tr><th align="left">Judged again after</th><td>{{.}}</td></tr>{{end}}
</table>
{{if eq .Type "lot.unexplained"}}<p>No cause has been recorded for this lot yet. Recording one on the lot page stops these reminders.</p>{{end}}
<p><a href="{{.Data.URL}}">Open the lot in lotwatch</a></p>
{{end}}<p><small>A chart in control is not proof that the product meets its specification; follow the plant's quality system for release and containment.</small></p>
</body></html>
`))

// compose builds the e-mail: the subject, a plain-text part and an HTML
// part with the same facts and the link.
func (m *Mailer) compose(to, msgID string, msg mailFacts) (*mail.Msg, error) {
	em := mail.NewMsg()
	if err := em.From(m.cfg.From); err != nil {
		return nil, err
	}
	if err := em.To(to); err != nil {
		return nil, err
	}
	em.Subject(msg.subject())
	em.SetMessageIDWithValue(strings.ReplaceAll(msgID, "@", "_") + "@lotwatch")
	em.SetDate()
	var plain, html bytes.Buffer
	if err := plainMail.Execute(&plain, msg); err != nil {
		return nil, err
	}
	if err := htmlMail.Execute(&html, msg); err != nil {
		return nil, err
	}
	em.SetBodyString(mail.TypeTextPlain, plain.String())
	em.AddAlternativeString(mail.TypeTextHTML, html.String())
	return em, nil
}

// digestItem is one message of a digest e-mail.
type digestItem struct {
	Subject, URL, Cause string
}

var plainDigest = textTemplate.Must(textTemplate.New("plain").Parse(`The alerts of process {{.Process}} since the last digest ({{len .Items}}):
{{range .Items}}
- {{.Subject}}{{with .Cause}}
  judged again after: {{.}}{{end}}
  {{.URL}}
{{end}}
A chart in control is not proof that the product meets its specification;
follow the plant's quality system for release and containment.
`))

var htmlDigest = template.Must(template.New("html").Parse(`<!doctype html>
<html><body>
<p>The alerts of process <b>{{.Process}}</b> since the last digest ({{len .Items}}):</p>
<ul>{{range .Items}}<li><a href="{{.URL}}">{{.Subject}}</a>{{with .Cause}} (judged again after: {{.}}){{end}}</li>
{{end}}</ul>
<p><small>A chart in control is not proof that the product meets its specification; follow the plant's quality system for release and containment.</small></p>
</body></html>
`))

// SendDigest mails the messages ds of one digest rule as one e-mail: the
// subject counts them, each is listed with its own subject line and link.
func (m *Mailer) SendDigest(ctx context.Context, to string, ds []store.Delivery) (int, error) {
	data := struct {
		Process string
		Items   []digestItem
	}{Process: ds[0].Rule.Process}
	for _, d := range ds {
		f, err := readMail([]byte(d.Payload))
		if err != nil {
			return 0, err
		}
		it := digestItem{Subject: strings.TrimPrefix(f.subject(), "lotwatch: "), URL: f.Data.URL, Cause: f.Data.Cause}
		if f.Batch != nil {
			it.URL = f.Batch.URL
		}
		data.Items = append(data.Items, it)
	}
	em := mail.NewMsg()
	if err := em.From(m.cfg.From); err != nil {
		return 0, err
	}
	if err := em.To(to); err != nil {
		return 0, err
	}
	alerts := "alerts"
	if len(ds) == 1 {
		alerts = "alert"
	}
	em.Subject(fmt.Sprintf("lotwatch digest: %s, %d %s", data.Process, len(ds), alerts))
	em.SetMessageIDWithValue(strings.ReplaceAll(ds[0].MsgID, "@", "_") + fmt.Sprintf(".digest%d@lotwatch", len(ds)))
	em.SetDate()
	var plain, html bytes.Buffer
	if err := plainDigest.Execute(&plain, data); err != nil {
		return 0, err
	}
	if err := htmlDigest.Execute(&html, data); err != nil {
		return 0, err
	}
	em.SetBodyString(mail.TypeTextPlain, plain.String())
	em.AddAlternativeString(mail.TypeTextHTML, html.String())
	return m.send(ctx, em)
}

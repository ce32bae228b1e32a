// Package alert delivers the alerts of lotwatch: it judges the lots the
// store put in the outbox with the same judging the chart uses, turns
// those that meet a rule into messages with stable ids, and sends them to
// webhooks (signed as the Standard Webhooks specification says) and
// e-mail addresses (over SMTP), retrying with exponential backoff for at
// least a day and logging every attempt.
//
// Everything that must not be lost is in the database: the lot's event is
// written in the lot's own transaction, the messages are made and the
// event closed in one transaction, and servers claim work with a lease in
// the database, so several servers sharing it deliver each alert once and
// a crash at any point re-does work instead of losing it. A message may be
// sent twice (a crash after sending, before the attempt is logged), always
// under the same webhook-id, so that a receiver can drop the repeat.
package alert

import (
	"crypto/hmac"
	"crypto/sha256"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"lotwatch/store"
)

// Message types (the "type" of a webhook body).
const (
	TypeSignal      = "lot.signal"      // a lot out of limits, in a run-rule or shift signal
	TypeUnexplained = "lot.unexplained" // a signalling lot still unexplained after the rule's delay
	TypeTest        = "alert.test"      // the test button of a rule
	// TypeBatch is a change that judged many lots at once (an imported
	// file, a frozen limit set): one message naming the lots that signal.
	TypeBatch = "lots.signal"
)

// Message is the body of a webhook and the facts of an e-mail.
type Message struct {
	Type      string  `json:"type"`
	Timestamp string  `json:"timestamp"` // RFC 3339: when the lot was stored (or the escalation/test made)
	Data      LotData `json:"data"`
}

// LotData is the lot an alert is about.
type LotData struct {
	ProcessID int64    `json:"process_id"`
	Process   string   `json:"process"`
	Lot       string   `json:"lot"`
	LotID     int64    `json:"lot_id"`
	Time      string   `json:"time"` // RFC 3339: the lot's time
	Kinds     []string `json:"kinds"`
	Rules     []string `json:"rules"`
	Value     float64  `json:"value"`
	UCL       float64  `json:"ucl"`
	LCL       float64  `json:"lcl"`
	URL       string   `json:"url"`
	Verdict   string   `json:"verdict"` // the same facts in plain words
	// Cause is the change that had the lot judged again (a correction or
	// a void of a lot before it); absent for a lot posted.
	Cause string `json:"cause,omitempty"`
}

// BatchMessage is the body of a lots.signal message.
type BatchMessage struct {
	Type      string    `json:"type"`
	Timestamp string    `json:"timestamp"` // RFC 3339: when the change was made
	Data      BatchData `json:"data"`
}

// BatchData is a change that judged many lots, and those that signal.
type BatchData struct {
	ProcessID int64  `json:"process_id"`
	Process   string `json:"process"`
	Change    string `json:"change"` // "import", "limits" or "settings"
	Cause     string `json:"cause"`  // the change in plain words
	Judged    int    `json:"lots_judged"`
	// Signalling counts the lots that signal with a kind the rule listens
	// for; Counts splits them by kind (a lot may count under two kinds).
	Signalling int            `json:"lots_signalling"`
	Counts     map[string]int `json:"counts"`
	Kinds      []string       `json:"kinds"`
	Rules      []string       `json:"rules"`
	Lots       []LotData      `json:"lots"` // the first signalling lots, at most BatchListed
	More       int            `json:"more"` // signalling lots not listed
	URL        string         `json:"url"`  // the process's chart
	Verdict    string         `json:"verdict"`
}

// BatchListed is how many signalling lots a lots.signal message lists.
const BatchListed = 20

// Verdict is what the chart says of one lot, for alerting.
type Verdict struct {
	Lot             store.Lot
	Value, UCL, LCL float64
	// Kinds are the store.TriggerOutOfLimits, TriggerRunRule and
	// TriggerShift the lot meets: beyond a limit, or the lot at which a
	// run-rule or shift signal starts (the lot that completes its pattern).
	Kinds []string
	Rules []string // the rules behind them (e.g. we1, nelson2, cusum)
	Words string   // plain words, e.g. "above the upper control limit"
	// Extends, ExtendRules and ExtendWords are the signals the lot
	// extends without starting them: only rules with EachLot hear of them.
	Extends     []string
	ExtendRules []string
	ExtendWords string
}

// Signals reports whether the lot signals at all.
func (v Verdict) Signals() bool { return len(v.Kinds) > 0 || len(v.Extends) > 0 }

// matches lists the kinds of v that rule r listens for.
func matches(r store.AlertRule, v Verdict) []string {
	var out []string
	for _, k := range heard(r, v).Kinds {
		if r.Has(k) {
			out = append(out, k)
		}
	}
	return out
}

// heard is v as rule r hears it: a rule with EachLot hears of the
// signals the lot extends too, the others only of those it starts.
func heard(r store.AlertRule, v Verdict) Verdict {
	if !r.EachLot || len(v.Extends) == 0 {
		return v
	}
	out := v
	out.Kinds = append([]string(nil), v.Kinds...)
	for _, k := range v.Extends {
		if !contains(out.Kinds, k) {
			out.Kinds = append(out.Kinds, k)
		}
	}
	out.Rules = append(append([]string(nil), v.Rules...), v.ExtendRules...)
	out.Words = v.Words
	if out.Words == "" || out.Words == WithinLimits {
		out.Words = v.ExtendWords
	} else {
		out.Words += "; " + v.ExtendWords
	}
	return out
}

// WithinLimits is the words of a lot that meets no trigger.
const WithinLimits = "within limits"

func contains(ss []string, s string) bool {
	for _, x := range ss {
		if x == s {
			return true
		}
	}
	return false
}

// finite keeps a limit that does not exist (an infinite or undefined
// value) out of the JSON, as 0.
func finite(f float64) float64 {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return 0
	}
	return f
}

// lotMessage is the message of type typ about v's lot.
func lotMessage(typ string, p store.Process, v Verdict, at time.Time, publicURL, cause string) Message {
	kinds, rules := v.Kinds, v.Rules
	if kinds == nil {
		kinds = []string{}
	}
	if rules == nil {
		rules = []string{}
	}
	return Message{Type: typ, Timestamp: at.UTC().Format(time.RFC3339), Data: LotData{
		ProcessID: p.ID, Process: p.Name, Lot: v.Lot.Lot, LotID: v.Lot.ID, Time: v.Lot.Time.Format(time.RFC3339),
		Kinds: kinds, Rules: rules, Value: finite(v.Value), UCL: finite(v.UCL), LCL: finite(v.LCL),
		URL: LotURL(publicURL, v.Lot.ID), Verdict: v.Words, Cause: cause}}
}

// LotURL is the address of a lot's page under the server's public URL.
func LotURL(publicURL string, lotID int64) string {
	return strings.TrimRight(publicURL, "/") + "/lots/" + strconv.FormatInt(lotID, 10)
}

// BatchMsgID is the stable id of the lots.signal message of an outbox
// batch for a rule.
func BatchMsgID(batchID, ruleID int64) string {
	return fmt.Sprintf("msg_batch%d_rule%d", batchID, ruleID)
}

// MsgID is the stable id of the message of type typ about a lot for a
// rule: judging the lot again gives the same id, so no second message is
// made, and every attempt carries it as the webhook-id.
func MsgID(typ string, lotID, ruleID int64) string {
	kind := "signal"
	if typ == TypeUnexplained {
		kind = "unexplained"
	}
	return fmt.Sprintf("msg_lot%d_rule%d_%s", lotID, ruleID, kind)
}

func encode(m any) (string, error) {
	b, err := json.Marshal(m)
	return string(b), err
}

// Sign returns the webhook-signature header of a message as the Standard
// Webhooks specification defines it: "v1," and the base64 of the
// HMAC-SHA256, keyed with store.WebhookKey(secret), of
// "<webhook-id>.<webhook-timestamp>.<body>".
func Sign(secret, msgID string, ts int64, body []byte) (string, error) {
	key, err := store.WebhookKey(secret)
	if err != nil {
		return "", err
	}
	mac := hmac.New(sha256.New, key)
	fmt.Fprintf(mac, "%s.%d.", msgID, ts)
	mac.Write(body)
	return "v1," + base64.StdEncoding.EncodeToString(mac.Sum(nil)), nil
}

// Backoff is the wait after the n-th failed attempt (n ≥ 1) with the
// first wait base (5 s in service): base, then doubling, at most an hour.
// Exponential backoff: the first retry comes within 10 seconds, and a
// receiver down for a day is not flooded (common practice, no source).
func Backoff(n int, base time.Duration) time.Duration {
	d := base
	for i := 1; i < n && d < time.Hour; i++ {
		d *= 2
	}
	return min(d, time.Hour)
}

// GiveUpAfter is how long a message is retried before it is marked failed.
const GiveUpAfter = 24 * time.Hour

// nextAttempt is when to try again after the n-th failed attempt of a
// message made at created, or zero when it is to be given up.
func nextAttempt(created, now time.Time, n int, base time.Duration) time.Time {
	if now.Sub(created) >= GiveUpAfter {
		return time.Time{}
	}
	return now.Add(Backoff(n, base))
}

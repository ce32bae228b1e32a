package store

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"strconv"
	"strings"

	"lotwatch/spc"
)

// The content the audit trail states of each entity has one encoder per
// entity, used both by the writer that records a change and by
// VerifyAudit, which checks the stored row against it, so the two cannot
// drift apart. The JSON of each type is what earlier versions wrote
// (their maps had these keys in this order); fields added since are left
// out when empty, so that old entries decode to the same values and an
// empty credential digest is not checked.

// credentialDigest is what the trail states of a stored password or token
// hash: the SHA-256 of the stored hash, in hex. It tells an edited hash
// from the recorded one without putting the hash itself (which would help
// guess a password) in the trail.
func credentialDigest(stored []byte) string {
	sum := sha256.Sum256(stored)
	return hex.EncodeToString(sum[:])
}

// userAudit is a user as the trail states it.
type userAudit struct {
	Name   string `json:"name"`
	Role   Role   `json:"role"`
	Active bool   `json:"active"`
	// Password is the credentialDigest of the password hash (entries
	// since version 5 of the schema).
	Password string `json:"password_sha256,omitempty"`
}

// tokenAudit is an API token as the trail states it when it is made.
type tokenAudit struct {
	Label string `json:"label"`
	User  string `json:"user"`
	Hash  string `json:"hash_sha256,omitempty"` // credentialDigest of the stored hash
}

// credentialAudit is a password set anew, or a password or token hash
// stated by the upgrade that began stating them.
type credentialAudit struct {
	Password string `json:"password_sha256,omitempty"`
	Hash     string `json:"hash_sha256,omitempty"`
}

// limitSetAudit is a frozen limit set as the trail states it.
type limitSetAudit struct {
	BaselineFrom  int64             `json:"baseline_from"`
	BaselineLots  int               `json:"baseline_lots"`
	BaselineTo    int64             `json:"baseline_to"`
	Center        float64           `json:"center"`
	CUSUMARL0     float64           `json:"cusum_arl0,omitempty"`
	CUSUMH        float64           `json:"cusum_h,omitempty"`
	CUSUMShift    float64           `json:"cusum_shift,omitempty"`
	EffectiveFrom int64             `json:"effective_from"`
	EWMALambda    float64           `json:"ewma_lambda,omitempty"`
	EWMAWidth     float64           `json:"ewma_width,omitempty"`
	EWMAARL0      float64           `json:"ewma_arl0,omitempty"`
	Excluded      map[string]string `json:"excluded"`
	K             float64           `json:"k"`
	Method        spc.Method        `json:"method"`
	Number        int               `json:"number"`
	ProcessID     int64             `json:"process_id"`
	SigmaZ        float64           `json:"sigma_z"`
}

func limitSetRecord(ls LimitSet) limitSetAudit {
	m := ls.Monitors
	return limitSetAudit{nanos(ls.BaselineFrom), ls.BaselineLots, nanos(ls.BaselineTo), ls.Center, m.CUSUMARL0, m.CUSUMH, m.CUSUMShift,
		ls.EffectiveFrom.UnixNano(), m.EWMALambda, m.EWMAWidth, m.EWMAARL0, ls.Excluded, ls.K, ls.Method, ls.Number, ls.ProcessID, ls.SigmaZ}
}

// alertRuleAudit is an alert rule as the trail states it: everything but
// the webhook secret, of which only the SHA-256 is stated (the trail is
// read by many; the secret signs messages).
type alertRuleAudit struct {
	ProcessID        int64  `json:"process_id"`
	Webhook          string `json:"webhook,omitempty"`
	SecretSHA256     string `json:"secret_sha256,omitempty"`
	Email            string `json:"email,omitempty"`
	On               string `json:"on"`
	UnexplainedAfter int64  `json:"unexplained_after_ns"`
	EachLot          bool   `json:"each_lot,omitempty"` // omitted when false, as in entries written before it existed
	Digest           string `json:"digest,omitempty"`   // likewise omitted when ""
	Active           bool   `json:"active"`
}

func auditAlertRule(r AlertRule) alertRuleAudit {
	a := alertRuleAudit{ProcessID: r.ProcessID, Webhook: r.Webhook, Email: r.Email, On: strings.Join(r.On, ","),
		UnexplainedAfter: int64(r.UnexplainedAfter), EachLot: r.EachLot, Digest: r.Digest, Active: r.Active}
	if r.Secret != "" {
		a.SecretSHA256 = credentialDigest([]byte(r.Secret))
	}
	return a
}

// decodeRecord reads an entry's JSON into v; false when it does not read.
func decodeRecord(s string, v any) bool { return json.Unmarshal([]byte(s), v) == nil }

// appendLotLine appends the canonical line of a lot as first logged, for
// the digest a batch entry carries (SHA-256 over the lines of its lots in
// id order): the fields in a fixed order, NUL-separated, the time as
// nanoseconds since 1970, the categories in their stored form cats (see
// encodeCategories), ending in a newline. The adder writes it as it
// stores the lot and verify as it reads the lot back.
func appendLotLine(b []byte, in *LotInput, cats string) []byte {
	b = append(b, in.Lot...)
	b = append(b, 0)
	b = strconv.AppendInt(b, in.Time.UnixNano(), 10)
	b = append(b, 0)
	b = append(b, in.Shift...)
	b = append(b, 0)
	b = strconv.AppendInt(b, in.Inspected, 10)
	b = append(b, 0)
	b = strconv.AppendInt(b, in.Count, 10)
	b = append(b, 0)
	b = append(b, cats...)
	b = append(b, 0)
	b = append(b, in.Inspector...)
	b = append(b, 0)
	b = append(b, in.Note...)
	return append(b, '\n')
}

package alert

import (
	"testing"
	"time"
)

func TestSign(t *testing.T) {
	tests := []struct {
		name, secret, id string
		ts               int64
		body, want       string
	}{
		// The example of the Standard Webhooks specification's reference
		// libraries (github.com/standard-webhooks/standard-webhooks), from
		// memory; recomputed with Python's hmac to the same value.
		{"whsec example", "whsec_MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw", "msg_p5jXN8AQM9LWM0D4loKWxJek", 1614265330,
			`{"test": 2432232314}`, "v1,g0hM9SsE+OTPJTGt/tmIKtSyZlE3uFJELVlNIOLJ1OE="},
		// testdata/sign.py: a plain secret is keyed with its UTF-8 bytes.
		{"plain UTF-8", "plant secret ✓ not base64", "msg_lot7_rule2_signal", 1764662400,
			`{"type":"lot.signal"}`, "v1,O7JtWQNDBYE2Cc1JsYCmn7gi3B5jgPch1tKSmiuFs70="},
		// testdata/sign.py: a secret that happens to be base64 but has no
		// whsec_ prefix is not decoded.
		{"base64-looking, no prefix", "c2VjcmV0", "msg_lot7_rule2_signal", 1764662400,
			`{"type":"lot.signal"}`, "v1,EeI2HIyzSkQZe9s9DwM9UUL8U9XnNJ9SWqZ3VKIuhtk="},
	}
	for _, tc := range tests {
		got, err := Sign(tc.secret, tc.id, tc.ts, []byte(tc.body))
		if err != nil || got != tc.want {
			t.Errorf("%s: got %q (%v), want %q", tc.name, got, err, tc.want)
		}
	}
	if _, err := Sign("whsec_not base64!", "x", 1, nil); err == nil {
		t.Error("a whsec_ secret that is not base64 was accepted")
	}
}

// TestRetrySchedule checks the contract's retry policy with the service
// base of 5 s: the first retry within 10 seconds, waits that grow, and
// retries for at least 24 hours before a message is given up.
func TestRetrySchedule(t *testing.T) {
	base := 5 * time.Second
	if d := Backoff(1, base); d > 10*time.Second {
		t.Errorf("first retry after %v, want within 10 s", d)
	}
	created := time.Date(2026, 12, 2, 2, 0, 0, 0, time.UTC)
	now := created
	n := 0
	for {
		n++
		next := nextAttempt(created, now, n, base)
		if next.IsZero() {
			break
		}
		if w := next.Sub(now); w < Backoff(max(1, n-1), base) || w > time.Hour {
			t.Fatalf("wait after attempt %d: %v", n, w)
		}
		now = next
		if n > 1000 {
			t.Fatal("never given up")
		}
	}
	if now.Sub(created) < 24*time.Hour {
		t.Errorf("given up after %v and %d attempts, want at least 24 h", now.Sub(created), n)
	}
	if now.Sub(created) > 25*time.Hour {
		t.Errorf("given up only after %v", now.Sub(created))
	}
}

func TestMsgIDStable(t *testing.T) {
	if MsgID(TypeSignal, 12, 3) != MsgID(TypeSignal, 12, 3) || MsgID(TypeSignal, 12, 3) == MsgID(TypeUnexplained, 12, 3) ||
		MsgID(TypeSignal, 12, 3) == MsgID(TypeSignal, 1, 23) {
		t.Error("message ids are not one per lot, rule and type")
	}
}

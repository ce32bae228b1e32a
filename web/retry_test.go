package web

import (
	"net/http"
	"testing"

	"lotwatch/store"
)

// A station that lost the answer posts the same lot again. Without a time
// the lot got the time of the commit; the retry must still be answered
// with the stored lot (201, same id, same time), alone or in a batch
// with new lots, as doc.go and README.md promise.
func TestPostLotRetryWithoutTime(t *testing.T) {
	e := newTestEnv(t)
	tok := e.tokens[store.RoleInspector]
	type answer struct {
		Lots []map[string]any `json:"lots"`
	}
	body := `{"lot":"R1","inspected":10,"defective":0}`
	rec := e.do(req{method: "POST", path: lotsPath(e), body: body, token: tok})
	if rec.Code != http.StatusCreated {
		t.Fatalf("first post: %d %s", rec.Code, rec.Body.String())
	}
	first := decodeJSON[answer](t, rec).Lots[0]
	rec = e.do(req{method: "POST", path: lotsPath(e), body: body, token: tok})
	if rec.Code != http.StatusCreated {
		t.Fatalf("retry: %d %s, want 201 with the stored lot", rec.Code, rec.Body.String())
	}
	if again := decodeJSON[answer](t, rec).Lots[0]; again["id"] != first["id"] || again["time"] != first["time"] {
		t.Errorf("retry answered id %v time %v, want the stored %v %v", again["id"], again["time"], first["id"], first["time"])
	}
	rec = e.do(req{method: "POST", path: lotsPath(e), token: tok, body: `[{"lot":"R2","inspected":10,"defective":1},` + body + `]`})
	if rec.Code != http.StatusCreated {
		t.Fatalf("batch with a retry: %d %s", rec.Code, rec.Body.String())
	}
	if got := decodeJSON[answer](t, rec).Lots; len(got) != 2 || got[1]["id"] != first["id"] {
		t.Errorf("batch answered %v", got)
	}
	if n := e.lotCount(t); n != 2 {
		t.Errorf("%d lots stored, want 2", n)
	}
}

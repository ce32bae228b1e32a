package web

import (
	"net/http"
	"strings"
	"testing"
)

// TestAPIErrorAnswerStaysSmall: a lot object with a million unknown
// fields (6 MB, under the 8 MiB request limit) is answered with the
// first problems and a count of the rest, as the upload preview does;
// before the bound the answer listed every problem (a probe got a
// 177 MB answer and a gigabyte of server memory from 1.3M fields).
func TestAPIErrorAnswerStaysSmall(t *testing.T) {
	e := newTestEnv(t)
	const fields = 1_000_000
	var b strings.Builder
	b.WriteString(`{"lot":"B1","inspected":10,"defective":0`)
	for range fields {
		b.WriteString(`,"x":0`)
	}
	b.WriteString("}")
	rec := e.do(req{method: "POST", path: "/api/v1/processes/" + formatID(e.proc.ID) + "/lots", body: b.String(), token: e.tokens["inspector"]})
	if rec.Code != http.StatusBadRequest {
		t.Fatalf("status %d, want 400: %.300s", rec.Code, rec.Body.String())
	}
	// 64 KiB holds a hundred problems with room to spare (common
	// practice, no source).
	if rec.Body.Len() > 64<<10 {
		t.Fatalf("the error answer is %d bytes", rec.Body.Len())
	}
	t.Logf("a body of %d bytes with %d unknown fields: a %d-byte answer", b.Len(), fields, rec.Body.Len())
	got := decodeJSON[apiError](t, rec)
	if len(got.Problems) != maxAPIProblems {
		t.Errorf("%d problems listed, want the first %d", len(got.Problems), maxAPIProblems)
	}
	if got.More != fields-maxAPIProblems {
		t.Errorf("more = %d, want %d", got.More, fields-maxAPIProblems)
	}
	if want := "… and 999900 more"; !strings.Contains(got.Error, want) {
		t.Errorf("message %.200q… does not say %q", got.Error, want)
	}
	if p := got.Problems[0]; p.Field != "x" || !strings.Contains(p.Reason, "not a lot field") {
		t.Errorf("first problem %+v, want the unknown field x", p)
	}
	if n := e.lotCount(t); n != 0 {
		t.Errorf("%d lots stored", n)
	}
}

package web

import (
	"bytes"
	"context"
	"fmt"
	"net/http"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
	"lotwatch/store/storetest"
)

// apiWant is one problem a refused post must report; an empty value or
// reason is not checked, index -1 means a single object (no index).
type apiWant struct {
	index          int
	field, value   string
	reasonContains string
}

// TestAPIPostBadInput is the bad-input battery of
// POST /api/v1/processes/{id}/lots. Every refused body gets 400 (413 when
// too large, 409 for a stored lot with other values) with an error naming
// the field and value, and the stored content is unchanged: the export of
// the process and the audit trail are the same bytes before and after.
// The number rules follow RFC 8259 (JSON numbers; a whole number is one
// without fraction or exponent) and spc.CheckLot; times RFC 3339.
func TestAPIPostBadInput(t *testing.T) {
	for _, b := range storetest.Backends {
		t.Run(b.Name, func(t *testing.T) {
			e := newTestEnvOn(t, b.DB(t))
			e.addLots(t, 5, func(int) int64 { return 1 })
			tok := e.tokens[store.RoleInspector]
			future := e.clock.Now().Add(72 * time.Hour).UTC().Format(time.RFC3339)
			big := strings.Repeat("x", 1<<20)
			lot := func(fields string) string { return `{"lot":"N1","inspected":100,"defective":1` + fields + `}` }
			cases := []struct {
				name   string
				body   string
				status int
				want   []apiWant
			}{
				{"empty body", ``, 400, nil},
				{"blank body", "  \n ", 400, nil},
				{"not JSON", `lot=N1`, 400, nil},
				{"truncated JSON", `{"lot":"N1","inspected":`, 400, nil},
				{"JSON string", `"N1"`, 400, nil},
				{"JSON number", `42`, 400, nil},
				{"JSON null", `null`, 400, nil},
				{"empty array", `[]`, 400, nil},
				{"array of non-objects", `[1,2]`, 400, []apiWant{{0, "lot", "1", "JSON object"}, {1, "lot", "2", "JSON object"}}},
				{"too many lots", "[" + strings.Repeat(`{},`, maxPostLots) + `{}]`, 400, nil},
				{"body over 8 MiB", `{"lot":"N1","note":"` + strings.Repeat(big, 9) + `"}`, 413, nil},
				{"unknown field", lot(`,"colour":"red"`), 400, []apiWant{{-1, "colour", "", "not a lot field"}}},
				{"misspelled field", `{"lot":"N1","inspectd":100,"defective":1}`, 400, []apiWant{{-1, "inspectd", "", "not a lot field"}, {-1, "inspected", "", "missing"}}},
				{"field given twice", lot(`,"inspected":100`), 400, []apiWant{{-1, "inspected", "", "twice"}}},
				{"both count fields", lot(`,"defects":1`), 400, []apiWant{{-1, "defects", "", "not both"}}},
				{"lot missing", `{"inspected":100,"defective":1}`, 400, []apiWant{{-1, "lot", "", "missing"}}},
				{"inspected missing", `{"lot":"N1","defective":1}`, 400, []apiWant{{-1, "inspected", "", "missing"}}},
				{"count missing", `{"lot":"N1","inspected":100}`, 400, []apiWant{{-1, "defective", "", "missing"}}},
				{"lot is a number", `{"lot":7,"inspected":100,"defective":1}`, 400, []apiWant{{-1, "lot", "7", "string"}}},
				{"inspected is a string", `{"lot":"N1","inspected":"100","defective":1}`, 400, []apiWant{{-1, "inspected", `"100"`, "whole number"}}},
				{"inspected is null", `{"lot":"N1","inspected":null,"defective":1}`, 400, []apiWant{{-1, "inspected", "null", "whole number"}}},
				{"inspected is true", `{"lot":"N1","inspected":true,"defective":1}`, 400, []apiWant{{-1, "inspected", "true", "whole number"}}},
				{"fraction", `{"lot":"N1","inspected":100.5,"defective":1}`, 400, []apiWant{{-1, "inspected", "100.5", "whole number"}}},
				{"fraction zero", `{"lot":"N1","inspected":100.0,"defective":1}`, 400, []apiWant{{-1, "inspected", "100.0", "whole number"}}},
				{"exponent", `{"lot":"N1","inspected":1e2,"defective":1}`, 400, []apiWant{{-1, "inspected", "1e2", "whole number"}}},
				{"exponent upper case", `{"lot":"N1","inspected":100,"defective":1E0}`, 400, []apiWant{{-1, "defective", "1E0", "whole number"}}},
				{"leading zero", `{"lot":"N1","inspected":0100,"defective":1}`, 400, nil}, // not JSON (RFC 8259 §6)
				{"one beyond int64", `{"lot":"N1","inspected":9223372036854775808,"defective":1}`, 400, []apiWant{{-1, "inspected", "9223372036854775808", "whole number"}}},
				{"far beyond int64", `{"lot":"N1","inspected":100,"defective":100000000000000000000000000}`, 400, []apiWant{{-1, "defective", "100000000000000000000000000", "whole number"}}},
				{"negative inspected", `{"lot":"N1","inspected":-100,"defective":1}`, 400, []apiWant{{-1, "inspected", "-100", "greater than 0"}}},
				{"negative count", `{"lot":"N1","inspected":100,"defective":-1}`, 400, []apiWant{{-1, "defective", "-1", "negative"}}},
				{"d more than n", `{"lot":"N1","inspected":100,"defective":101}`, 400, []apiWant{{-1, "defective", "101", "more than the 100 units"}}},
				{"n = 0", `{"lot":"N1","inspected":0,"defective":0}`, 400, []apiWant{{-1, "inspected", "0", "greater than 0"}}},
				{"category unknown", lot(`,"categories":{"smudge":1}`), 400, []apiWant{{-1, "categories.smudge", "1", "not a defect category"}}},
				{"category fraction", lot(`,"categories":{"scratch":0.5}`), 400, []apiWant{{-1, "categories", "", "whole number"}}},
				{"category negative", lot(`,"categories":{"scratch":-1}`), 400, []apiWant{{-1, "categories.scratch", "-1", "negative"}}},
				{"category more than n", lot(`,"categories":{"scratch":101}`), 400, []apiWant{{-1, "categories.scratch", "101", "more than"}}},
				{"categories not an object", lot(`,"categories":["scratch"]`), 400, []apiWant{{-1, "categories", "", "object"}}},
				{"time not a time", lot(`,"time":"yesterday"`), 400, []apiWant{{-1, "time", "yesterday", "RFC 3339"}}},
				{"time a number", lot(`,"time":1700000000`), 400, []apiWant{{-1, "time", "1700000000", "string"}}},
				{"time 30 February", lot(`,"time":"2026-02-30T10:00:00Z"`), 400, []apiWant{{-1, "time", "2026-02-30", "RFC 3339"}}},
				{"time far future", lot(`,"time":"` + future + `"`), 400, []apiWant{{-1, "time", "", "future"}}},
				{"time before 1970", lot(`,"time":"1969-07-20T20:17:00Z"`), 400, []apiWant{{-1, "time", "1969", "before 1970"}}},
				{"lot code empty", `{"lot":"","inspected":100,"defective":1}`, 400, []apiWant{{-1, "lot", "", "empty"}}},
				{"lot code with spaces around", `{"lot":" N1 ","inspected":100,"defective":1}`, 400, []apiWant{{-1, "lot", " N1 ", "spaces"}}},
				{"lot code with a line break", `{"lot":"N\n1","inspected":100,"defective":1}`, 400, []apiWant{{-1, "lot", "N\n1", "control"}}},
				{"lot code 1 MB", `{"lot":"` + big + `","inspected":100,"defective":1}`, 400, []apiWant{{-1, "lot", "xxxx", "longer than 100"}}},
				{"note 1 MB", lot(`,"note":"` + big + `"`), 400, []apiWant{{-1, "note", "xxxx", "longer than 4000"}}},
				{"NUL in note", lot(`,"note":"a\u0000b"`), 400, []apiWant{{-1, "note", `a\0b`, "NUL"}}},
				// encoding/json would store these as U+FFFD (RFC 8259 §8.2 leaves
				// them to the implementation): refused rather than altered.
				{"lone high surrogate in note", lot(`,"note":"a\ud800b"`), 400, []apiWant{{-1, "note", "", `\ud800, half of a UTF-16 surrogate pair`}}},
				{"lone low surrogate in lot code", `{"lot":"N\udc001","inspected":100,"defective":1}`, 400, []apiWant{{-1, "lot", "", `\udc00, half`}}},
				{"surrogates in the wrong order", lot(`,"inspector":"\ude00\ud83d"`), 400, []apiWant{{-1, "inspector", "", `\ude00, half`}}},
				{"byte that is not UTF-8 in shift", lot(",\"shift\":\"early\xff\""), 400, []apiWant{{-1, "shift", "", "not valid UTF-8"}}},
				{"duplicate code in one array", `[{"lot":"N1","inspected":100,"defective":1},{"lot":"N1","inspected":100,"defective":1}]`, 400, []apiWant{{1, "lot", "N1", "twice"}}},
				{"one bad lot in an array", `[{"lot":"N1","inspected":100,"defective":1},{"lot":"N2","inspected":100,"defective":200}]`, 400, []apiWant{{1, "defective", "200", "more than"}}},
				{"stored code, other values", `{"lot":"L00001","inspected":100,"defective":2}`, 409, nil},
			}
			if len(cases) < 40 {
				t.Fatalf("the battery has %d cases; it promises at least 40", len(cases))
			}
			for _, c := range cases {
				t.Run(c.name, func(t *testing.T) {
					before := e.stored(t)
					rec := e.do(req{method: "POST", path: lotsPath(e), body: c.body, token: tok})
					if rec.Code != c.status {
						t.Fatalf("status %d, want %d: %s", rec.Code, c.status, trim(rec.Body.String()))
					}
					m := decodeJSON[apiError](t, rec)
					if m.Error == "" {
						t.Fatal("no error message")
					}
					for _, w := range c.want {
						found := false
						for _, p := range m.Problems {
							idx := -1
							if p.Index != nil {
								idx = *p.Index
							}
							found = found || (idx == w.index && p.Field == w.field && strings.Contains(p.Value, w.value) && strings.Contains(p.Reason, w.reasonContains))
						}
						if !found {
							t.Errorf("no problem like %+v in %s", w, trim(rec.Body.String()))
						}
						if !strings.Contains(m.Error, w.field) {
							t.Errorf("error message does not name %s: %s", w.field, trim(m.Error))
						}
					}
					before.unchanged(t, e, "a refused post")
				})
			}
		})
	}
}

// TestAPIPostTextKeptExactly: text posted through the API is stored as
// sent, character for character: a surrogate pair escape is the one
// character it encodes (RFC 8259 §7), and an escaped backslash before
// "ud800" is plain text, not an escape.
func TestAPIPostTextKeptExactly(t *testing.T) {
	e := newTestEnv(t)
	tok := e.tokens[store.RoleInspector]
	body := `{"lot":"E1","inspected":100,"defective":1,"note":"smile \ud83d\ude00, path C:\\ud800, caf\u00e9"}`
	rec := e.do(req{method: "POST", path: lotsPath(e), body: body, token: tok})
	if rec.Code != http.StatusCreated {
		t.Fatalf("status %d: %s", rec.Code, rec.Body.String())
	}
	lots, err := e.db.Lots(context.Background(), e.proc.ID, time.Time{}, time.Time{})
	if err != nil || len(lots) != 1 {
		t.Fatalf("%d lots stored (%v), want 1", len(lots), err)
	}
	if want := "smile \U0001F600, path C:\\ud800, café"; lots[0].Note != want {
		t.Errorf("note stored as %q, want %q", lots[0].Note, want)
	}
}

// TestAPIPostHostileText: markup and SQL in lot codes, names and notes
// are stored verbatim, returned verbatim by the API, shown escaped on the
// chart page (html/template), and neutralised in the CSV export when they
// look like formulas; nothing is executed and no table is touched.
func TestAPIPostHostileText(t *testing.T) {
	for _, b := range storetest.Backends {
		t.Run(b.Name, func(t *testing.T) {
			e := newTestEnvOn(t, b.DB(t))
			e.addLots(t, 5, func(int) int64 { return 1 })
			tok := e.tokens[store.RoleInspector]
			hostile := []struct{ lot, inspector, note string }{
				{`<script>alert("lot")</script>`, `<img src=x onerror=alert(1)>`, `</td></tr><script>alert(2)</script>`},
				{`L1'); DROP TABLE lots;--`, `O'Brien`, `' OR '1'='1`},
				{`=HYPERLINK("http://evil.example","x")`, `@SUM(A1)`, `+1-1`},
				{`-2+3`, `"quoted"`, "&amp; &lt; \u202e reversed"},
			}
			for i, h := range hostile {
				body := fmt.Sprintf(`{"lot":%q,"inspected":100,"defective":%d,"inspector":%q,"note":%q}`, h.lot, i%2, h.inspector, h.note)
				rec := e.do(req{method: "POST", path: lotsPath(e), body: body, token: tok})
				if rec.Code != http.StatusCreated {
					t.Fatalf("%s: status %d: %s", h.lot, rec.Code, rec.Body.String())
				}
				got := decodeJSON[struct {
					Lots []lotJSON `json:"lots"`
				}](t, rec)
				if l := got.Lots[0]; l.Lot != h.lot || l.Inspector != h.inspector || l.Note != h.note {
					t.Errorf("answer %+v, want the text as posted", l)
				}
			}
			lots, err := e.db.Lots(context.Background(), e.proc.ID, time.Time{}, time.Time{})
			if err != nil || len(lots) != 5+len(hostile) {
				t.Fatalf("%d lots stored (%v), want %d", len(lots), err, 5+len(hostile))
			}
			byCode := map[string]store.Lot{}
			for _, l := range lots {
				byCode[l.Lot] = l
			}
			for _, h := range hostile {
				if l, ok := byCode[h.lot]; !ok || l.Inspector != h.inspector || l.Note != h.note {
					t.Errorf("stored %+v, want %q / %q / %q", l.LotInput, h.lot, h.inspector, h.note)
				}
			}
			c := e.signIn(t, "viewer1", testPassword)
			page := e.do(req{method: "GET", path: fmt.Sprintf("/processes/%d", e.proc.ID), cookie: c}).Body.String()
			// html/template escapes < > & ' " in text (as &lt; &gt; &amp; &#39;
			// &#34;); the Go documentation of html/template.
			esc := strings.NewReplacer("&", "&amp;", "<", "&lt;", ">", "&gt;", `"`, "&#34;", "'", "&#39;").Replace(hostile[0].lot)
			if !strings.Contains(page, esc) {
				t.Errorf("the chart page does not list the lot code %q escaped (%s)", hostile[0].lot, esc)
			}
			if strings.Contains(page, "<script>alert") || strings.Contains(page, "onerror=alert") {
				t.Error("the chart page carries a script from user text")
			}
			out := e.exportOf(t)
			for _, cell := range []string{`"'=HYPERLINK(""http://evil.example"",""x"")"`, "'@SUM(A1)", "'+1-1", "'-2+3"} {
				if !strings.Contains(out, cell) {
					t.Errorf("export lacks the neutralised cell %s", cell)
				}
			}
			if _, err := e.db.Users(context.Background()); err != nil {
				t.Errorf("the users table is gone: %v", err)
			}
		})
	}
}

// storedState is the export of the test process and the audit trail's
// length and head hash: what a refused input must leave as it was.
type storedState struct{ export, audit string }

func (e *testEnv) stored(t *testing.T) storedState {
	t.Helper()
	return storedState{e.exportOf(t), e.auditOf(t)}
}

// unchanged reports any change of the stored lots or the audit trail
// since s, naming what was done.
func (s storedState) unchanged(t *testing.T, e *testEnv, what string) {
	t.Helper()
	if e.exportOf(t) != s.export {
		t.Errorf("%s changed the stored lots", what)
	}
	if a := e.auditOf(t); a != s.audit {
		t.Errorf("%s changed the audit trail: %s, was %s", what, a, s.audit)
	}
}

func (e *testEnv) exportOf(t *testing.T) string {
	t.Helper()
	var b bytes.Buffer
	if err := e.db.Export(context.Background(), &b, e.proc.ID, store.ExportOptions{}); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

func (e *testEnv) auditOf(t *testing.T) string {
	t.Helper()
	chk, err := e.db.VerifyAudit(context.Background())
	if err != nil || !chk.OK {
		t.Fatalf("audit trail: %+v %v", chk, err)
	}
	return fmt.Sprintf("%d entries, head %s", chk.Entries, chk.Head)
}

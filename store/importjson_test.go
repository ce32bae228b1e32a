package store

import (
	"bytes"
	"errors"
	"reflect"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
)

// What Export writes as JSON, Import reads back to the same lots — into a
// new database (making the process from the file's "process" object) and
// into the same one (all unchanged); a changed lot is a problem of the
// file, or with SkipConflicts a conflict, left as stored.
func TestImportJSONRoundTrip(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p, err := db.AddProcess(ctx, "t", Process{Name: "paint", Chart: spc.ChartU, Categories: []string{"run", "sag"}, TimeZone: "America/Chicago"})
		if err != nil {
			t.Fatal(err)
		}
		t0 := time.Date(2025, 7, 1, 13, 14, 15, 123456789, time.UTC)
		in := []LotInput{
			{Lot: "=1+2", Time: t0, Shift: "+night", Inspected: 5, Count: 9, Categories: map[string]int64{"run": 9}, Inspector: "@ana", Note: "-minus"},
			{Lot: "P2", Time: t0.Add(time.Minute), Inspected: 5, Count: 0, Note: "\ttab"},
			{Lot: "P3", Time: t0.Add(2 * time.Minute), Inspected: 7, Count: 1, Categories: map[string]int64{"run": 0, "sag": 1}, Note: "line\nbreak, \"quoted\" <b>"},
		}
		if _, err := db.AddLots(ctx, "t", p.ID, in); err != nil {
			t.Fatal(err)
		}
		var out bytes.Buffer
		if err := db.Export(ctx, &out, p.ID, ExportOptions{Format: "json"}); err != nil {
			t.Fatal(err)
		}
		db2, _ := open(t)
		res, err := db2.Import(ctx, "t", bytes.NewReader(out.Bytes()), ImportOptions{Format: "json", Create: true})
		if err != nil || res.Added != len(in) || !res.Created || res.Process.Name != "paint" || res.Process.Chart != spc.ChartU ||
			res.Process.TimeZone != "America/Chicago" || !reflect.DeepEqual(res.Process.Categories, []string{"run", "sag"}) {
			t.Fatalf("import of export: %+v %v\n%s", res, err, out.String())
		}
		a, _ := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		b, _ := db2.Lots(ctx, res.Process.ID, time.Time{}, time.Time{})
		if len(a) != len(b) {
			t.Fatalf("%d lots read back, want %d", len(b), len(a))
		}
		for i := range a {
			if !a[i].Time.Equal(b[i].Time) {
				t.Errorf("lot %d time %v, read back %v", i, a[i].Time, b[i].Time)
			}
			a[i].Time, b[i].Time = time.Time{}, time.Time{}
			if !reflect.DeepEqual(a[i].LotInput, b[i].LotInput) {
				t.Errorf("lot %d: %+v\nread back %+v", i, a[i].LotInput, b[i].LotInput)
			}
		}
		res, err = db.Import(ctx, "t", bytes.NewReader(out.Bytes()), ImportOptions{Format: "json", Process: "paint"})
		if err != nil || res.Unchanged != len(in) || res.Added != 0 || len(res.Conflicts) != 0 || res.Rows != len(in) {
			t.Errorf("re-import: %+v %v", res, err)
		}
		changed := strings.Replace(out.String(), `"lot":"P2","time"`, `"lot":"P2","shift":"late","time"`, 1)
		changed = strings.Replace(changed, "\n]}", ",\n{\"lot\":\"P4\",\"inspected\":3,\"defects\":1}\n]}", 1)
		if _, err = db.Import(ctx, "t", strings.NewReader(changed), ImportOptions{Format: "json", Process: "paint"}); !errors.Is(err, ErrInvalid) ||
			!strings.Contains(err.Error(), "line 3") || !strings.Contains(err.Error(), "already stored with other values (shift)") {
			t.Errorf("import with a changed lot: %v, want a problem on line 3 naming shift", err)
		}
		res, err = db.Import(ctx, "t", strings.NewReader(changed), ImportOptions{Format: "json", Process: "paint", SkipConflicts: true})
		if err != nil || res.Added != 1 || res.Unchanged != 2 || len(res.Conflicts) != 1 || res.Conflicts[0].Lot != "P2" ||
			res.Conflicts[0].Line != 3 || !reflect.DeepEqual(res.Conflicts[0].Fields, []string{"shift"}) {
			t.Errorf("import with a changed and a new lot: %+v %v", res, err)
		}
		if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK {
			t.Errorf("audit: %+v %v", chk, err)
		}
	})
}

// Bad JSON is refused as a whole, every problem named with its line and
// field; nothing is written.
func TestImportJSONProblems(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "press", spc.ChartP, "dent")
		cases := []struct {
			name, src string
			want      []string // in the error, in order
		}{
			{"lot problems", `{"process":{"name":"press","chart":"p"},"lots":[
{"lot":"A1","inspected":10,"defective":2},
{"lot":"A2","inspected":10,"defective":11},
{"lot":"A3","inspected":"ten","defective":1},
{"lot":"A4","inspected":10,"defects":1},
{"lot":"A5","inspected":10,"defective":1,"colour":"red"},
{"lot":"A6","inspected":10,"defective":1,"categories":{"scuff":1}},
{"lot":"A7","time":"yesterday","inspected":10,"defective":1},
{"inspected":10,"defective":1},
{"lot":"A1","inspected":10,"defective":2}
]}`, []string{
				`line 3: defective "11" is more than the 10 units inspected`, "line 4: inspected must be a whole number (the file has a string)",
				`line 5: defects "1" is not counted on the p chart`, "line 6: colour is not a field of a lot", `line 7: categories.scuff "1" is not a defect category`,
				`line 8: time "yesterday" is not a time`, "line 9: lot is missing", `line 10: lot "A1" appears more than once in the file`}},
			{"not JSON", "{\"lots\":[\n{\"lot\":\"A1\",\n\"inspected\":10,,}]}", []string{"line 3: is not the JSON of a lot file"}},
			{"not an object", `[1,2]`, []string{"is not the JSON of a lot file"}},
			{"cut short", "{\"lots\":[\n{\"lot\":\"A1\",\"inspected\":10,\"defective\":1}", []string{"the file ends early"}},
			{"other chart", `{"process":{"name":"press","chart":"u"},"lots":[]}`, []string{`chart "u" is not the chart of process "press"`}},
			{"no lots", `{"process":{"name":"press"}}`, []string{"lots is missing"}},
			{"unknown part", `{"process":{"name":"press"},"lots":[],"extra":1}`, []string{"line 1: extra is not a part of a lot file"}},
			// encoding/json would read these as U+FFFD (RFC 8259 §8.2): refused
			// rather than stored altered.
			{"text that is not text", "{\"lots\":[\n{\"lot\":\"A1\",\"inspected\":10,\"defective\":1,\"note\":\"a\\ud800\"},\n" +
				"{\"lot\":\"A2\",\"inspected\":10,\"defective\":1,\"inspector\":\"kim\xff\"},\n" +
				"{\"lot\":\"A3\",\"inspected\":10,\"defective\":1,\"categories\":{\"d\\udc00\":1}}]}",
				[]string{`line 2: note contains \ud800, half of a UTF-16 surrogate pair`, "line 3: inspector is not valid UTF-8", `line 4: categories contains \udc00`}},
		}
		for _, c := range cases {
			t.Run(c.name, func(t *testing.T) {
				_, err := db.Import(ctx, "t", strings.NewReader(c.src), ImportOptions{Format: "json", Process: "press"})
				if !errors.Is(err, ErrInvalid) {
					t.Fatalf("err %v", err)
				}
				msg := err.Error()
				for _, w := range c.want {
					k := strings.Index(msg, w)
					if k < 0 {
						t.Fatalf("error lacks %q:\n%s", w, msg)
					}
					msg = msg[k+len(w):]
				}
			})
		}
		if lots, _ := db.Lots(ctx, p.ID, time.Time{}, time.Time{}); len(lots) != 0 {
			t.Errorf("%d lots written by refused imports", len(lots))
		}
		if _, err := db.Import(ctx, "t", strings.NewReader(`{"lots":[]}`), ImportOptions{Format: "json"}); !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), "not named") {
			t.Errorf("no process named: %v", err)
		}
		if _, err := db.Import(ctx, "t", strings.NewReader(`{}`), ImportOptions{Format: "xml", Process: "press"}); !errors.Is(err, ErrInvalid) {
			t.Errorf("format xml: %v", err)
		}
	})
}

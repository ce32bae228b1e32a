package storejson

import (
	"encoding/json"
	"os"
	"reflect"
	"sort"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// keys returns the names of the JSON object v encodes to.
func keys(t *testing.T, v any) map[string]any {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	return m
}

// TestNamesAsTheAPIDescribes checks the JSON of a process, a user and a
// (closed) annotation against the API's description (web/openapi.json):
// every property it declares, no other; and that the names `lotwatch
// process list` writes (limits, sigma, tz) repeat the API's values.
func TestNamesAsTheAPIDescribes(t *testing.T) {
	raw, err := os.ReadFile("../openapi.json")
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Components struct {
			Schemas map[string]struct {
				Properties map[string]any `json:"properties"`
			} `json:"schemas"`
		} `json:"components"`
	}
	if err := json.Unmarshal(raw, &doc); err != nil {
		t.Fatal(err)
	}
	at := time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)
	p := store.Process{ID: 4, Name: "Press 2", Chart: spc.ChartNP, Method: spc.MethodLaney, K: 2.5, Rules: "we",
		TimeZone: "Europe/Berlin", Area: "Press shop", Active: true, Created: at,
		ColumnMap: map[string]string{"Qty inspected": "inspected"}, DateOrder: "day-first"}
	a := store.Annotation{ID: 7, ProcessID: 4, LotID: 41, Cause: "worn die", Action: "die replaced", Closed: true,
		By: "kim", At: at, ClosedBy: "kim", ClosedAt: at.Add(time.Hour)}
	for _, tc := range []struct {
		schema string
		v      any
	}{
		{"Process", ProcessOf(p)},
		{"User", UserOf(store.User{ID: 2, Name: "kim", Role: store.RoleInspector, Active: true, Created: at})},
		{"Annotation", AnnotationOf(a, "A-1041", time.UTC)},
	} {
		got := keys(t, tc.v)
		var names, want []string
		for k := range got {
			names = append(names, k)
		}
		for k := range doc.Components.Schemas[tc.schema].Properties {
			want = append(want, k)
		}
		sort.Strings(names)
		sort.Strings(want)
		if !reflect.DeepEqual(names, want) {
			t.Errorf("%s: fields %v, the API's description declares %v", tc.schema, names, want)
		}
	}
	got := keys(t, ProcessOf(p))
	for cli, api := range map[string]string{"limits": "method", "sigma": "k", "tz": "time_zone"} {
		if got[cli] != got[api] {
			t.Errorf("%s = %v, %s = %v; want the same", cli, got[cli], api, got[api])
		}
	}
	if c, ok := got["categories"].([]any); !ok || len(c) != 0 {
		t.Errorf("categories %v, want []", got["categories"])
	}
}

// TestAnnotationTimes checks that an annotation's times are written in
// the zone asked for (RFC 3339 with its offset) and that an open cause
// has no closing fields.
func TestAnnotationTimes(t *testing.T) {
	berlin, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Fatal(err)
	}
	at := time.Date(2026, 3, 2, 7, 0, 0, 0, time.UTC)
	a := store.Annotation{ID: 7, ProcessID: 1, LotID: 41, Cause: "worn die", By: "kim", At: at}
	got := keys(t, AnnotationOf(a, "A-1041", berlin))
	if got["at"] != "2026-03-02T08:00:00+01:00" || got["lot"] != "A-1041" {
		t.Errorf("open cause: %v", got)
	}
	if _, ok := got["closed_at"]; ok {
		t.Errorf("an open cause has closed_at: %v", got)
	}
	a.Closed, a.ClosedBy, a.ClosedAt = true, "kim", at.Add(time.Hour)
	if got := keys(t, AnnotationOf(a, "A-1041", time.UTC)); got["closed_at"] != "2026-03-02T08:00:00Z" || got["closed_by"] != "kim" {
		t.Errorf("closed cause: %v", got)
	}
}

package main

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"net/http/httptest"
	"os"
	"regexp"
	"testing"
	"time"

	"lotwatch/store"
	"lotwatch/store/storetest"
	"lotwatch/web"
)

// TestDemoDatabase builds the demo plant in a real database and reads it
// back through the JSON API as an inspection station would: the scenario
// the demo promises (frozen limit sets on some processes, trial limits on
// the others, the housing spike out of limits with its recorded cause, one
// sign-in per role) must be there.
func TestDemoDatabase(t *testing.T) {
	ctx := context.Background()
	db, err := store.Open(storetest.DB(t))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	end := demoEnd
	plant := demoPlant(end, demoSeed)
	if err := seedDemo(ctx, db, plant); err != nil {
		t.Fatal(err)
	}
	checkREADMEExample(t, db)
	for _, u := range demoUsers {
		if _, err := db.Authenticate(ctx, u.name, u.password); err != nil {
			t.Errorf("demo sign-in %s: %v", u.name, err)
		}
	}
	raw, _, err := db.CreateToken(ctx, "admin", "viewer", "test")
	if err != nil {
		t.Fatal(err)
	}
	srv, err := web.NewServer(web.Config{DB: db, Now: func() time.Time { return end }})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(srv.Handler())
	defer ts.Close()
	get := func(path string, v any) {
		t.Helper()
		req, _ := http.NewRequest("GET", ts.URL+path, nil)
		req.Header.Set("Authorization", "Bearer "+raw)
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		if resp.StatusCode != 200 {
			t.Fatalf("GET %s: %s", path, resp.Status)
		}
		if err := json.NewDecoder(resp.Body).Decode(v); err != nil {
			t.Fatal(err)
		}
	}
	var procs []struct {
		ID   int64  `json:"id"`
		Name string `json:"name"`
	}
	get("/api/v1/processes", &procs)
	if len(procs) != len(plant) {
		t.Fatalf("%d processes, want %d", len(procs), len(plant))
	}
	for _, dp := range plant {
		var id int64
		for _, p := range procs {
			if p.Name == dp.Name {
				id = p.ID
			}
		}
		var chart struct {
			Lots []struct {
				Lot         string `json:"lot"`
				OutOfLimits bool   `json:"out_of_limits"`
				Limits      string `json:"limits"`
			} `json:"lots"`
		}
		get(fmt.Sprintf("/api/v1/processes/%d/chart", id), &chart)
		if len(chart.Lots) != len(dp.Lots) {
			t.Errorf("%s: %d lots on the chart, want %d", dp.Name, len(chart.Lots), len(dp.Lots))
			continue
		}
		want := "trial"
		if dp.FreezeAfter > 0 {
			want = "frozen"
		}
		if got := chart.Lots[len(chart.Lots)-1].Limits; got != want {
			t.Errorf("%s: latest lot judged on %q limits, want %q", dp.Name, got, want)
		}
		for _, c := range dp.Causes {
			for _, l := range chart.Lots {
				if l.Lot == c.Lot && !l.OutOfLimits {
					t.Errorf("%s: lot %s with a recorded cause is not out of limits", dp.Name, c.Lot)
				}
			}
		}
		sets, err := db.LimitSets(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		if (len(sets) > 0) != (dp.FreezeAfter > 0) {
			t.Errorf("%s: %d limit sets", dp.Name, len(sets))
		}
		notes, err := db.Annotations(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		if len(notes) != len(dp.Causes) {
			t.Errorf("%s: %d annotations, want %d", dp.Name, len(notes), len(dp.Causes))
		}
	}
}

// checkREADMEExample: every lot row of README's worked example (code,
// inspected, count) is a lot of the demo database with those values, so
// that the example is what a new user sees on screen.
func checkREADMEExample(t *testing.T, db *store.DB) {
	t.Helper()
	b, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	stored := map[string][2]int64{}
	procs, err := db.Processes(context.Background(), true)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range procs {
		lots, err := db.Lots(context.Background(), p.ID, time.Time{}, time.Time{})
		if err != nil {
			t.Fatal(err)
		}
		for _, l := range lots {
			stored[l.Lot] = [2]int64{l.Inspected, l.Count}
		}
	}
	row := regexp.MustCompile(`(?m)^\s+([A-Z][0-9]-\d{6}-\d{2})\s+(\d+)\s+(\d+)\s`)
	rows := row.FindAllStringSubmatch(string(b), -1)
	if len(rows) == 0 {
		t.Fatal("no lot rows found in README's worked example")
	}
	for _, m := range rows {
		got, ok := stored[m[1]]
		if want := m[2] + "/" + m[3]; !ok || fmt.Sprintf("%d/%d", got[0], got[1]) != want {
			t.Errorf("README shows lot %s as %s inspected/count; the demo database holds %v (present: %v)", m[1], want, got, ok)
		}
	}
}

package main

import (
	"context"
	"encoding/json"
	"math"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
)

// reportDB makes a database with one p process in Europe/Berlin: 2026-W47
// 12 of 1000 nonconforming, 2026-W48 30 of 1000 (invented for the test).
func reportDB(t *testing.T) string {
	t.Helper()
	path := storetest.DB(t)
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	ctx := context.Background()
	p, err := db.AddProcess(ctx, "tester", store.Process{Name: "housing", Chart: spc.ChartP, TimeZone: "Europe/Berlin",
		Categories: []string{"burr", "dent"}})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.AddProcess(ctx, "tester", store.Process{Name: "panel", Chart: spc.ChartU, TimeZone: "America/Chicago"}); err != nil {
		t.Fatal(err)
	}
	berlin, _ := time.LoadLocation("Europe/Berlin")
	at := func(m time.Month, d, h int) time.Time { return time.Date(2026, m, d, h, 0, 0, 0, berlin) }
	_, err = db.AddLots(ctx, "tester", p.ID, []store.LotInput{
		{Lot: "A1", Time: at(11, 17, 8), Inspected: 500, Count: 5, Categories: map[string]int64{"burr": 5}},
		{Lot: "A2", Time: at(11, 19, 8), Inspected: 500, Count: 7, Categories: map[string]int64{"dent": 7}},
		{Lot: "B1", Time: at(11, 24, 8), Inspected: 500, Count: 14, Categories: map[string]int64{"burr": 10, "dent": 4}},
		{Lot: "B2", Time: at(11, 29, 23), Inspected: 500, Count: 16, Categories: map[string]int64{"burr": 16}},
	})
	if err != nil {
		t.Fatal(err)
	}
	return path
}

func TestReportJSON(t *testing.T) {
	path := reportDB(t)
	code, out, errs := runStats("report", "--db", path, "--week", "2026-W48", "--process", "housing,panel", "--format", "json")
	if code != exitOK {
		t.Fatalf("exit %d, stderr %s", code, errs)
	}
	var doc struct {
		Week, From, To string
		Processes      []struct {
			Process            string
			Lots               int
			Inspected, Count   int64
			Rate, Lower, Upper *float64
			Previous           struct {
				Week  string
				Count int64
			}
			Change struct {
				Difference *float64
				PValue     *float64 `json:"p_value"`
				Verdict    string
			}
			Pareto []struct {
				Category string
				Count    int64
			}
		}
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatalf("%v\n%s", err, out)
	}
	if doc.Week != "2026-W48" || len(doc.Processes) != 2 {
		t.Fatalf("%+v", doc)
	}
	h := doc.Processes[0]
	if h.Process != "housing" || h.Lots != 2 || h.Inspected != 1000 || h.Count != 30 || h.Previous.Week != "2026-W47" || h.Previous.Count != 12 {
		t.Errorf("housing: %+v", h)
	}
	// 30/1000: Wilson 95% interval [0.0210937, 0.0425034] (statsmodels
	// proportion_confint(30, 1000, method="wilson")).
	if h.Rate == nil || math.Abs(*h.Rate-0.03) > 1e-12 || math.Abs(*h.Lower-0.0210937) > 1e-6 || math.Abs(*h.Upper-0.0425034) > 1e-6 {
		t.Errorf("housing rate %v [%v, %v]", *h.Rate, *h.Lower, *h.Upper)
	}
	// 30/1000 against 12/1000: statsmodels proportions_ztest p = 0.004999.
	if h.Change.PValue == nil || math.Abs(*h.Change.PValue-0.004999) > 1e-6 || h.Change.Verdict != "a rise unlikely from sampling alone (p = 0.005)" {
		t.Errorf("housing change %+v", h.Change)
	}
	if len(h.Pareto) != 2 || h.Pareto[0].Category != "burr" || h.Pareto[0].Count != 26 {
		t.Errorf("housing Pareto %+v", h.Pareto)
	}
	pn := doc.Processes[1]
	if pn.Lots != 0 || pn.Rate != nil || pn.Lower != nil || pn.Upper != nil || pn.Change.Verdict != "no lots inspected" {
		t.Errorf("empty panel week: %+v", pn)
	}
}

func TestReportFormats(t *testing.T) {
	path := reportDB(t)
	for _, f := range []string{"text", "html", "csv"} {
		code, out, errs := runStats("report", "--db", path, "--week", "2026-W48", "--process", "housing", "--format", f, "--method", "jeffreys", "--level", "0.9")
		if code != exitOK || errs != "" {
			t.Fatalf("%s: exit %d, stderr %s", f, code, errs)
		}
		if !strings.Contains(out, "housing") {
			t.Errorf("%s output lacks the process:\n%s", f, out)
		}
		if f == "html" && (strings.Contains(out, "http") || strings.Contains(out, "<script")) {
			t.Errorf("html output refers outside itself or holds a script")
		}
		if f == "text" && (!strings.Contains(out, "90% Jeffreys interval") || !strings.Contains(out, "release or acceptance procedure")) {
			t.Errorf("text output:\n%s", out)
		}
	}
}

func TestReportBadInput(t *testing.T) {
	path := reportDB(t)
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"--week", "2026-W48"}, "--db is required"},
		{[]string{"--db", filepath.Join(t.TempDir(), "missing.db")}, "missing.db"},
		{[]string{"--db", path, "--week", "2026-W54"}, `--week "2026-W54"`},
		{[]string{"--db", path, "--week", "last"}, `--week "last"`},
		{[]string{"--db", path, "--method", "normal"}, `--method "normal"`},
		{[]string{"--db", path, "--method", "poisson-exact"}, `--method "poisson-exact"`},
		{[]string{"--db", path, "--level", "95"}, `--level "95"`},
		{[]string{"--db", path, "--format", "pdf"}, `--format "pdf"`},
		{[]string{"--db", path, "--process", "nope"}, `--process "nope"`},
		{[]string{"--db", path, "--process", "housing,"}, "housing,"},
		{[]string{"--db", path, "--colour", "red"}, "--colour"},
		{[]string{"--db", path, "extra"}, `"extra"`},
	}
	for _, c := range cases {
		code, out, errs := runStats(append([]string{"report"}, c.args...)...)
		if code != exitUsage || out != "" || !strings.Contains(errs, c.want) {
			t.Errorf("%v: exit %d, stdout %q, stderr %q; want exit 2, nothing on stdout, stderr naming %s", c.args, code, out, errs, c.want)
		}
	}
}

func TestReportHelp(t *testing.T) {
	code, out, _ := runStats("report", "-h")
	if code != exitOK {
		t.Fatalf("exit %d", code)
	}
	for _, opt := range []string{"--db", "--week", "--process", "--method", "--level", "--format", "-h"} {
		if !strings.Contains(out, opt) {
			t.Errorf("help lacks %s", opt)
		}
	}
}

func TestPlanFromProcess(t *testing.T) {
	path := reportDB(t)
	code, out, errs := runStats("plan", "--process", "housing", "--db", path, "--n", "400", "--p1", "0.06", "--format", "json")
	if code != exitOK {
		t.Fatalf("exit %d, stderr %s", code, errs)
	}
	var got struct {
		P0       float64 `json:"p0"`
		UCLCount int64   `json:"ucl_count"`
		ARL0     float64 `json:"arl0"`
		ARL1     float64 `json:"arl1"`
		P0Source string  `json:"p0_source"`
	}
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatal(err)
	}
	// No limit set frozen: p̄ = 42/2000 = 0.021 over the four lots. At
	// n = 400, 3σ: n·UCL = 17.003, so 17 (hand arithmetic); ARL1 =
	// 1/binom.sf(17, 400, 0.06) = 1.08762920015 and ARL0 =
	// 1/binom.sf(17, 400, 0.021) = 421.489615557 (scipy.stats.binom).
	if got.P0 != 0.021 || got.UCLCount != 17 || !strings.Contains(got.P0Source, "trial centre") {
		t.Errorf("plan from process: %+v", got)
	}
	if math.Abs(got.ARL1-1.0876292001524368) > 1e-9 || math.Abs(got.ARL0/421.48961555725333-1) > 1e-9 {
		t.Errorf("ARLs %v %v", got.ARL0, got.ARL1)
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--process", "panel", "--db", path, "--n", "400"}, "u chart"},
		{[]string{"--process", "housing", "--n", "400"}, "needs --db"},
		{[]string{"--db", path, "--n", "400"}, "needs --process"},
		{[]string{"--process", "housing", "--db", path, "--p0", "0.1", "--n", "400"}, "not both"},
		{[]string{"--process", "nope", "--db", path, "--n", "400"}, `--process "nope"`},
	} {
		code, out, errs := runStats(append([]string{"plan"}, c.args...)...)
		if code != exitUsage || out != "" || !strings.Contains(errs, c.want) {
			t.Errorf("plan %v: exit %d, stdout %q, stderr %q; want exit 2 naming %q", c.args, code, out, errs, c.want)
		}
	}
}

package report

import (
	"bufio"
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
	"lotwatch/web/review"
)

var ctx = context.Background()

// referenceStore stores the lots of ../testdata/review_reference.json
// (written by review_reference.py: statsmodels, scipy), two processes
// reviewed in 2026-W48.
func referenceStore(t *testing.T) (*store.DB, string) {
	t.Helper()
	var ref struct {
		Week      string
		Processes []struct {
			Name       string
			Chart      spc.Chart
			TimeZone   string `json:"time_zone"`
			Categories []string
			Lots       []struct {
				Lot              string
				Time             time.Time
				Inspected, Count int64
				Categories       map[string]int64
			}
		}
	}
	b, err := os.ReadFile(filepath.Join("..", "testdata", "review_reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	db, err := store.Open(storetest.DB(t))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	for _, rp := range ref.Processes {
		p, err := db.AddProcess(ctx, "tester", store.Process{Name: rp.Name, Chart: rp.Chart, Method: spc.MethodSigma, K: 3, Rules: "we",
			Categories: rp.Categories, TimeZone: rp.TimeZone})
		if err != nil {
			t.Fatal(err)
		}
		var in []store.LotInput
		for _, l := range rp.Lots {
			in = append(in, store.LotInput{Lot: l.Lot, Time: l.Time, Inspected: l.Inspected, Count: l.Count, Categories: l.Categories})
		}
		if _, err := db.AddLots(ctx, "tester", p.ID, in); err != nil {
			t.Fatal(err)
		}
	}
	return db, ref.Week
}

// signalReview is the review of the reference data with the first
// process's limits frozen at its usual 3% (the rate the reference data was
// drawn at) from 2026-W40, and a closed cause recorded on the reviewed
// week's worst lot.
func signalReview(t *testing.T) *review.Review {
	t.Helper()
	db, week := referenceStore(t)
	berlin, _ := time.LoadLocation("Europe/Berlin")
	if _, err := db.FreezeLimitSet(ctx, "tester", store.LimitSet{ProcessID: 1, Method: spc.MethodSigma, K: 3, Center: 0.03, SigmaZ: 1,
		EffectiveFrom: time.Date(2026, 9, 28, 0, 0, 0, 0, berlin), Reason: "the usual rate"}); err != nil {
		t.Fatal(err)
	}
	r, err := review.Build(ctx, db, review.Options{Week: week})
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Processes[0].OutOfLimits) == 0 {
		t.Fatalf("no lot of %s beyond limits at a centre of 0.03", week)
	}
	worst := r.Processes[0].OutOfLimits[0].Lot
	a, err := db.AddAnnotation(ctx, "ana", store.Annotation{ProcessID: 1, LotID: worst.ID, Cause: "worn deburring tool", Action: "tool replaced"})
	if err != nil {
		t.Fatal(err)
	}
	if err := db.CloseAnnotation(ctx, "ana", a.ID, "tool replaced"); err != nil {
		t.Fatal(err)
	}
	if r, err = review.Build(ctx, db, review.Options{Week: week}); err != nil {
		t.Fatal(err)
	}
	return r
}

// TestHTMLSelfContained checks that the mailed HTML file refers to nothing
// outside itself and needs no script.
func TestHTMLSelfContained(t *testing.T) {
	r := signalReview(t)
	var b bytes.Buffer
	if err := WriteHTML(&b, r); err != nil {
		t.Fatal(err)
	}
	doc := b.String()
	for _, bad := range []string{"http:", "https:", "//", "src=", "href=", "url(", "<script", "javascript:", "@import", "<link", "<img", "<iframe", "<object"} {
		if i := strings.Index(strings.ToLower(doc), bad); i >= 0 {
			t.Errorf("HTML holds %q: …%s…", bad, doc[max(0, i-60):min(len(doc), i+60)])
		}
	}
	for _, want := range []string{"<!DOCTYPE html>", "<style>", "@media print", "page-break-before", "<svg", "polyline",
		"housing-check", "panel-finish", "worn deburring tool", "cause closed", "a rise unlikely from sampling alone",
		"within what sampling alone produces", "sampling variation only", "release or acceptance procedure", "no lots",
		"At a glance, of 2 processes"} {
		if !strings.Contains(doc, want) {
			t.Errorf("HTML lacks %q", want)
		}
	}
	if os.Getenv("REVIEW_WRITE_SAMPLE") != "" {
		os.WriteFile(os.Getenv("REVIEW_WRITE_SAMPLE"), b.Bytes(), 0o644)
	}
	frag, err := HTMLFragment(r)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(string(frag), "style=") || strings.Contains(string(frag), "<style") {
		t.Error("the fragment carries inline style, which a strict content security policy blocks")
	}
}

func TestTextAndCSV(t *testing.T) {
	r := signalReview(t)
	var b bytes.Buffer
	if err := WriteText(&b, r); err != nil {
		t.Fatal(err)
	}
	text := b.String()
	// 67 of 1200 in 2026-W48 (review_reference.json): 5.58%.
	for _, want := range []string{"Weekly review 2026-W48", "2026-W48: 4 lots, 1200 inspected, 67 nonconforming, rate 5.58%",
		"worn deburring tool", "Verdict: a rise unlikely from sampling alone (p < 0.001)", "At a glance, of 2 processes: 1 with a rise", "Caution:"} {
		if !strings.Contains(text, want) {
			t.Errorf("text lacks %q:\n%s", want, text)
		}
	}
	b.Reset()
	if err := WriteCSV(&b, r); err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(&b).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 3 || len(rows[0]) != len(CSVHeader) || rows[1][1] != "housing-check" || rows[1][7] != "67" {
		t.Errorf("CSV rows %v", rows)
	}
	if !regexp.MustCompile(`^0\.0558`).MatchString(rows[1][8]) {
		t.Errorf("CSV rate %q, want the fraction 0.0558…", rows[1][8])
	}
}

// TestJSONContract: the field names of the review's JSON exactly as the
// contract of `lotwatch report --format json` writes them, rates as
// fractions, and nulls where a week has no lots.
func TestJSONContract(t *testing.T) {
	db, week := referenceStore(t)
	r, err := review.Build(ctx, db, review.Options{Week: week})
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	if err := WriteJSON(&b, r); err != nil {
		t.Fatal(err)
	}
	var doc map[string]any
	if err := json.Unmarshal(b.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"week", "from", "to", "processes"} {
		if _, ok := doc[k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
	if doc["from"] != "2026-11-23" || doc["to"] != "2026-11-29" {
		t.Errorf("from/to = %v/%v, want Monday 2026-11-23 and Sunday 2026-11-29 (ISO 8601 week 48 of 2026)", doc["from"], doc["to"])
	}
	p0 := doc["processes"].([]any)[0].(map[string]any)
	for _, k := range []string{"process", "lots", "inspected", "count", "rate", "lower", "upper", "previous", "change", "signals", "pareto"} {
		if _, ok := p0[k]; !ok {
			t.Errorf("JSON process lacks %q", k)
		}
	}
	for _, k := range []string{"week", "lots", "inspected", "count", "rate", "lower", "upper"} {
		if _, ok := p0["previous"].(map[string]any)[k]; !ok {
			t.Errorf("JSON previous lacks %q", k)
		}
	}
	for _, k := range []string{"difference", "lower", "upper", "p_value", "verdict"} {
		if _, ok := p0["change"].(map[string]any)[k]; !ok {
			t.Errorf("JSON change lacks %q", k)
		}
	}
	bar := p0["pareto"].([]any)[0].(map[string]any)
	for _, k := range []string{"category", "count", "percent", "cumulative_percent"} {
		if _, ok := bar[k]; !ok {
			t.Errorf("JSON pareto bar lacks %q", k)
		}
	}
	// Rates as fractions: 67/1200 (review_reference.json), not a percent.
	if got := p0["rate"].(float64); got != 67.0/1200 {
		t.Errorf("JSON rate %v, want 67/1200", got)
	}
	// The panel process had no lots in 2026-W41: its trend shows nulls.
	p1 := doc["processes"].([]any)[1].(map[string]any)
	for _, w := range p1["trend"].([]any) {
		w := w.(map[string]any)
		if w["week"] == "2026-W41" && (w["rate"] != nil || w["lower"] != nil || w["upper"] != nil || w["lots"].(float64) != 0) {
			t.Errorf("2026-W41 of the panel process: %v, want no lots and null rates", w)
		}
	}
	if g := doc["at_a_glance"].(map[string]any); g["processes"] != 2.0 {
		t.Errorf("at_a_glance %v", g)
	}

	// A week with no lots: null rates and the verdict saying so.
	if r, err = review.Build(ctx, db, review.Options{Week: "2026-W41", Processes: []string{p1["process"].(string)}}); err != nil {
		t.Fatal(err)
	}
	b.Reset()
	WriteJSON(&b, r)
	var empty struct{ Processes []map[string]any }
	json.Unmarshal(b.Bytes(), &empty)
	p := empty.Processes[0]
	if p["rate"] != nil || p["lower"] != nil || p["upper"] != nil || p["change"].(map[string]any)["verdict"] != "no lots inspected" {
		t.Errorf("JSON of an empty week: %v", p)
	}
}

// TestAnnotationText: a finding of no assignable cause is written with
// its reason, not as a cause.
func TestAnnotationText(t *testing.T) {
	none := store.Annotation{NoCauseFound: true, Reason: "gauge and film batch checked", Closed: true, By: "ana"}
	var buf bytes.Buffer
	w := bufio.NewWriter(&buf)
	writeAnnotations(w, []store.Annotation{none}, time.UTC)
	w.Flush()
	if !strings.Contains(buf.String(), "no assignable cause found: gauge and film batch checked (ana, closed") {
		t.Errorf("text: %q", buf.String())
	}
}

// TestShiftWording: a CUSUM signal in the reviewed week is named a
// sustained small shift, with what it means, in every rendering. The
// record is 30 lots at 2% and then lots at 6% (200 units each); the CUSUM
// for a rise to 5% from the trial centre catches the rise (Page 1954; its
// decision interval by spc.DesignCUSUM).
func TestShiftWording(t *testing.T) {
	db, err := store.Open(storetest.DB(t))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	p, err := db.AddProcess(ctx, "tester", store.Process{Name: "seal", Chart: spc.ChartP, Method: spc.MethodSigma, K: 3, Rules: "none", TimeZone: "UTC",
		Monitors: spc.Monitors{CUSUMShift: 0.05}})
	if err != nil {
		t.Fatal(err)
	}
	start, _ := spc.ISOWeekRange(2026, 48, time.UTC)
	var in []store.LotInput
	for i := range 44 {
		d := int64(4)
		if i >= 30 {
			d = 12
		}
		in = append(in, store.LotInput{Lot: fmt.Sprintf("S%02d", i), Time: start.Add(time.Duration(i-30) * 8 * time.Hour), Inspected: 200, Count: d})
	}
	if _, err := db.AddLots(ctx, "tester", p.ID, in); err != nil {
		t.Fatal(err)
	}
	r, err := review.Build(ctx, db, review.Options{Week: "2026-W48"})
	if err != nil {
		t.Fatal(err)
	}
	pr := r.Processes[0]
	if pr.Shifts() == 0 {
		t.Fatalf("no shift signal among %+v", pr.Signals)
	}
	var text, js, csvOut bytes.Buffer
	if err := WriteText(&text, r); err != nil {
		t.Fatal(err)
	}
	if err := WriteJSON(&js, r); err != nil {
		t.Fatal(err)
	}
	if err := WriteCSV(&csvOut, r); err != nil {
		t.Fatal(err)
	}
	html, err := HTMLFragment(r)
	if err != nil {
		t.Fatal(err)
	}
	for name, c := range map[string]struct {
		got  string
		want []string
	}{
		"text": {text.String(), []string{"cusum (a sustained small shift): CUSUM for a rise", "What it means: " + review.ShiftMeaning,
			review.Plural(pr.Shifts(), "signal", "signals") + " of a sustained small shift"}},
		"json": {js.String(), []string{`"kind": "shift"`, `"meaning": "` + review.ShiftMeaning + `"`}},
		"html": {string(html), []string{"sustained small shift</span>", review.ShiftMeaning}},
	} {
		for _, w := range c.want {
			if !strings.Contains(c.got, w) {
				t.Errorf("%s lacks %q:\n%s", name, w, c.got)
			}
		}
	}
	rows, err := csv.NewReader(&csvOut).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if col := slices.Index(rows[0], "shift_signals"); col < 0 || rows[1][col] != strconv.Itoa(pr.Shifts()) {
		t.Errorf("CSV %v: want shift_signals %d", rows, pr.Shifts())
	}
}

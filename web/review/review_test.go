package review

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
)

var ctx = context.Background()

// fakeSource is an in-memory Source with fixed data, for the review logic;
// TestReferenceWithStore runs the same review on the real store.
type fakeSource struct {
	procs []store.Process
	lots  map[int64][]store.Lot
	sets  map[int64][]store.LimitSet
	notes map[int64][]store.Annotation
}

func (f *fakeSource) Processes(_ context.Context, retired bool) ([]store.Process, error) {
	var out []store.Process
	for _, p := range f.procs {
		if p.Active || retired {
			out = append(out, p)
		}
	}
	return out, nil
}

// Lots keeps from ≤ time < to, as the store contract says.
func (f *fakeSource) LotCounts(_ context.Context, id int64, from, to time.Time) ([]store.Lot, error) {
	var out []store.Lot
	for _, l := range f.lots[id] {
		if (from.IsZero() || !l.Time.Before(from)) && (to.IsZero() || l.Time.Before(to)) {
			out = append(out, l)
		}
	}
	return out, nil
}

func (f *fakeSource) LimitSets(_ context.Context, id int64) ([]store.LimitSet, error) {
	return f.sets[id], nil
}

func (f *fakeSource) Annotations(_ context.Context, id int64) ([]store.Annotation, error) {
	return f.notes[id], nil
}

func (f *fakeSource) add(p store.Process, lots ...store.Lot) {
	p.ID = int64(len(f.procs) + 1)
	p.Active = true
	f.procs = append(f.procs, p)
	if f.lots == nil {
		f.lots = map[int64][]store.Lot{}
	}
	for i := range lots {
		lots[i].ID = p.ID*10000 + int64(i) + 1
		lots[i].ProcessID = p.ID
	}
	f.lots[p.ID] = append(f.lots[p.ID], lots...)
}

func lot(code string, t time.Time, n, c int64) store.Lot {
	return store.Lot{LotInput: store.LotInput{Lot: code, Time: t, Inspected: n, Count: c}}
}

// reference is web/review/testdata/review_reference.json, written by
// review_reference.py (statsmodels, scipy).
type reference struct {
	Week      string
	Level     float64
	Processes []struct {
		Name       string
		Chart      spc.Chart
		TimeZone   string `json:"time_zone"`
		Categories []string
		Lots       []struct {
			Lot        string
			Time       time.Time
			Inspected  int64
			Count      int64
			Categories map[string]int64
		}
		Expect struct {
			Weeks []struct {
				Week             string
				Lots             int
				Inspected, Count int64
				Rate             *float64
				Wilson           []float64
				ClopperPearson   []float64 `json:"clopper_pearson"`
				PoissonExact     []float64 `json:"poisson_exact"`
			}
			Change *struct {
				Difference   float64
				PValue       float64 `json:"p_value"`
				Lower, Upper *float64
			}
			Pareto []struct {
				Category          string
				Count             int64
				Percent           float64
				CumulativePercent float64 `json:"cumulative_percent"`
			}
		}
	}
}

func loadReference(t *testing.T) reference {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("testdata", "review_reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	var ref reference
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	return ref
}

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.Abs(got-want) > tol*math.Max(1, math.Abs(want)) {
		t.Errorf("%s = %.12g, want %.12g", what, got, want)
	}
}

func (ref reference) fake() *fakeSource {
	f := &fakeSource{}
	for _, p := range ref.Processes {
		var lots []store.Lot
		for _, l := range p.Lots {
			sl := lot(l.Lot, l.Time, l.Inspected, l.Count)
			sl.Categories = l.Categories
			lots = append(lots, sl)
		}
		f.add(store.Process{Name: p.Name, Chart: p.Chart, Method: spc.MethodSigma, K: 3, Rules: "we",
			Categories: p.Categories, TimeZone: p.TimeZone}, lots...)
	}
	return f
}

// checkReference compares a review built from the reference lots with the
// values statsmodels and scipy gave (testdata/review_reference.py).
func checkReference(t *testing.T, ref reference, r *Review, method spc.IntervalMethod) {
	t.Helper()
	if r.Week != ref.Week || len(r.Processes) != len(ref.Processes) {
		t.Fatalf("review of %s with %d processes, want %s with %d", r.Week, len(r.Processes), ref.Week, len(ref.Processes))
	}
	for i, rp := range ref.Processes {
		pr := r.Processes[i]
		if pr.Process.Name != rp.Name {
			t.Fatalf("process %d is %q, want %q", i, pr.Process.Name, rp.Name)
		}
		if len(pr.Trend) != len(rp.Expect.Weeks) {
			t.Fatalf("%s: %d trend weeks, want %d", rp.Name, len(pr.Trend), len(rp.Expect.Weeks))
		}
		for j, w := range rp.Expect.Weeks {
			st := pr.Trend[j]
			if st.Week != w.Week || st.Lots != w.Lots || st.Inspected != w.Inspected || st.Count != w.Count {
				t.Errorf("%s week %d: %s %d lots %d/%d, want %s %d lots %d/%d (zoneinfo isocalendar)", rp.Name, j,
					st.Week, st.Lots, st.Count, st.Inspected, w.Week, w.Lots, w.Count, w.Inspected)
				continue
			}
			if w.Rate == nil {
				if !math.IsNaN(st.Rate) || !math.IsNaN(st.Lower) {
					t.Errorf("%s %s: no lots but rate %v [%v, %v]", rp.Name, w.Week, st.Rate, st.Lower, st.Upper)
				}
				continue
			}
			near(t, rp.Name+" "+w.Week+" rate", st.Rate, *w.Rate, 1e-12)
			want := w.Wilson // statsmodels proportion_confint(method="wilson")
			switch {
			case rp.Chart == spc.ChartU || rp.Chart == spc.ChartC:
				want = w.PoissonExact // scipy chi2.ppf (Garwood)
			case method == spc.IntervalClopperPearson:
				want = w.ClopperPearson // statsmodels proportion_confint(method="beta")
			}
			near(t, rp.Name+" "+w.Week+" lower", st.Lower, want[0], 1e-9)
			near(t, rp.Name+" "+w.Week+" upper", st.Upper, want[1], 1e-9)
		}
		c, wc := pr.Change, rp.Expect.Change
		if wc == nil {
			if c.Compared || c.Verdict != VerdictNoLots {
				t.Errorf("%s: change %+v, want none (a week without lots)", rp.Name, c)
			}
		} else {
			near(t, rp.Name+" difference", c.Difference, wc.Difference, 1e-12)
			// statsmodels proportions_ztest; scipy binomtest for u.
			near(t, rp.Name+" p-value", c.PValue, wc.PValue, 1e-7)
			if wc.Lower != nil { // statsmodels confint_proportions_2indep(method="newcomb")
				near(t, rp.Name+" difference lower", c.Lower, *wc.Lower, 1e-9)
				near(t, rp.Name+" difference upper", c.Upper, *wc.Upper, 1e-9)
			}
		}
		if len(pr.Pareto) != len(rp.Expect.Pareto) {
			t.Fatalf("%s: Pareto %v, want %v", rp.Name, pr.Pareto, rp.Expect.Pareto)
		}
		for j, b := range rp.Expect.Pareto {
			got := pr.Pareto[j]
			if got.Category != b.Category || got.Count != b.Count {
				t.Errorf("%s Pareto %d: %s %d, want %s %d", rp.Name, j, got.Category, got.Count, b.Category, b.Count)
			}
			near(t, rp.Name+" Pareto percent "+b.Category, got.Percent, b.Percent, 1e-9)
			near(t, rp.Name+" Pareto cumulative "+b.Category, got.CumulativePercent, b.CumulativePercent, 1e-9)
		}
	}
}

func TestReferenceFake(t *testing.T) {
	ref := loadReference(t)
	for _, m := range []spc.IntervalMethod{spc.IntervalWilson, spc.IntervalClopperPearson} {
		r, err := Build(ctx, ref.fake(), Options{Week: ref.Week, Method: m, Level: ref.Level})
		if err != nil {
			t.Fatal(err)
		}
		checkReference(t, ref, r, m)
	}
}

// TestReferenceWithStore runs the reference review end to end on a real
// store in a temporary directory. The reference lots include, every week,
// one at Monday 00:10 and one at Sunday 23:30 on the plant's clocks, and
// the window (2026-W37 to W48) spans the end of summer time in Berlin
// (25 October) and of daylight time in Chicago (1 November); the week of
// each lot was found by Python's zoneinfo and isocalendar.
func TestReferenceWithStore(t *testing.T) {
	ref := loadReference(t)
	db, err := store.Open(storetest.DB(t))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	for _, rp := range ref.Processes {
		p, err := db.AddProcess(ctx, "tester", store.Process{Name: rp.Name, Chart: rp.Chart, Categories: rp.Categories, TimeZone: rp.TimeZone, Rules: "we"})
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
	r, err := Build(ctx, db, Options{Week: ref.Week})
	if err != nil {
		t.Fatal(err)
	}
	checkReference(t, ref, r, spc.IntervalWilson)
}

func TestVerdictWording(t *testing.T) {
	// Counts chosen so that the pooled two-proportion z test (Fleiss, Levin
	// & Paik 2003, §2.4) is far from or near 0; the wording must never say
	// the process got better or worse, nor that nothing changed.
	cases := []struct {
		name           string
		d1, n1, d2, n2 int64
		want           string
	}{
		{"clear rise", 60, 1000, 20, 1000, "a rise unlikely from sampling alone (p < 0.001)"},
		{"clear fall", 20, 1000, 60, 1000, "a fall unlikely from sampling alone (p < 0.001)"},
		// 22/1000 vs 20/1000: z = 0.31, p = 0.76 (statsmodels proportions_ztest gives 0.7551).
		{"noise", 22, 1000, 20, 1000, "within what sampling alone produces (p = 0.76)"},
	}
	for _, c := range cases {
		f := &fakeSource{}
		berlin, _ := time.LoadLocation("Europe/Berlin")
		f.add(store.Process{Name: "x", Chart: spc.ChartP, K: 3, Rules: "we", TimeZone: "Europe/Berlin"},
			lot("a", time.Date(2026, 11, 18, 10, 0, 0, 0, berlin), c.n2, c.d2),
			lot("b", time.Date(2026, 11, 25, 10, 0, 0, 0, berlin), c.n1, c.d1))
		r, err := Build(ctx, f, Options{Week: "2026-W48"})
		if err != nil {
			t.Fatal(err)
		}
		v := r.Processes[0].Change.Verdict
		if v != c.want {
			t.Errorf("%s: verdict %q, want %q", c.name, v, c.want)
		}
		for _, bad := range []string{"worse", "better", "no change", "improv", "deteriorat"} {
			if strings.Contains(strings.ToLower(v), bad) {
				t.Errorf("%s: verdict %q overclaims (%q)", c.name, v, bad)
			}
		}
	}
}

func TestNoLots(t *testing.T) {
	f := &fakeSource{}
	f.add(store.Process{Name: "quiet", Chart: spc.ChartP, K: 3, Rules: "we", TimeZone: "UTC"},
		lot("a", time.Date(2026, 11, 18, 10, 0, 0, 0, time.UTC), 100, 2))
	r, err := Build(ctx, f, Options{Week: "2026-W48"})
	if err != nil {
		t.Fatal(err)
	}
	pr := r.Processes[0]
	if pr.Current.HasLots() || pr.Change.Compared || pr.Change.Verdict != "no lots inspected" ||
		!strings.Contains(pr.Change.Detail, "too little data") {
		t.Errorf("empty week: %+v %+v", pr.Current, pr.Change)
	}
	// A week without lots before it: too little data to compare.
	r, err = Build(ctx, f, Options{Week: "2026-W47"})
	if err != nil {
		t.Fatal(err)
	}
	if c := r.Processes[0].Change; c.Compared || !strings.Contains(c.Detail, "2026-W46") {
		t.Errorf("previous week empty: %+v", c)
	}
}

// TestWeekBoundaries puts lots at Sunday 23:30 and Monday 00:10 on the
// plant's clocks around daylight-saving changes and New Year: the first
// belongs to the week that Sunday ends, the second to the next (ISO 8601:
// weeks run Monday to Sunday; week 1 holds the year's first Thursday).
// Dates of the changes: EU summer time ends on the last Sunday of
// October, US daylight time ends on the first Sunday of November and
// starts on the second Sunday of March (from memory; Go's tzdata agrees).
func TestWeekBoundaries(t *testing.T) {
	cases := []struct {
		zone       string
		sunday     [3]int // y, m, d of a Sunday
		week, next string
	}{
		{"Europe/Berlin", [3]int{2026, 10, 25}, "2026-W43", "2026-W44"},  // summer time ends that Sunday
		{"Europe/Berlin", [3]int{2026, 3, 29}, "2026-W13", "2026-W14"},   // summer time starts that Sunday
		{"America/Chicago", [3]int{2026, 11, 1}, "2026-W44", "2026-W45"}, // daylight time ends that Sunday
		{"America/Chicago", [3]int{2026, 3, 8}, "2026-W10", "2026-W11"},  // daylight time starts that Sunday
		{"Europe/Berlin", [3]int{2027, 1, 3}, "2026-W53", "2027-W01"},    // 2026 has 53 weeks (it starts on a Thursday)
		{"America/Chicago", [3]int{2027, 1, 3}, "2026-W53", "2027-W01"},
		{"Europe/Berlin", [3]int{2021, 1, 3}, "2020-W53", "2021-W01"},     // 2020 has 53 weeks
		{"America/Chicago", [3]int{2025, 12, 28}, "2025-W52", "2026-W01"}, // 2026-W01 starts on Monday 29 December 2025
	}
	for _, c := range cases {
		loc, err := time.LoadLocation(c.zone)
		if err != nil {
			t.Fatal(err)
		}
		y, m, d := c.sunday[0], time.Month(c.sunday[1]), c.sunday[2]
		late := time.Date(y, m, d, 23, 30, 0, 0, loc)
		early := time.Date(y, m, d+1, 0, 10, 0, 0, loc)
		f := &fakeSource{}
		f.add(store.Process{Name: "line", Chart: spc.ChartP, K: 3, Rules: "none", TimeZone: c.zone},
			lot("sun", late, 100, 1), lot("mon", early, 200, 3))
		for _, wk := range []struct {
			week  string
			n, cn int64
		}{{c.week, 100, 1}, {c.next, 200, 3}} {
			r, err := Build(ctx, f, Options{Week: wk.week, TrendWeeks: 2})
			if err != nil {
				t.Fatal(err)
			}
			cur := r.Processes[0].Current
			if cur.Lots != 1 || cur.Inspected != wk.n || cur.Count != wk.cn {
				t.Errorf("%s: %s holds %d lots (%d/%d), want the lot of %d/%d", c.zone, wk.week, cur.Lots, cur.Count, cur.Inspected, wk.cn, wk.n)
			}
		}
	}
}

func TestDefaultWeek(t *testing.T) {
	f := &fakeSource{}
	f.add(store.Process{Name: "tokyo", Chart: spc.ChartP, TimeZone: "Asia/Tokyo"})
	f.add(store.Process{Name: "chicago", Chart: spc.ChartP, TimeZone: "America/Chicago"})
	// Monday 2026-11-30 05:00 in Tokyo is Sunday 14:00 in Chicago: W48 is
	// complete in Tokyo only, so the last week complete everywhere is W47.
	now := time.Date(2026, 11, 29, 20, 0, 0, 0, time.UTC)
	r, err := Build(ctx, f, Options{Now: now})
	if err != nil {
		t.Fatal(err)
	}
	if r.Week != "2026-W47" {
		t.Errorf("default week %s, want 2026-W47", r.Week)
	}
	r, _ = Build(ctx, f, Options{Now: now, Processes: []string{"tokyo"}})
	if r.Week != "2026-W48" {
		t.Errorf("default week for Tokyo alone %s, want 2026-W48", r.Week)
	}
}

func TestBadOptions(t *testing.T) {
	f := &fakeSource{}
	f.add(store.Process{Name: "a", Chart: spc.ChartP, TimeZone: "UTC"})
	for _, c := range []struct {
		opt    Options
		option string
		value  string
	}{
		{Options{Week: "2026-W54"}, "week", "2026-W54"},
		{Options{Week: "48"}, "week", "48"},
		{Options{Method: "poisson-exact"}, "method", "poisson-exact"},
		{Options{Method: "fancy"}, "method", "fancy"},
		{Options{Level: 1.5}, "level", "1.5"},
		{Options{Processes: []string{"nope"}}, "process", "nope"},
	} {
		_, err := Build(ctx, f, c.opt)
		var oe *OptionError
		if !errors.As(err, &oe) || oe.Option != c.option || oe.Value != c.value {
			t.Errorf("%+v: error %v, want an OptionError naming %s %q", c.opt, err, c.option, c.value)
		}
	}
}

// TestVerdictsOnWholeRecord: with trial limits (no frozen set) the review
// judges the reviewed week's lots on the whole record, as the chart page
// does, not on the weeks of its trend. Eighteen weeks at p = 0.08 and
// twelve at 0.02 put p̄ = Σd/Σn of the record near 0.056 (Montgomery,
// ch. 7: limits p̄ ± 3√(p̄(1−p̄)/n)); the lots of the last week, at 0.02
// and 0.044, are then below the LCL and within the limits, where the
// twelve weeks alone (p̄ near 0.021) would put the first within and the
// second above.
func TestVerdictsOnWholeRecord(t *testing.T) {
	loc := time.UTC
	var lots []store.Lot
	var sn, sd float64
	for w := 1; w <= 30; w++ {
		start, _ := spc.ISOWeekRange(2026, w, loc)
		d := int64(40)
		if w > 18 {
			d = 10
		}
		lots = append(lots, lot(fmt.Sprintf("W%02d", w), start.Add(8*time.Hour), 500, d))
		if w == 30 {
			lots = append(lots, lot("W30b", start.Add(9*time.Hour), 500, 22))
		}
	}
	for _, l := range lots {
		sn += float64(l.Inspected)
		sd += float64(l.Count)
	}
	pb := sd / sn
	s := math.Sqrt(pb * (1 - pb) / 500)
	ucl, lcl := pb+3*s, pb-3*s
	f := &fakeSource{}
	f.add(store.Process{Name: "line", Chart: spc.ChartP, K: 3, Rules: "none", TimeZone: "UTC"}, lots...)
	r, err := Build(ctx, f, Options{Week: "2026-W30"})
	if err != nil {
		t.Fatal(err)
	}
	got := map[string]bool{} // lot code → above
	for _, o := range r.Processes[0].OutOfLimits {
		got[o.Lot.Lot] = o.Above
		if math.Abs(o.UCL-ucl) > 1e-12 || math.Abs(o.LCL-lcl) > 1e-12 || o.Limits != "trial limits" {
			t.Errorf("%s judged against %s %v … %v, want the record's trial limits %v … %v", o.Lot.Lot, o.Limits, o.LCL, o.UCL, lcl, ucl)
		}
	}
	want := map[string]bool{}
	for _, l := range lots[len(lots)-2:] {
		if v := float64(l.Count) / 500; v > ucl || v < lcl {
			want[l.Lot] = v > ucl
		}
	}
	if fmt.Sprint(got) != fmt.Sprint(want) || len(want) != 1 {
		t.Errorf("out of limits in the week: %v, want %v (p̄ %.4f, limits %.4f … %.4f)", got, want, pb, lcl, ucl)
	}
}

// TestVerdictsAgreeWithIntervals runs the verdict of every small-count
// case of a table (the counts where the pooled z test and the interval
// part ways) and checks each string against its own interval: a rise only
// when the interval lies above 0 and p < 0.05, a fall only below 0, and
// "within what sampling alone produces" only when the interval includes 0
// and p ≥ 0.05. The first row is the measured case: 1 of 5 against 0 of 25,
// Newcombe interval (−0.011, 0.625), z-test p = 0.023, Fisher's exact
// p = 1/6 (scipy.stats.fisher_exact, spc/testdata/verdicts_reference.json).
func TestVerdictsAgreeWithIntervals(t *testing.T) {
	week := func(n, d int64) WeekStat { return WeekStat{Week: "w", Lots: 1, Inspected: n, Count: d} }
	c := compare(spc.ChartP, week(5, 1), week(25, 0), 0.95)
	if want := "within what sampling alone produces (p = 0.17)"; c.Verdict != want || c.Test != spc.TestFisherExact {
		t.Errorf("1 of 5 vs 0 of 25: verdict %q by %s, want %q by Fisher's exact test", c.Verdict, c.Test, want)
	}
	sizes := []int64{2, 5, 10, 25, 60}
	kinds := map[string]int{}
	for _, ch := range []spc.Chart{spc.ChartP, spc.ChartU} {
		for _, n1 := range sizes {
			for _, n2 := range sizes {
				for d1 := int64(0); d1 <= min(n1, 8); d1++ {
					for d2 := int64(0); d2 <= min(n2, 8); d2++ {
						c := compare(ch, week(n1, d1), week(n2, d2), 0.95)
						name := fmt.Sprintf("%s %d/%d vs %d/%d", ch, d1, n1, d2, n2)
						checkVerdict(t, name, c, 0.05)
						kinds[strings.SplitN(c.Verdict, " (", 2)[0]]++
					}
				}
			}
		}
	}
	// The table must reach every wording, or it checks less than it seems.
	for _, k := range []string{"a rise unlikely from sampling alone", "a fall unlikely from sampling alone",
		"within what sampling alone produces", "too close to call"} {
		if kinds[k] == 0 {
			t.Errorf("no case of the table gave %q (%v)", k, kinds)
		}
	}
}

// checkVerdict checks one verdict string against its change's interval
// and p-value at significance alpha.
func checkVerdict(t *testing.T, name string, c Change, alpha float64) {
	t.Helper()
	v := c.Verdict
	excludes0 := c.Lower > 0 || c.Upper < 0
	switch {
	case strings.HasPrefix(v, "a rise unlikely"):
		if !(c.Lower > 0 && c.PValue < alpha) {
			t.Errorf("%s: %q beside interval (%.4g, %.4g), p %.4g", name, v, c.Lower, c.Upper, c.PValue)
		}
	case strings.HasPrefix(v, "a fall unlikely"):
		if !(c.Upper < 0 && c.PValue < alpha) {
			t.Errorf("%s: %q beside interval (%.4g, %.4g), p %.4g", name, v, c.Lower, c.Upper, c.PValue)
		}
	case strings.HasPrefix(v, "within what sampling"):
		if excludes0 || c.PValue < alpha {
			t.Errorf("%s: %q beside interval (%.4g, %.4g), p %.4g", name, v, c.Lower, c.Upper, c.PValue)
		}
	case strings.HasPrefix(v, "too close to call"):
		if excludes0 == (c.PValue < alpha) {
			t.Errorf("%s: %q though test and interval agree: (%.4g, %.4g), p %.4g", name, v, c.Lower, c.Upper, c.PValue)
		}
	default:
		t.Errorf("%s: unknown verdict %q", name, v)
	}
	if !strings.Contains(v, FormatP(c.PValue)) {
		t.Errorf("%s: verdict %q does not show its p-value %s", name, v, FormatP(c.PValue))
	}
}

// TestMultiplicity builds a review of many processes, one with a clear
// rise and the rest with equal weeks, and checks the count of verdicts,
// the number chance alone would give (Compared × 0.05) and the
// Benjamini–Hochberg adjusted p-values (spc.BenjaminiHochberg, checked
// against statsmodels in spc). With FDR set, the verdicts use the
// adjusted values and still agree with their intervals.
func TestMultiplicity(t *testing.T) {
	for _, fdr := range []bool{false, true} {
		f := &fakeSource{}
		for i := 0; i < 20; i++ {
			d1, d2 := int64(20), int64(20)
			switch i {
			case 0:
				d1 = 60 // 60/1000 vs 20/1000: z test p < 0.001
			case 1:
				d1 = 36 // 36/1000 vs 20/1000: z test p ≈ 0.03 on its own
			case 2:
				d1 = 35 // p ≈ 0.04
			}
			f.add(store.Process{ID: int64(i + 1), Name: fmt.Sprintf("p%02d", i), Chart: spc.ChartP, K: 3, Rules: "we", TimeZone: "UTC", Active: true},
				lot("a", time.Date(2026, 11, 18, 10, 0, 0, 0, time.UTC), 1000, d2),
				lot("b", time.Date(2026, 11, 25, 10, 0, 0, 0, time.UTC), 1000, d1))
		}
		r, err := Build(ctx, f, Options{Week: "2026-W48", FDR: fdr})
		if err != nil {
			t.Fatal(err)
		}
		m := r.Chance
		if m.Compared != 20 || math.Abs(m.Expected-1) > 1e-12 {
			t.Errorf("fdr %v: compared %d expected %g, want 20 and 20×0.05 = 1", fdr, m.Compared, m.Expected)
		}
		var ps []float64
		for _, pr := range r.Processes {
			ps = append(ps, pr.Change.PValue)
		}
		adj := spc.BenjaminiHochberg(ps)
		stated, after := 0, 0
		for i, pr := range r.Processes {
			if pr.Change.AdjustedP != adj[i] {
				t.Errorf("%s: adjusted p %v, want %v", pr.Process.Name, pr.Change.AdjustedP, adj[i])
			}
			c := pr.Change
			excludes0 := c.Lower > 0 || c.Upper < 0
			if ps[i] < 0.05 && excludes0 {
				stated++
			}
			if adj[i] < 0.05 && excludes0 {
				after++
			}
			if fdr {
				c.PValue = c.AdjustedP
				if pr.Change.StatesChange() && !strings.Contains(pr.Change.Verdict, "adjusted") {
					t.Errorf("%s: %q does not say the p-value is adjusted", pr.Process.Name, pr.Change.Verdict)
				}
				c.Verdict = Verdict(c.Difference, c.Lower, c.Upper, c.AdjustedP, 0.05)
			}
			checkVerdict(t, pr.Process.Name, c, 0.05)
		}
		if m.Stated != stated || m.AfterFDR != after || after >= stated {
			t.Errorf("fdr %v: stated %d after FDR %d, want %d and %d (fewer after)", fdr, m.Stated, m.AfterFDR, stated, after)
		}
		if s := m.Sentence(fdr); !strings.Contains(s, "chance alone would give about 1.0") || !strings.Contains(s, "Benjamini–Hochberg") {
			t.Errorf("sentence %q", s)
		}
	}
}

package web

import (
	"bytes"
	"context"
	"fmt"
	"math/rand/v2"
	"net/url"
	"slices"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/review"
	"lotwatch/web/review/report"
)

// trickyRecord stores a process whose record tests the review's reuse of
// judged records: 16 weeks of three lots a day on Berlin clocks up to the
// reviewed week's last day, the first half judged by trial limits and the
// rest by a frozen limit set (centre 2%, a CUSUM for a rise to 5% with
// h = 4 frozen with it); lots beyond the limits in both; a run of lots at
// 4% from the last lots of the week before into the reviewed week, which
// run rules flag across the week's start and the CUSUM catches; causes
// recorded on two lots. The lots of the week's last day (one beyond the
// limits) are returned unstored, so that a test can add them after the
// judged record was kept.
func trickyRecord(t *testing.T, e *testEnv, year, week int) (store.Process, []store.LotInput) {
	t.Helper()
	ctx := context.Background()
	p, err := e.db.AddProcess(ctx, "setup", store.Process{Name: "Weld seam", Area: "Hall B", Chart: spc.ChartP, Method: spc.MethodSigma, K: 3,
		Rules: "we", TimeZone: "Europe/Berlin", Active: true, Monitors: spc.Monitors{CUSUMShift: 0.05}})
	if err != nil {
		t.Fatal(err)
	}
	loc := p.Location()
	weekStart, weekEnd := spc.ISOWeekRange(year, week, loc)
	first := weekStart.AddDate(0, 0, -7*15)
	rng := rand.New(rand.NewPCG(3, 4))
	var in []store.LotInput
	for day := first; day.Before(weekEnd); day = day.AddDate(0, 0, 1) {
		for _, h := range []int{6, 14, 22} {
			at := day.Add(time.Duration(h) * time.Hour)
			n := int64(200 + rng.IntN(60))
			d := int64(0)
			for range n {
				if rng.Float64() < 0.02 {
					d++
				}
			}
			switch k := at.Sub(weekStart).Hours(); {
			case k > -40 && k < 60: // the run: 4% from Saturday to Tuesday
				d = n / 25
			case k > 77 && k < 79, k > 157 && k < 159: // Thursday 06:00 and Sunday 14:00: beyond the limits
				d = n / 10
			case day.Equal(first.AddDate(0, 0, 10)) && h == 14: // in the trial period
				d = n / 8
			}
			in = append(in, store.LotInput{Lot: fmt.Sprintf("WS-%s-%02d", at.Format("060102"), h), Time: at, Shift: map[int]string{6: "early", 14: "late", 22: "night"}[h],
				Inspected: n, Count: d})
		}
	}
	last := len(in) - 3
	stored, err := e.db.AddLots(ctx, "setup", p.ID, in[:last])
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.db.FreezeLimitSet(ctx, "setup", store.LimitSet{ProcessID: p.ID, Method: spc.MethodSigma, K: 3, Center: 0.02, SigmaZ: 1,
		Monitors: spc.Monitors{CUSUMShift: 0.05, CUSUMARL0: 370, CUSUMH: 4}, EffectiveFrom: weekStart.AddDate(0, 0, -7*8), Reason: "baseline of eight weeks"}); err != nil {
		t.Fatal(err)
	}
	for _, a := range []store.Annotation{
		{ProcessID: p.ID, LotID: stored[len(stored)-10].ID, Cause: "wire feed slipping", Action: "feed rollers cleaned"},
		{ProcessID: p.ID, LotID: stored[30].ID, NoCauseFound: true, Reason: "checked the welder's log; nothing unusual"},
	} {
		if _, err := e.db.AddAnnotation(ctx, "setup", a); err != nil {
			t.Fatal(err)
		}
	}
	return p, in[last:]
}

// TestReviewFromKeptRecordsAsWhole: a review built from the judged
// records the status board keeps, reading only the trend's lots, gives
// every figure and verdict of a review that reads and judges each whole
// record — on a record with frozen limits, run-rule signals spanning the
// week's start and a CUSUM signal, after lots were added to a kept
// record, for the reviewed week and earlier ones, with and without the
// false-discovery-rate verdicts.
func TestReviewFromKeptRecordsAsWhole(t *testing.T) {
	e := newTestEnv(t)
	ctx := context.Background()
	loc, _ := time.LoadLocation("Europe/Berlin")
	year, week := spc.PreviousISOWeek(spc.ISOWeekOf(e.clock.Now(), loc))
	p, rest := trickyRecord(t, e, year, week)
	e.addLots(t, 40, func(i int) int64 { return int64(i % 5) })
	c := e.signIn(t, "viewer1", testPassword)
	if rec := e.do(req{method: "GET", path: "/", cookie: c}); rec.Code != 200 {
		t.Fatalf("board: %d", rec.Code)
	}
	if _, err := e.db.AddLots(ctx, "setup", p.ID, rest); err != nil {
		t.Fatal(err)
	}

	render := func(r *review.Review) string {
		var b bytes.Buffer
		if err := report.WriteJSON(&b, r); err != nil {
			t.Fatal(err)
		}
		if err := report.WriteText(&b, r); err != nil {
			t.Fatal(err)
		}
		if err := report.WriteCSV(&b, r); err != nil {
			t.Fatal(err)
		}
		h, err := report.HTMLFragment(r)
		if err != nil {
			t.Fatal(err)
		}
		return b.String() + string(h)
	}
	y, w := year, week
	for range 3 {
		for _, fdr := range []bool{false, true} {
			opt := review.Options{Week: spc.FormatISOWeek(y, w), Now: e.clock.Now(), FDR: fdr}
			whole, err := review.Build(ctx, e.db, opt)
			if err != nil {
				t.Fatal(err)
			}
			opt.Judged = e.srv.judgedRecord
			kept, err := review.Build(ctx, e.db, opt)
			if err != nil {
				t.Fatal(err)
			}
			if a, b := render(whole), render(kept); a != b {
				t.Errorf("%s (fdr %v): the review from kept records differs from the whole record's:\n%s", opt.Week, fdr, firstDiff(a, b))
			}
			if y == year && w == week && !fdr {
				checkTricky(t, e, p, whole)
				rec := e.do(req{method: "GET", path: "/review/download?" + url.Values{"format": {"json"}, "week": {opt.Week}}.Encode(), cookie: c})
				var b bytes.Buffer
				report.WriteJSON(&b, whole)
				if rec.Code != 200 || rec.Body.String() != b.String() {
					t.Errorf("the served review's JSON (status %d) differs from the whole record's:\n%s", rec.Code, firstDiff(b.String(), rec.Body.String()))
				}
			}
		}
		y, w = spc.PreviousISOWeek(y, w)
	}
}

// checkTricky checks that the record holds what the comparison needs,
// and that the week's signals are those of the chart page's judged
// chart that have a lot in the week, read from its points.
func checkTricky(t *testing.T, e *testEnv, p store.Process, r *review.Review) {
	t.Helper()
	var pr *review.ProcessReview
	for _, x := range r.Processes {
		if x.Process.ID == p.ID {
			pr = x
		}
	}
	start := pr.Current.Start
	spans, cusum, set := false, false, false
	var got []string
	for _, s := range pr.Signals {
		spans = spans || s.First.Before(start)
		cusum = cusum || s.Rule == "cusum"
		got = append(got, s.Rule+fmt.Sprint(s.Lots))
	}
	for _, o := range pr.OutOfLimits {
		set = set || o.Limits == "limit set 1"
	}
	if !spans || !cusum || !set || pr.NeedAttention == 0 {
		t.Fatalf("the record lacks a case: signal across the week's start %v, CUSUM signal %v, lot beyond frozen limits %v, lots needing attention %d",
			spans, cusum, set, pr.NeedAttention)
	}
	pc, err := e.srv.freshChart(context.Background(), p)
	if err != nil {
		t.Fatal(err)
	}
	lo := slices.IndexFunc(pc.lots, func(l store.Lot) bool { return !l.Time.Before(start) })
	hi := slices.IndexFunc(pc.lots, func(l store.Lot) bool { return !l.Time.Before(pr.Current.End) })
	if hi < 0 {
		hi = len(pc.lots)
	}
	var want []string
	for _, sg := range pc.a.Signals {
		if sg.Last < lo || sg.First >= hi {
			continue
		}
		var codes []string
		for i := sg.First; i <= sg.Last; i++ {
			codes = append(codes, pc.lots[i].Lot)
		}
		want = append(want, sg.Rule.String()+fmt.Sprint(codes))
	}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("signals of the week\n got %v\nwant %v", got, want)
	}
}

// firstDiff shows where two renderings part.
func firstDiff(a, b string) string {
	i := 0
	for i < len(a) && i < len(b) && a[i] == b[i] {
		i++
	}
	from := max(0, i-200)
	return fmt.Sprintf("…%s\n--- against ---\n…%s", a[from:min(len(a), i+200)], b[from:min(len(b), i+200)])
}

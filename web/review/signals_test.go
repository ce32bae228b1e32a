package review

import (
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// signalSource is the reference data with a frozen limit set and a
// recorded cause on the reviewed week's worst lot.
func signalSource(t *testing.T) (*fakeSource, *Review) {
	t.Helper()
	ref := loadReference(t)
	f := ref.fake()
	// Freeze the first process's limits at its usual 3% (the rate the
	// reference data was drawn at), in force from 2026-W40.
	berlin, _ := time.LoadLocation("Europe/Berlin")
	f.sets = map[int64][]store.LimitSet{1: {{ID: 1, ProcessID: 1, Number: 1, Method: spc.MethodSigma, K: 3, Center: 0.03, SigmaZ: 1,
		EffectiveFrom: time.Date(2026, 9, 28, 0, 0, 0, 0, berlin)}}}
	r, err := Build(ctx, f, Options{Week: ref.Week})
	if err != nil {
		t.Fatal(err)
	}
	pr := r.Processes[0]
	if len(pr.OutOfLimits) == 0 {
		t.Fatalf("no lot of %s beyond limits at a centre of 0.03; lots %v", pr.Current.Week, f.lots[1][len(f.lots[1])-4:])
	}
	worst := pr.OutOfLimits[0].Lot
	f.notes = map[int64][]store.Annotation{1: {{ID: 7, ProcessID: 1, LotID: worst.ID, Cause: "worn deburring tool",
		Action: "tool replaced", Closed: true, By: "ana", At: worst.Time.Add(time.Hour), ClosedBy: "ana", ClosedAt: worst.Time.Add(2 * time.Hour)}}}
	if r, err = Build(ctx, f, Options{Week: ref.Week}); err != nil {
		t.Fatal(err)
	}
	return f, r
}

func TestSignalsAndCauses(t *testing.T) {
	_, r := signalSource(t)
	pr := r.Processes[0]
	o := pr.OutOfLimits[0]
	if o.Limits != "limit set 1" || !o.Above || CauseStatus(o.Annotations) != "cause closed" {
		t.Errorf("out-of-limit lot %+v", o)
	}
	// p̄ = 0.03, UCL = 0.03 + 3·√(0.03·0.97/n) (Montgomery, ch. 7).
	near(t, "UCL", o.UCL, 0.03+3*sqrt(0.03*0.97/float64(o.Lot.Inspected)), 1e-12)
	found := false
	for _, s := range pr.Signals {
		if s.Rule == "we1" {
			for _, l := range s.Lots {
				found = found || l == o.Lot.Lot
			}
		}
		if s.Last.Before(pr.Current.Start) {
			t.Errorf("signal %+v ends before the week", s)
		}
	}
	if !found {
		t.Errorf("no we1 signal on %s among %+v", o.Lot.Lot, pr.Signals)
	}
}

func sqrt(x float64) float64 { return math.Sqrt(x) }

// TestCauseStatusNoCauseFound: a finding of no assignable cause is named
// as such, not as a closed cause.
func TestCauseStatusNoCauseFound(t *testing.T) {
	none := store.Annotation{NoCauseFound: true, Reason: "gauge and film batch checked", Closed: true, By: "ana"}
	cause := store.Annotation{Cause: "torn film", Closed: true, By: "bo"}
	open := store.Annotation{Cause: "torn film", By: "bo"}
	cases := []struct {
		as   []store.Annotation
		want string
	}{
		{nil, "no cause recorded"},
		{[]store.Annotation{none}, "no assignable cause found"},
		{[]store.Annotation{none, cause}, "cause closed"},
		{[]store.Annotation{none, open}, "cause open"},
	}
	for _, c := range cases {
		if got := CauseStatus(c.as); got != c.want {
			t.Errorf("%+v: %q, want %q", c.as, got, c.want)
		}
	}
}

// TestShiftSignals: a CUSUM signal in the reviewed week is a signal of
// kind "shift", counted by Shifts and explained by ShiftMeaning. The
// record is 30 lots at 2% and then lots at 6% (200 units each); the CUSUM
// for a rise to 5% from the trial centre catches the rise (Page 1954; its
// decision interval by spc.DesignCUSUM).
func TestShiftSignals(t *testing.T) {
	f := &fakeSource{}
	start, _ := spc.ISOWeekRange(2026, 48, time.UTC)
	var lots []store.Lot
	for i := range 44 {
		d := int64(4)
		if i >= 30 {
			d = 12
		}
		lots = append(lots, lot(fmt.Sprintf("S%02d", i), start.Add(time.Duration(i-30)*8*time.Hour), 200, d))
	}
	f.add(store.Process{Name: "seal", Chart: spc.ChartP, K: 3, Rules: "none", TimeZone: "UTC", Monitors: spc.Monitors{CUSUMShift: 0.05}}, lots...)
	r, err := Build(ctx, f, Options{Week: "2026-W48"})
	if err != nil {
		t.Fatal(err)
	}
	pr := r.Processes[0]
	shifts := 0
	for _, s := range pr.Signals {
		if s.Rule == "cusum" {
			shifts++
			if s.Kind != "shift" || s.Meaning() != ShiftMeaning {
				t.Errorf("CUSUM signal %+v: kind %q, meaning %q", s, s.Kind, s.Meaning())
			}
		}
	}
	if shifts == 0 || pr.Shifts() != shifts {
		t.Errorf("%d CUSUM signals, Shifts() = %d: %+v", shifts, pr.Shifts(), pr.Signals)
	}
}

// TestGlance: the lines at the head of a plant-wide review count the
// processes by what they ask for, each process's own figures summed.
func TestGlance(t *testing.T) {
	rise := Change{Compared: true, Difference: 0.02, Verdict: "a rise unlikely from sampling alone (p = 0.001)"}
	fall := Change{Compared: true, Difference: -0.02, Verdict: "a fall unlikely from sampling alone (p = 0.002)"}
	quiet := Change{Compared: true, Difference: 0.001, Verdict: "within what sampling alone produces (p = 0.6)"}
	r := &Review{Processes: []*ProcessReview{
		{Change: rise, NeedAttention: 3, Signals: []Signal{{Rule: "cusum", Kind: "shift"}}},
		{Change: fall, OutOfLimits: []OutOfLimit{{}}},
		{Change: quiet, NeedAttention: 1, OutOfLimits: []OutOfLimit{{Annotations: []store.Annotation{{Cause: "jam"}}}}},
		{Change: Change{Verdict: VerdictNoLots}},
	}}
	want := Glance{Processes: 4, Rises: 1, Falls: 1, NotCompared: 1, Unexplained: 2, Shifts: 1, NeedProcesses: 2, NeedLots: 4}
	if g := r.Glance(); g != want {
		t.Errorf("glance %+v, want %+v", g, want)
	}
	s := want.Sentence()
	for _, w := range []string{"of 4 processes: 1 with a rise", "2 with lots beyond their limits or signals this week and no cause recorded",
		"2 with lots of the record needing attention (4 lots)", "1 could not be compared"} {
		if !strings.Contains(s, w) {
			t.Errorf("%q lacks %q", s, w)
		}
	}
}

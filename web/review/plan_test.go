package review

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

func TestCurrentCentre(t *testing.T) {
	f := &fakeSource{}
	f.add(store.Process{Name: "line", Chart: spc.ChartP, K: 3, TimeZone: "UTC"},
		lot("a", time.Date(2026, 11, 2, 8, 0, 0, 0, time.UTC), 300, 5),
		lot("b", time.Date(2026, 11, 3, 8, 0, 0, 0, time.UTC), 200, 5))
	p := f.procs[0]
	// No limit set: p̄ = Σd/Σn = 10/500 (Montgomery, ch. 7), not the mean of
	// the lots' fractions (0.0208…).
	c, err := CurrentCentre(ctx, f, p)
	if err != nil || c.P0 != 0.02 || c.LimitSet != 0 || c.Lots != 2 {
		t.Errorf("trial centre %+v, %v; want 0.02 from 2 lots", c, err)
	}
	f.sets = map[int64][]store.LimitSet{p.ID: {
		{Number: 2, Center: 0.015, EffectiveFrom: time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC)},
		{Number: 1, Center: 0.03, EffectiveFrom: time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)},
	}}
	if c, err = CurrentCentre(ctx, f, p); err != nil || c.P0 != 0.015 || c.LimitSet != 2 {
		t.Errorf("frozen centre %+v, %v; want limit set 2's 0.015", c, err)
	}
	f.add(store.Process{Name: "u", Chart: spc.ChartU, TimeZone: "UTC"})
	if _, err := CurrentCentre(ctx, f, f.procs[1]); err == nil {
		t.Error("a u chart was planned as binomial")
	}
	f.add(store.Process{Name: "new", Chart: spc.ChartNP, TimeZone: "UTC"})
	if _, err := CurrentCentre(ctx, f, f.procs[2]); !errors.Is(err, ErrNoCentre) {
		t.Errorf("no lots: %v, want ErrNoCentre", err)
	}
}

func TestPlanFor(t *testing.T) {
	c := Centre{Process: store.Process{Name: "line", Chart: spc.ChartP, K: 3}, P0: 0.02, Source: "test"}
	res, err := PlanFor(c, PlanRequest{N: 200, P1: 0.06, TargetARL1: 2})
	if err != nil {
		t.Fatal(err)
	}
	// scipy.stats.binom: at n = 200, p0 = 0.02, 3σ the upper count is 9
	// (0.02 + 3·√(0.02·0.98/200) = 0.0497); ARL1 = 1/binom.sf(9, 200, 0.06)
	// = 1.30596879582, ARL0 = 1/binom.sf(9, 200, 0.02) = 133.702568747.
	if res.Plan.UCLCount != 9 || res.Plan.LCLCount != -1 {
		t.Errorf("counts %d %d, want 9 and none", res.Plan.UCLCount, res.Plan.LCLCount)
	}
	near(t, "ARL1", res.Plan.ARL1, 1.3059687958173842, 1e-9)
	near(t, "ARL0", res.Plan.ARL0, 133.70256874738797, 1e-9)
	// Smallest n with ARL1 ≤ 2 and ARL0 ≥ the default floor of 100, found
	// by trying every n with scipy (spc/testdata/intervals_reference.py,
	// smallest_n_floor): 111 (ARL1 1.99332236245, ARL0 140.011732656).
	if res.Smallest != 111 || res.MinARL0 != spc.DefaultMinARL0 || len(res.Warnings) != 0 {
		t.Errorf("smallest n %d floor %g warnings %q, want 111, 100 and none", res.Smallest, res.MinARL0, res.Warnings)
	}
	near(t, "ARL1 at 111", res.SmallestPlan.ARL1, 1.9933223624532665, 1e-9)
	near(t, "ARL0 at 111", res.SmallestPlan.ARL0, 140.01173265637598, 1e-9)
	// With the floor lowered explicitly: n = 95 (ARL1 1.96598412597 by the
	// same scan without a floor, block smallest_n of an earlier run; ARL0
	// below 100), and warnings for the lowered floor and for n = 3, where any
	// nonconforming unit signals: ARL0 = 1/(1 − 0.98³) = 17.0 (hand arithmetic).
	low, err := PlanFor(c, PlanRequest{N: 3, P1: 0.06, TargetARL1: 2, MinARL0: 1})
	if err != nil {
		t.Fatal(err)
	}
	if low.Smallest != 95 || len(low.Warnings) != 2 || !strings.Contains(low.Warnings[0], "below the default of 100") ||
		!strings.Contains(low.Warnings[1], "At 3 units per lot") {
		t.Errorf("lowered floor: n %d, warnings %q", low.Smallest, low.Warnings)
	}
	near(t, "ARL1 at 95", low.SmallestPlan.ARL1, 1.9659841259749071, 1e-9)
	if len(res.Curve) < 10 || res.Curve[0].N != 1 {
		t.Errorf("curve of %d points from n = %d", len(res.Curve), res.Curve[0].N)
	}
	for i := 1; i < len(res.Curve); i++ {
		if res.Curve[i].N <= res.Curve[i-1].N {
			t.Fatalf("curve sizes not increasing at %d", i)
		}
	}
	if _, err := PlanFor(c, PlanRequest{P1: 0.02}); err == nil {
		t.Error("p1 = p0 accepted")
	}
	res, err = PlanFor(c, PlanRequest{P1: 0.021, TargetARL1: 1, MaxN: 50})
	if err != nil || res.Smallest != 0 || res.SmallestNote == "" {
		t.Errorf("unreachable target: %+v, %v", res, err)
	}
	if math.IsNaN(res.Curve[len(res.Curve)-1].ARL1) {
		t.Error("curve ARL1 NaN")
	}
}

func TestCurveSizes(t *testing.T) {
	ns := CurveSizes(1000, 4)
	// 1000^(0/3), 1000^(1/3), … = 1, 10, 100, 1000 (hand arithmetic).
	want := []int64{1, 10, 100, 1000}
	if len(ns) != len(want) {
		t.Fatalf("%v, want %v", ns, want)
	}
	for i := range want {
		if ns[i] != want[i] {
			t.Errorf("%v, want %v", ns, want)
		}
	}
}

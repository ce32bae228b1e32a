package spc

import (
	"errors"
	"math"
	"testing"
)

func TestPlanLimitsReference(t *testing.T) {
	ref := loadIntervalsRef(t)
	for _, r := range ref.Plan {
		pl := PlanLimits(r.P0, r.N, r.K).WithShift(r.P1)
		// Source: exact rational arithmetic in intervals_reference.py.
		if pl.UCLCount != r.UCLCount || pl.LCLCount != r.LCLCount {
			t.Errorf("p0=%g n=%d k=%g: counts (%d, %d), reference (%d, %d)",
				r.P0, r.N, r.K, pl.UCLCount, pl.LCLCount, r.UCLCount, r.LCLCount)
		}
		// Source: scipy.stats.binom.sf / cdf.
		if math.Abs(pl.SignalProb(r.P0)-r.SignalP0) > 1e-9*math.Max(r.SignalP0, 1e-6) ||
			math.Abs(pl.SignalProb(r.P1)-r.SignalP1) > 1e-9*math.Max(r.SignalP1, 1e-6) {
			t.Errorf("p0=%g n=%d: signal probabilities %.12g %.12g, scipy %.12g %.12g",
				r.P0, r.N, pl.SignalProb(r.P0), pl.SignalProb(r.P1), r.SignalP0, r.SignalP1)
		}
		if r.SignalP0 > 0 && !intervalClose(pl.ARL0, 1/r.SignalP0, 1e-9) {
			t.Errorf("p0=%g n=%d: ARL0 %v, want %v", r.P0, r.N, pl.ARL0, 1/r.SignalP0)
		}
		if r.SignalP0 == 0 && !math.IsInf(pl.ARL0, 1) {
			t.Errorf("p0=%g n=%d: no signal possible, ARL0 %v", r.P0, r.N, pl.ARL0)
		}
		if want := 1 / r.SignalP1; pl.ARL1 != want && !intervalClose(pl.ARL1, want, 1e-9) {
			t.Errorf("p0=%g n=%d: ARL1 %v, want %v", r.P0, r.N, pl.ARL1, 1/r.SignalP1)
		}
	}
}

func TestPlanLimitsExactEquality(t *testing.T) {
	// 0.1 ± 3·√(0.1·0.9/100) = 0.19 and 0.01 exactly, so n·UCL = 19 and
	// n·LCL = 1: 19 does not signal (not above the limit) and 1 does not
	// signal (not below it). Hand arithmetic from the definition.
	pl := PlanLimits(0.1, 100, 3)
	if pl.UCLCount != 19 || pl.LCLCount != 1 {
		t.Errorf("counts %d %d, want 19 1", pl.UCLCount, pl.LCLCount)
	}
	// n = 400: 40 ± 18 → 58 and 22.
	pl = PlanLimits(0.1, 400, 3)
	if pl.UCLCount != 58 || pl.LCLCount != 22 {
		t.Errorf("counts %d %d, want 58 22", pl.UCLCount, pl.LCLCount)
	}
	if PlanLimits(0.5, 1, 3).ARL0 != math.Inf(1) {
		t.Error("a lot of one unit at p0 = 0.5 cannot signal at 3 sigma")
	}
	if !math.IsNaN(PlanLimits(0, 10, 3).ARL0) || CheckPlanInput(0, 10, 3) == nil {
		t.Error("p0 = 0 accepted")
	}
}

func TestMinNPositiveLCL(t *testing.T) {
	tests := []struct {
		p0, k float64
		want  int64
	}{
		// Montgomery, Introduction to Statistical Quality Control, §7.2:
		// p = 0.05, L = 3 needs n > 171 (from memory).
		{0.05, 3, 172},
		// n > 9·0.9/0.1 = 81 exactly, so 82 (hand arithmetic; equality does
		// not give a positive limit).
		{0.1, 3, 82},
		{0.2, 3, 37}, // 9·0.8/0.2 = 36 exactly
		{0.01, 3, 892},
		{0.5, 2, 5}, // 4·0.5/0.5 = 4
	}
	for _, tt := range tests {
		if got := MinNPositiveLCL(tt.p0, tt.k); got != tt.want {
			t.Errorf("MinNPositiveLCL(%g, %g) = %d, want %d", tt.p0, tt.k, got, tt.want)
		}
		// The definition itself: at the returned n a lower signal exists, one
		// less and it does not.
		if PlanLimits(tt.p0, tt.want, tt.k).LCLCount < 1 || PlanLimits(tt.p0, tt.want-1, tt.k).LCLCount != -1 {
			t.Errorf("p0=%g k=%g: LCL counts around n=%d disagree", tt.p0, tt.k, tt.want)
		}
	}
}

func TestSmallestNReference(t *testing.T) {
	ref := loadIntervalsRef(t)
	for _, r := range ref.SmallestN {
		got, err := SmallestN(r.P0, r.P1, r.K, r.Target, 100000)
		if err != nil {
			t.Fatal(err)
		}
		// Source: scan with exact limit counts and scipy.stats.binom tails.
		if got != r.N {
			t.Errorf("SmallestN(%g, %g, %g, %g) = %d, reference %d", r.P0, r.P1, r.K, r.Target, got, r.N)
		}
	}
	if _, err := SmallestN(0.1, 0.11, 3, 1.0001, 50); !errors.Is(err, ErrNoPlan) {
		t.Errorf("unreachable target: %v", err)
	}
	for _, bad := range [][4]float64{{0, 0.1, 3, 2}, {0.1, 0.1, 3, 2}, {0.1, 0.2, 3, 0.5}, {0.1, 1, 3, 2}} {
		if _, err := SmallestN(bad[0], bad[1], bad[2], bad[3], 100); err == nil {
			t.Errorf("SmallestN%v: no error", bad)
		}
	}
}

// TestSmallestNWithARL0Reference checks the search with a floor on false
// alarms against a plain scan with scipy.stats.binom tails
// (intervals_reference.py, block smallest_n_floor).
func TestSmallestNWithARL0Reference(t *testing.T) {
	ref := loadIntervalsRef(t)
	if len(ref.SmallestNFloor) == 0 {
		t.Fatal("no smallest_n_floor rows in the reference file")
	}
	for _, r := range ref.SmallestNFloor {
		got, err := SmallestNWithARL0(r.P0, r.P1, r.K, r.Target, r.MinARL0, 100000)
		if err != nil || got != r.N {
			t.Errorf("SmallestNWithARL0(%g, %g, %g, %g, %g) = %d, %v; scipy scan %d", r.P0, r.P1, r.K, r.Target, r.MinARL0, got, err, r.N)
			continue
		}
		pl := PlanLimits(r.P0, got, r.K).WithShift(r.P1)
		if math.Abs(pl.ARL0-r.ARL0) > 1e-9*r.ARL0 || math.Abs(pl.ARL1-r.ARL1) > 1e-9*r.ARL1 {
			t.Errorf("n = %d: ARL0 %.12g ARL1 %.12g, scipy %.12g %.12g", got, pl.ARL0, pl.ARL1, r.ARL0, r.ARL1)
		}
	}
}

// TestARLNotMonotone shows the reason SmallestN scans: with whole counts,
// ARL1 rises again at some larger n (shown directly from the binomial; the
// reference scan in intervals_reference.py relies on no monotonicity).
func TestARLNotMonotone(t *testing.T) {
	ns := make([]int64, 200)
	for i := range ns {
		ns[i] = int64(i + 1)
	}
	curve := ARLCurve(0.05, 0.1, 3, ns)
	rises := 0
	for i := 1; i < len(curve); i++ {
		if curve[i].N != ns[i] || curve[i].P1 != 0.1 {
			t.Fatalf("curve point %d: %+v", i, curve[i])
		}
		if curve[i].ARL1 > curve[i-1].ARL1 {
			rises++
		}
	}
	if rises == 0 {
		t.Error("ARL1 never rises with n; the scan in SmallestN would be unneeded")
	}
}

// TestSmallestNWithARL0 checks the false-alarm floor by exhaustion: the n
// returned meets both targets and no smaller n does (the ARL values
// themselves are checked against SciPy's binomial in the tests above).
func TestSmallestNWithARL0(t *testing.T) {
	tests := []struct{ p0, p1, k, arl1, minARL0 float64 }{
		{0.012, 0.03, 3, 5, 200},
		{0.05, 0.1, 3, 10, 100},
		{0.02, 0.05, 2.5, 3, 50},
	}
	for _, tt := range tests {
		n, err := SmallestNWithARL0(tt.p0, tt.p1, tt.k, tt.arl1, tt.minARL0, 100000)
		if err != nil {
			t.Fatalf("%+v: %v", tt, err)
		}
		ok := func(n int64) bool {
			pl := PlanLimits(tt.p0, n, tt.k).WithShift(tt.p1)
			return pl.ARL1 <= tt.arl1 && pl.ARL0 >= tt.minARL0
		}
		if !ok(n) {
			t.Errorf("%+v: n = %d misses a target", tt, n)
		}
		for m := int64(1); m < n; m++ {
			if ok(m) {
				t.Errorf("%+v: n = %d returned but %d already meets both targets", tt, n, m)
				break
			}
		}
		plain, _ := SmallestN(tt.p0, tt.p1, tt.k, tt.arl1, 100000)
		if plain > n {
			t.Errorf("%+v: the floor made the lot smaller (%d < %d)", tt, n, plain)
		}
	}
	if _, err := SmallestNWithARL0(0.01, 0.02, 3, 2, 1e12, 500); !errors.Is(err, ErrNoPlan) {
		t.Errorf("an unreachable floor should give ErrNoPlan, got %v", err)
	}
}

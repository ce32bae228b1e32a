package spc

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// simulateRunLength returns the mean and standard error of the run
// length (lots from a zero start to the first signal) of c over runs
// simulated with a fixed seed, each lot's size drawn from c.Sizes and its
// count at rate p.
func simulateRunLength(c *CUSUM, p float64, runs int, seed uint64) (mean, se float64) {
	rng := rand.New(rand.NewPCG(seed, 1))
	var sum, sum2 float64
	for r := 0; r < runs; r++ {
		s, length := 0.0, 0
		for {
			length++
			n := c.Sizes[rng.IntN(len(c.Sizes))]
			var count float64
			switch c.Chart {
			case ChartP, ChartNP:
				count = distuv.Binomial{N: float64(n), P: p, Src: rng}.Rand()
			case ChartU:
				count = distuv.Poisson{Lambda: float64(n) * p, Src: rng}.Rand()
			default:
				count = distuv.Poisson{Lambda: p, Src: rng}.Rand()
			}
			s = math.Max(0, s+c.score(float64(n), count))
			if s >= c.H {
				break
			}
		}
		sum += float64(length)
		sum2 += float64(length) * float64(length)
	}
	mean = sum / float64(runs)
	return mean, math.Sqrt((sum2/float64(runs) - mean*mean) / float64(runs))
}

// TestCUSUMARLAgainstSimulation checks the Markov-chain ARLs (Brook &
// Evans 1972) of designed CUSUMs against a seeded simulation of the
// same CUSUM written out here: within four standard errors of the
// simulated mean plus 3 % for the rounding of the scores to cells.
func TestCUSUMARLAgainstSimulation(t *testing.T) {
	for _, tc := range []struct {
		chart  Chart
		p0, p1 float64
		sizes  []int64
		arl0   float64
	}{
		{ChartP, 0.01, 0.02, []int64{100, 150, 200, 300}, 200},
		{ChartNP, 0.05, 0.025, []int64{80, 120}, 150},
		{ChartU, 0.5, 0.8, []int64{5, 8, 10}, 200},
		{ChartC, 4, 6, []int64{1}, 200},
	} {
		t.Run(fmt.Sprintf("%s %v→%v", tc.chart, tc.p0, tc.p1), func(t *testing.T) {
			c, err := DesignCUSUM(tc.chart, tc.p0, tc.p1, tc.sizes, tc.arl0, 0)
			if err != nil {
				t.Fatal(err)
			}
			if c.ARL0 < tc.arl0 {
				t.Errorf("h %v: ARL0 %v below the target %v", c.H, c.ARL0, tc.arl0)
			}
			// The grid's next lower h falls short of the target.
			lower := &CUSUM{Chart: c.Chart, P0: c.P0, P1: c.P1, H: c.H - cusumGridStep, Sizes: c.Sizes}
			if got := lower.ARL(c.P0); got >= tc.arl0 {
				t.Errorf("h %v is not the smallest: %v gives ARL0 %v", c.H, lower.H, got)
			}
			if !(c.ARL1 < c.ARL0/3) {
				t.Errorf("ARL1 %v not well below ARL0 %v", c.ARL1, c.ARL0)
			}
			for _, p := range []struct {
				rate, arl float64
				runs      int
			}{{c.P0, c.ARL0, 1500}, {c.P1, c.ARL1, 3000}} {
				mean, se := simulateRunLength(c, p.rate, p.runs, 11)
				if math.Abs(mean-p.arl) > 4*se+0.03*mean {
					t.Errorf("rate %v: Markov-chain ARL %.2f, simulated %.2f ± %.2f", p.rate, p.arl, mean, se)
				}
			}
		})
	}
}

// TestCUSUMDesignedARL0BetweenCells holds a designed in-control ARL to a
// long seeded simulation where the scores fall at a fixed fraction of a
// cell: a c chart from c0 = 4 to c1 = 6 scores c·ln 1.5 − 2, and rounding
// each score to the nearest of the chain's cells moved S by the same
// amount at every lot, so the chain said 389 lots (h = 3.86) where the
// CUSUM runs 356 on average: more false alarms than the design promised. The check
// is the Markov-chain approximation against Monte Carlo, within 4
// standard errors of the simulated mean (common practice, no source).
func TestCUSUMDesignedARL0BetweenCells(t *testing.T) {
	c, err := DesignCUSUM(ChartC, 4, 6, []int64{1}, 370, 0)
	if err != nil {
		t.Fatal(err)
	}
	mean, se := simulateRunLength(c, c.P0, 20000, 5)
	if math.Abs(c.ARL0-mean) > 4*se {
		t.Errorf("h %v: Markov-chain ARL0 %.1f, simulated %.1f ± %.1f", c.H, c.ARL0, mean, se)
	}
}

func TestCUSUMRunSignalsAndStart(t *testing.T) {
	// c chart, c0 = 2, c1 = 4: W = c·ln 2 − 2, so a count of 2 scores
	// −0.61, 3 scores 0.08, 6 scores 2.16 (arithmetic).
	c := &CUSUM{Chart: ChartC, P0: 2, P1: 4, H: 3}
	counts := []int64{0, 3, 6, 6, 1, 3, 6, 2, 6, 6}
	lots := make([]Lot, len(counts))
	for i, k := range counts {
		lots[i] = Lot{Code: fmt.Sprintf("L%d", i+1), Inspected: 1, Count: k}
	}
	pts, sigs := c.Run(lots)
	w := func(k float64) float64 { return k*math.Log(2) - 2 }
	// S: 0, 0.08, 2.24, 4.40 ≥ 3 (signal, start L2: S was last 0 after L1),
	// then from 0: L5 → 0, L6 0.08, L7 2.24, L8 1.63, L9 3.79 ≥ 3 (signal,
	// start L6), L10 from 0: 2.16.
	want := []float64{0, w(3), w(3) + w(6), w(3) + 2*w(6), 0, w(3), w(3) + w(6), w(3) + w(6) + w(2), w(3) + w(6) + w(2) + w(6), w(6)}
	for i, p := range pts {
		if math.Abs(p.S-want[i]) > 1e-12 || p.Lot != lots[i].Code {
			t.Errorf("lot %d: S %v, want %v", i+1, p.S, want[i])
		}
	}
	if fmt.Sprint(sigs) != "[{3 1 L4 L2} {8 5 L9 L6}]" || !pts[3].Signal || !pts[8].Signal || pts[9].Signal {
		t.Errorf("signals %v", sigs)
	}
}

func TestCUSUMDesignErrors(t *testing.T) {
	for _, tc := range []struct {
		chart  Chart
		p0, p1 float64
	}{
		{ChartP, 0.01, 0.01}, {ChartP, 0.01, 1}, {ChartP, 0.01, 0}, {ChartP, 0, 0.02}, {ChartU, 1, -1}, {ChartC, 2, math.NaN()},
	} {
		if _, err := DesignCUSUM(tc.chart, tc.p0, tc.p1, []int64{100}, 370, 0); err == nil {
			t.Errorf("%s %v→%v accepted", tc.chart, tc.p0, tc.p1)
		}
	}
	c, err := DesignCUSUM(ChartP, 0.01, 0.02, []int64{200}, 370, 4.5)
	if err != nil || c.H != 4.5 || !(c.ARL0 > c.ARL1) {
		t.Errorf("given h: %+v %v", c, err)
	}
}

// TestEWMA checks the statistic and limits against the recursion written
// out for three lots (Montgomery §9.2 formulas), and that a sustained
// rise signals.
func TestEWMA(t *testing.T) {
	e := EWMA{Chart: ChartP, P0: 0.1, Lambda: 0.2, L: 3}
	lots := []Lot{{"a", 100, 10}, {"b", 50, 10}, {"c", 200, 40}}
	pts := e.Run(lots)
	z1 := 0.2*0.1 + 0.8*0.1
	z2 := 0.2*0.2 + 0.8*z1
	z3 := 0.2*0.2 + 0.8*z2
	v1 := 0.04 * 0.09 / 100
	v2 := 0.64*v1 + 0.04*0.09/50
	v3 := 0.64*v2 + 0.04*0.09/200
	for i, w := range [][2]float64{{z1, v1}, {z2, v2}, {z3, v3}} {
		p := pts[i]
		if math.Abs(p.Z-w[0]) > 1e-15 || math.Abs(p.UCL-(0.1+3*math.Sqrt(w[1]))) > 1e-15 || math.Abs(p.LCL-math.Max(0, 0.1-3*math.Sqrt(w[1]))) > 1e-15 {
			t.Errorf("lot %d: %+v, want z %v var %v", i, p, w[0], w[1])
		}
	}
	if pts[0].Signal || !pts[2].Signal {
		t.Errorf("signals %+v", pts)
	}
	if err := CheckEWMA(ChartP, 0.1, 0, 3); err == nil {
		t.Error("λ = 0 accepted")
	}
	if err := CheckEWMA(ChartP, 0.1, 0.2, 0); err == nil {
		t.Error("L = 0 accepted")
	}
}

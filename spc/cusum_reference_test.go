package spc

import (
	"fmt"
	"math"
	"testing"
)

// cusumReference is testdata/cusum_arl_reference.json, written by
// cusum_arl_reference.py beside it (SciPy, not the Markov chain of
// cusum.go).
type cusumReference struct {
	Normal []struct {
		K, H, Shift, ARL float64
	} `json:"normal"`
	PoissonLattice    []poissonLatticeRow `json:"poisson_lattice"`
	PoissonOffLattice []poissonLatticeRow `json:"poisson_off_lattice"`
	Bernoulli         []struct {
		P0, P1, H, P, ARL float64
		HScore            float64 `json:"h_score"`
	} `json:"bernoulli"`
}

// poissonLatticeRow is the exact ARL of a Poisson CUSUM in whole counts.
type poissonLatticeRow struct {
	C0, C1 float64
	K      int
	H      float64
	HScore float64 `json:"h_score"`
	Mean   float64
	ARL    float64
}

func readCUSUMReference(t *testing.T) cusumReference {
	t.Helper()
	var ref cusumReference
	readTestdata(t, "cusum_arl_reference.json", &ref)
	if len(ref.Normal) == 0 || len(ref.PoissonLattice) == 0 {
		t.Fatal("the reference file has no rows")
	}
	return ref
}

// TestCUSUMARLNormalLimit checks the Markov-chain ARLs of cusum.go on
// the CUSUM of a c chart whose counts are so large (c0 = 10⁶, skewness
// 1/√c0 = 0.001) that they are normal for the purpose, set for a shift of
// one standard deviation σ = √c0: its likelihood-ratio score is then
// x − 1/2 with x the count in σ from c0, the tabulated one-sided CUSUM
// with k = 1/2, in σ units, h as given.
//
// Sources: the ARLs from the integral equation (SciPy, Nyström on 400
// Gauss–Legendre nodes: testdata/cusum_arl_reference.py), and Lucas &
// Crosier (1982), Technometrics 24, 199–205, Table 1, one-sided CUSUM,
// k = 0.5, zero start (from memory; 3 significant figures, so within
// 0.5 % of the reference).
//
// Tolerance, from the method: the chain rounds each score to a cell of
// w = h/200, which moves the decision boundary by up to about one cell.
// In control, a likelihood-ratio CUSUM's ARL grows as e^h (Wald's
// identity, E₀[e^W] = 1), so a boundary off by w changes it by a factor
// up to e^w: relative tolerance e^w − 1 (2 % at h = 4). Under a shift the
// ARL grows about linearly with the boundary (Siegmund's approximation,
// quadratically where the drift is 0), so the tolerance is 2w/h.
func TestCUSUMARLNormalLimit(t *testing.T) {
	ref := readCUSUMReference(t)
	// Lucas & Crosier (1982) Table 1 (from memory), by h and shift.
	table := map[[2]float64]float64{
		{4, 0}: 336, {4, 0.5}: 26.6, {4, 1}: 8.38, {4, 2}: 3.34,
		{5, 0}: 930, {5, 0.5}: 38.0, {5, 1}: 10.4, {5, 2}: 4.01,
	}
	const c0 = 1e6
	sigma := math.Sqrt(c0)
	for _, r := range ref.Normal {
		t.Run(fmt.Sprintf("h=%g shift=%g", r.H, r.Shift), func(t *testing.T) {
			if r.K != 0.5 {
				t.Fatalf("reference row for k = %g; the CUSUM here has k = 1/2", r.K)
			}
			c := &CUSUM{Chart: ChartC, P0: c0, P1: c0 + sigma, H: r.H, Sizes: []int64{1}}
			got := c.ARL(c0 + r.Shift*sigma)
			w := r.H / cusumCells
			tol := 2 * w / r.H
			if r.Shift == 0 {
				tol = math.Expm1(w)
			}
			if rel := got/r.ARL - 1; math.Abs(rel) > tol {
				t.Errorf("ARL %.4g, integral equation %.4g: off by %.2f %%, more than %.2f %%", got, r.ARL, 100*rel, 100*tol)
			}
			pub, ok := table[[2]float64{r.H, r.Shift}]
			if !ok {
				t.Fatal("no table value for this row")
			}
			if rel := pub/r.ARL - 1; math.Abs(rel) > 0.005 {
				t.Errorf("the table value %.4g is %.2f %% from the integral equation's %.4g", pub, 100*rel, r.ARL)
			}
			if rel := got/pub - 1; math.Abs(rel) > tol+0.005 {
				t.Errorf("ARL %.4g, Lucas & Crosier %.4g: off by %.2f %%", got, pub, 100*rel)
			}
		})
	}
}

// TestCUSUMARLPoissonLattice checks the Markov chain of cusum.go against
// the exact ARLs of Poisson CUSUMs whose scores fall on a lattice that its
// cells represent without rounding: S = max(0, S + c − k) in counts with
// whole k and h, a count being 200/h cells (h = 8, 10). The exact ARLs
// solve the chain on the whole numbers 0 … h−1 (Brook & Evans 1972, the
// discrete case; the Poisson CUSUM of Lucas 1985), computed with SciPy in
// testdata/cusum_arl_reference.py. With nothing rounded the two chains
// are the same, so they must agree to the precision of the linear solve
// and of the Poisson probabilities (relative 1e-9).
func TestCUSUMARLPoissonLattice(t *testing.T) {
	ref := readCUSUMReference(t)
	for _, r := range ref.PoissonLattice {
		if h := int(r.H); float64(h) != r.H || cusumCells%h != 0 {
			t.Fatalf("h = %g does not divide the %d cells; the comparison would not be exact", r.H, cusumCells)
		}
		c := &CUSUM{Chart: ChartC, P0: r.C0, P1: r.C1, H: r.HScore, Sizes: []int64{1}}
		got := c.ARL(r.Mean)
		if rel := got/r.ARL - 1; math.Abs(rel) > 1e-9 {
			t.Errorf("c0 %g, c1 %.6g, k %d, h %g counts, mean %.6g: ARL %.10g, exact %.10g", r.C0, r.C1, r.K, r.H, r.Mean, got, r.ARL)
		}
	}
}

// TestCUSUMARLOffLattice checks the chain where a count is not a whole
// number of its cells: the Poisson CUSUMs of TestCUSUMARLPoissonLattice
// with h = 6.5, 8.5 and 11.5 counts (a count is 30.8, 23.5 or 17.4
// cells). S stays a whole number of counts, so the exact ARL is that of
// the lattice with h rounded up (SciPy, testdata/cusum_arl_reference.py).
// The tolerance, 0.5 %, is the discretisation error of a chain of 200
// cells, common practice, no source.
func TestCUSUMARLOffLattice(t *testing.T) {
	ref := readCUSUMReference(t)
	if len(ref.PoissonOffLattice) == 0 {
		t.Fatal("no off-lattice rows in the reference")
	}
	for _, r := range ref.PoissonOffLattice {
		c := &CUSUM{Chart: ChartC, P0: r.C0, P1: r.C1, H: r.HScore, Sizes: []int64{1}}
		got := c.ARL(r.Mean)
		if rel := got/r.ARL - 1; math.Abs(rel) > 0.005 {
			t.Errorf("c0 %g, k %d, h %g counts, mean %.4g: ARL %.5g, exact %.5g (off by %.2f %%)", r.C0, r.K, r.H, r.Mean, got, r.ARL, 100*rel)
		}
	}
}

// TestCUSUMARLBernoulli checks the chain on the CUSUM of lots of one
// unit, where a conforming unit moves S by about 1/200 of h: a fraction
// of one of the chain's cells. Rounding that to a whole cell overstated
// the in-control ARL more than fivefold (35,596 lots for 6,613 at p0 =
// 1 %, p1 = 2 %, h = 3), so a design for small lots chose an h that false-
// alarms far more often than promised. The exact ARLs are SciPy's
// (testdata/cusum_arl_reference.py: p1 solved for so that the scores are
// whole multiples of a conforming unit's, as Reynolds & Stoumbos 1999
// do, from memory). A step under a cell still costs the chain some
// accuracy: it understates the ARL by up to 2.2 % here, the safe side for
// a design (fewer false alarms than promised, a shift found a little
// later than said). The tolerance allows 3 % below and 1 % above the
// exact value, from that discretisation error, common practice, no source.
func TestCUSUMARLBernoulli(t *testing.T) {
	ref := readCUSUMReference(t)
	if len(ref.Bernoulli) == 0 {
		t.Fatal("no Bernoulli rows in the reference")
	}
	for _, r := range ref.Bernoulli {
		c := &CUSUM{Chart: ChartP, P0: r.P0, P1: r.P1, H: r.HScore, Sizes: []int64{1}}
		got := c.ARL(r.P)
		if rel := got/r.ARL - 1; rel > 0.01 || rel < -0.03 {
			t.Errorf("p0 %g, p1 %.5g, h %g units, p %.5g: ARL %.5g, exact %.5g (off by %.2f %%)", r.P0, r.P1, r.H, r.P, got, r.ARL, 100*rel)
		}
	}
}

package spc

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// reference holds the values written by testdata/engine_reference.py
// (SciPy; the version is recorded in the file).
type reference struct {
	SciPy       string `json:"scipy"`
	ExactLimits []struct {
		Dist     string  `json:"dist"`
		K        float64 `json:"k"`
		N        int64   `json:"n"`
		P        float64 `json:"p"`
		Lambda   float64 `json:"lambda"`
		UCL, LCL int64
	} `json:"exact_limits"`
	Tails []struct {
		Dist   string  `json:"dist"`
		N      int64   `json:"n"`
		P      float64 `json:"p"`
		Lambda float64 `json:"lambda"`
		Count  int64   `json:"count"`
		Tail   float64 `json:"tail"`
	} `json:"tails"`
	Chi2SF []struct {
		X, DF, SF float64
	} `json:"chi2_sf"`
	PHomogeneity homogeneity `json:"p_homogeneity"`
	UHomogeneity homogeneity `json:"u_homogeneity"`
	LaneyP       struct {
		Lots   [][2]int64 `json:"lots"`
		PBar   float64    `json:"pbar"`
		SigmaZ float64    `json:"sigma_z"`
		UCL    []float64  `json:"ucl"`
		LCL    []float64  `json:"lcl"`
		Z      []float64  `json:"z"`
	} `json:"laney_p"`
}

type homogeneity struct {
	Lots [][2]int64 `json:"lots"`
	Chi2 float64    `json:"chi2"`
	DF   int        `json:"df"`
	P    float64    `json:"p"`
}

func loadReference(t *testing.T) *reference {
	t.Helper()
	var r reference
	readTestdata(t, "engine_reference.json", &r)
	if r.SciPy == "" || len(r.ExactLimits) == 0 {
		t.Fatal("reference file incomplete")
	}
	return &r
}

func pairLots(pairs [][2]int64) []Lot {
	lots := make([]Lot, len(pairs))
	for i, p := range pairs {
		lots[i] = Lot{Code: string(rune('A' + i)), Inspected: p[0], Count: p[1]}
	}
	return lots
}

func relNear(got, want, rel float64) bool {
	return math.Abs(got-want) <= rel*math.Abs(want) || math.Abs(got-want) < 1e-300
}

func TestExactLimitsReference(t *testing.T) {
	ref := loadReference(t)
	for _, c := range ref.ExactLimits {
		// SciPy binom/poisson sf and cdf searched directly (engine_reference.py)
		d := poissonDist(c.Lambda)
		if c.Dist == "binomial" {
			d = binomialDist(c.N, c.P)
		}
		lcl, ucl := exactLimits(d, AlphaForK(c.K)/2)
		if ucl != c.UCL || lcl != c.LCL {
			t.Errorf("%s n=%d p=%v λ=%v k=%v: limits [%d, %d], want [%d, %d] (SciPy %s)", c.Dist, c.N, c.P, c.Lambda, c.K, lcl, ucl, c.LCL, c.UCL, ref.SciPy)
		}
	}
	// Through Analyze: the orange-juice data with exact limits; SciPy gives
	// binomial(50, 347/1500) counts [4, 21], i.e. 0.08 and 0.42.
	a, err := Analyze(constLots(50, orangeJuice), Config{Chart: ChartP, Method: MethodExact})
	if err != nil {
		t.Fatal(err)
	}
	if p := a.Points[0]; p.UCL != 21.0/50 || p.LCL != 4.0/50 {
		t.Errorf("exact p limits %v %v, want 0.42 0.08 (SciPy)", p.LCL, p.UCL)
	}
	if !a.Points[14].Above || a.Points[20].Above || !a.Points[22].Above { // 22 > 21 signals, 20 does not
		t.Error("exact judgement wrong for lots 15, 21, 23")
	}
}

func TestTailReference(t *testing.T) {
	ref := loadReference(t)
	for _, c := range ref.Tails {
		var a *Analysis
		var err error
		if c.Dist == "binomial" {
			a, err = Analyze([]Lot{{"x", c.N, c.Count}}, Config{Chart: ChartP, Standard: &Standard{Center: c.P}})
		} else {
			a, err = Analyze([]Lot{{"x", 1, c.Count}}, Config{Chart: ChartC, Standard: &Standard{Center: c.Lambda}})
		}
		if err != nil {
			t.Fatal(err)
		}
		if got := a.Points[0].TailP; !relNear(got, c.Tail, 1e-9) {
			t.Errorf("%s n=%d p=%v λ=%v count %d: tail %v, want %v (SciPy %s)", c.Dist, c.N, c.P, c.Lambda, c.Count, got, c.Tail, ref.SciPy)
		}
	}
}

func TestDispersionReference(t *testing.T) {
	ref := loadReference(t)
	for _, tc := range []struct {
		name  string
		chart Chart
		data  *homogeneity
	}{
		{"p chart, SciPy chi2_contingency without correction", ChartP, &ref.PHomogeneity},
		{"u chart, SciPy chisquare against nᵢū", ChartU, &ref.UHomogeneity},
	} {
		a, err := Analyze(pairLots(tc.data.Lots), Config{Chart: tc.chart})
		if err != nil {
			t.Fatal(err)
		}
		d := a.Dispersion
		if !relNear(d.ChiSquare, tc.data.Chi2, 1e-10) || d.DF != tc.data.DF || !relNear(d.PValue, tc.data.P, 1e-8) {
			t.Errorf("%s: χ² %v df %d p %v, want %v %d %v", tc.name, d.ChiSquare, d.DF, d.PValue, tc.data.Chi2, tc.data.DF, tc.data.P)
		}
		if !relNear(d.Ratio, tc.data.Chi2/float64(tc.data.DF), 1e-10) {
			t.Errorf("%s: ratio %v", tc.name, d.Ratio)
		}
	}
	// The orange-juice lots are overdispersed by the common-practice rule
	// (p < 0.01, ratio > 1.5); SciPy p = 1.8e-7, ratio 2.9.
	a, _ := Analyze(pairLots(ref.PHomogeneity.Lots), Config{Chart: ChartP})
	if !a.Dispersion.Overdispersed || !hasWarning(a, "overdispersion") {
		t.Errorf("not flagged overdispersed: %+v", a.Dispersion)
	}
	for _, c := range ref.Chi2SF {
		// SciPy chi2.sf
		if got := (distuv.ChiSquared{K: c.DF}).Survival(c.X); !relNear(got, c.SF, 1e-9) {
			t.Errorf("chi-square sf(%v, %v) = %v, want %v", c.X, c.DF, got, c.SF)
		}
	}
}

func TestLaneyReference(t *testing.T) {
	ref := loadReference(t)
	l := ref.LaneyP
	// engine_reference.py applies Laney's (2002) definitions directly with NumPy.
	a, err := Analyze(pairLots(l.Lots), Config{Chart: ChartP, Method: MethodLaney})
	if err != nil {
		t.Fatal(err)
	}
	if !relNear(a.Rate, l.PBar, 1e-13) || !relNear(a.SigmaZ, l.SigmaZ, 1e-12) {
		t.Errorf("p̄ %v σ_z %v, want %v %v", a.Rate, a.SigmaZ, l.PBar, l.SigmaZ)
	}
	for i, p := range a.Points {
		if !relNear(p.UCL, l.UCL[i], 1e-12) || !near(p.LCL, l.LCL[i], 1e-14) || !relNear(p.Z, l.Z[i], 1e-11) {
			t.Errorf("lot %d: UCL %v LCL %v z %v, want %v %v %v", i, p.UCL, p.LCL, p.Z, l.UCL[i], l.LCL[i], l.Z[i])
		}
	}
	// Exclusion skips the lot in the moving ranges: σ_z over lots 1, 3, 4, …
	ex, _ := Analyze(pairLots(l.Lots), Config{Chart: ChartP, Method: MethodLaney, Exclude: map[string]bool{"B": true}})
	z := make([]float64, 0, len(l.Lots))
	for i, p := range ex.Points {
		if i != 1 {
			z = append(z, (p.Value-ex.Rate)/math.Sqrt(ex.Rate*(1-ex.Rate)/float64(p.Lot.Inspected)))
		}
	}
	var mr float64
	for i := 1; i < len(z); i++ {
		mr += math.Abs(z[i] - z[i-1])
	}
	if want := mr / float64(len(z)-1) / 1.128; !relNear(ex.SigmaZ, want, 1e-12) {
		t.Errorf("σ_z with an excluded lot %v, want %v (Laney's definition)", ex.SigmaZ, want)
	}
	// A standard σ_z is used as given.
	st, _ := Analyze(pairLots(l.Lots), Config{Chart: ChartP, Method: MethodLaney, Standard: &Standard{Center: 0.03, SigmaZ: 2}})
	p := st.Points[0]
	if want := 0.03 + 3*2*math.Sqrt(0.03*0.97/1200); !relNear(p.UCL, want, 1e-14) {
		t.Errorf("UCL with standard σ_z %v, want %v", p.UCL, want)
	}
}

// simLots draws m lots of sizes from sizes with rate p; with spread > 0
// each lot's rate is drawn from a beta distribution of mean p (extra
// variation between lots).
func simLots(seed uint64, m int, sizes []int64, p, spread float64) []Lot {
	rng := rand.New(rand.NewPCG(seed, 1))
	lots := make([]Lot, m)
	for i := range lots {
		n := sizes[rng.IntN(len(sizes))]
		pi := p
		if spread > 0 {
			a := p * (1/spread - 1)
			b := (1 - p) * (1/spread - 1)
			pi = distuv.Beta{Alpha: a, Beta: b, Src: rng}.Rand()
		}
		d := distuv.Binomial{N: float64(n), P: pi, Src: rng}.Rand()
		lots[i] = Lot{Code: "s", Inspected: n, Count: int64(d)}
	}
	return lots
}

func TestLaneySigmaZSimulated(t *testing.T) {
	sizes := []int64{800, 1000, 1500, 2000}
	// Binomial lots: σ_z near 1 (Laney 2002: σ_z = 1 when the binomial
	// model holds).
	a, _ := Analyze(simLots(7, 400, sizes, 0.04, 0), Config{Chart: ChartP, Method: MethodLaney})
	if a.SigmaZ < 0.85 || a.SigmaZ > 1.15 {
		t.Errorf("binomial lots: σ_z = %v, want ≈ 1", a.SigmaZ)
	}
	if a.Dispersion.Overdispersed {
		t.Errorf("binomial lots flagged overdispersed: %+v", a.Dispersion)
	}
	// Beta-binomial lots (intra-class correlation 0.005 with n ≈ 1300):
	// variance ratio ≈ 1 + (n−1)·0.005 ≈ 7.5, so σ_z ≈ 2.7.
	b, _ := Analyze(simLots(7, 400, sizes, 0.04, 0.005), Config{Chart: ChartP, Method: MethodLaney})
	t.Logf("σ_z binomial %.3f, overdispersed %.3f", a.SigmaZ, b.SigmaZ)
	if b.SigmaZ < 2 {
		t.Errorf("overdispersed lots: σ_z = %v, want clearly above 1", b.SigmaZ)
	}
	if !b.Dispersion.Overdispersed {
		t.Errorf("overdispersed lots not flagged: %+v", b.Dispersion)
	}
}

func TestLimitsWidenAsLotsShrink(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	lots := make([]Lot, 200)
	for i := range lots {
		n := int64(20 + rng.IntN(2000))
		lots[i] = Lot{Code: "x", Inspected: n, Count: int64(rng.IntN(int(n / 10)))}
	}
	for _, ch := range []Chart{ChartP, ChartU} {
		for _, m := range []Method{MethodSigma, MethodLaney, MethodExact} {
			a, err := Analyze(lots, Config{Chart: ch, Method: m})
			if err != nil {
				t.Fatal(err)
			}
			pts := append([]Point(nil), a.Points...)
			sort.Slice(pts, func(i, j int) bool { return pts[i].Lot.Inspected < pts[j].Lot.Inspected })
			for i := 1; i < len(pts); i++ {
				// σᵢ ∝ 1/√nᵢ: the upper limit distance never grows with n
				// (exact limits are steps of 1/n and may stay level).
				if pts[i].UCL-pts[i].Center > pts[i-1].UCL-pts[i-1].Center+1e-12 && pts[i].Lot.Inspected > pts[i-1].Lot.Inspected {
					if m != MethodExact || pts[i].UCL-pts[i].Center > pts[i-1].UCL-pts[i-1].Center+1.0/float64(pts[i-1].Lot.Inspected) {
						t.Fatalf("%s %s: n %d has UCL distance %v, larger than %v at n %d", ch, m, pts[i].Lot.Inspected, pts[i].UCL-pts[i].Center, pts[i-1].UCL-pts[i-1].Center, pts[i-1].Lot.Inspected)
					}
				}
			}
		}
	}
}

func TestFalseAlarmRate(t *testing.T) {
	// In-control binomial lots judged against 3σ limits with the true p
	// given: the share of lots beyond the limits should match the exact
	// per-lot probability P(X > n·UCL) + P(X < n·LCL) from the binomial.
	const p = 0.05
	sizes := []int64{60, 150, 400}
	m := 60000
	if testing.Short() {
		m = 15000
	}
	lots := simLots(11, m, sizes, p, 0)
	for _, method := range []Method{MethodSigma, MethodExact} {
		a, err := Analyze(lots, Config{Chart: ChartP, Method: method, Standard: &Standard{Center: p}})
		if err != nil {
			t.Fatal(err)
		}
		var alarms int
		var want float64
		for _, pt := range a.Points {
			if pt.OutOfLimits() {
				alarms++
			}
			b := distuv.Binomial{N: float64(pt.Lot.Inspected), P: p}
			up := pt.UCL * float64(pt.Lot.Inspected)
			lo := pt.LCL * float64(pt.Lot.Inspected)
			// P(X > up) and P(X < lo), gonum binomial CDF
			want += 1 - b.CDF(math.Floor(up+1e-9))
			if lo > 0 {
				want += b.CDF(math.Ceil(lo-1e-9) - 1)
			}
		}
		want /= float64(m)
		got := float64(alarms) / float64(m)
		se := math.Sqrt(want * (1 - want) / float64(m))
		t.Logf("%s: false-alarm rate %.5f, exact %.5f (±%.5f)", method, got, want, se)
		if math.Abs(got-want) > 4*se {
			t.Errorf("%s: false-alarm rate %.5f, exact %.5f (±%.5f)", method, got, want, se)
		}
		if method == MethodExact && want > AlphaForK(3) {
			t.Errorf("exact limits: false-alarm probability %v above α = %v", want, AlphaForK(3))
		}
	}
}

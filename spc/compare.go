package spc

import (
	"fmt"
	"math"
	"strconv"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"
)

// Difference compares two rates, first minus second: the observed
// difference, its confidence interval at Level, and the two-sided p-value
// of the test of equal rates named by Test, with the standard normal
// statistic Z of the difference.
type Difference struct {
	Difference, Lower, Upper, PValue, Z float64
	Level                               float64
	// Test names the test behind PValue: TestPooledZ or TestFisherExact
	// for proportions, TestConditionalPoisson for defect rates.
	Test string
}

// Names of the tests of equal rates, as Difference.Test reports them.
const (
	TestPooledZ            = "two-proportion z test"
	TestFisherExact        = "Fisher's exact test"
	TestConditionalPoisson = "exact conditional test"
)

// minExpectedCount is the smallest expected count, in each of the four
// cells of the two-by-two table, at which the pooled z test is used;
// below it the normal approximation is poor and Fisher's exact test is
// used instead (Cochran 1954, "Some methods for strengthening the common
// χ² tests", Biometrics 10:417–451: every expected count at least 5).
const minExpectedCount = 5

// CompareProportions compares the proportions p1 = d1/n1 and p2 = d2/n2.
//
// The interval for p1 − p2 is Newcombe's hybrid score interval (Newcombe
// 1998, "Interval estimation for the difference between independent
// proportions: comparison of eleven methods", Statistics in Medicine
// 17:873–890, method 10). With Wilson limits (l1, u1) for p1 and (l2, u2)
// for p2,
//
//	lower = p1 − p2 − √((p1−l1)² + (u2−p2)²)
//	upper = p1 − p2 + √((u1−p1)² + (p2−l2)²).
//
// The p-value is that of the two-sided pooled two-proportion z test
// (PooledZTest) when every expected count of the two-by-two table,
// n1·p̄, n1·(1−p̄), n2·p̄ and n2·(1−p̄), is at least 5; otherwise, where few
// nonconforming units are expected, that of Fisher's exact test
// (FisherExact), since the z test then finds changes that sampling alone
// produces often: 1 of 5 against 0 of 25 gives z-test p = 0.023 but
// Fisher p = 0.17. Z is the z statistic whichever test gives the p-value.
func CompareProportions(d1, n1, d2, n2 int64, level float64) (Difference, error) {
	if err := checkProportionPair(d1, n1, "1"); err != nil {
		return Difference{}, err
	}
	if err := checkProportionPair(d2, n2, "2"); err != nil {
		return Difference{}, err
	}
	if err := checkLevel(level); err != nil {
		return Difference{}, err
	}
	p1, p2 := float64(d1)/float64(n1), float64(d2)/float64(n2)
	l1, u1 := wilson(d1, n1, level)
	l2, u2 := wilson(d2, n2, level)
	diff := Difference{Difference: p1 - p2, Level: level}
	diff.Lower = math.Max(-1, diff.Difference-math.Hypot(p1-l1, u2-p2))
	diff.Upper = math.Min(1, diff.Difference+math.Hypot(u1-p1, p2-l2))

	diff.Z, diff.PValue = PooledZTest(d1, n1, d2, n2)
	diff.Test = TestPooledZ
	pbar := float64(d1+d2) / float64(n1+n2)
	smallest := float64(min(n1, n2)) * math.Min(pbar, 1-pbar)
	if smallest < minExpectedCount {
		diff.PValue, diff.Test = FisherExact(d1, n1, d2, n2), TestFisherExact
	}
	return diff, nil
}

// PooledZTest returns the statistic and two-sided p-value of the pooled
// two-proportion z test of d1 of n1 against d2 of n2: z = (p1 − p2)/
// √(p̄(1−p̄)(1/n1 + 1/n2)) with p̄ = (d1+d2)/(n1+n2) (e.g. Fleiss, Levin &
// Paik 2003, Statistical Methods for Rates and Proportions, §2.4; without
// continuity correction). When p̄ is 0 or 1 the two samples agree
// completely and z = 0, p = 1. The counts must be valid (0 ≤ d ≤ n, n > 0).
func PooledZTest(d1, n1, d2, n2 int64) (z, p float64) {
	p1, p2 := float64(d1)/float64(n1), float64(d2)/float64(n2)
	pbar := float64(d1+d2) / float64(n1+n2)
	se := math.Sqrt(pbar * (1 - pbar) * (1/float64(n1) + 1/float64(n2)))
	if se == 0 {
		return 0, 1
	}
	z = (p1 - p2) / se
	return z, math.Min(1, 2*distuv.UnitNormal.Survival(math.Abs(z)))
}

// FisherExact returns the two-sided p-value of Fisher's exact test that d1
// of n1 and d2 of n2 come from the same proportion (Fisher 1935, The
// Design of Experiments, §2; Agresti 2002, Categorical Data Analysis,
// §3.5.1). Given the margins, d1 is hypergeometric: d1+d2 nonconforming
// units among n1+n2, n1 of them in the first group. The p-value sums the
// probabilities of every table no more likely than the one observed, with
// the relative tolerance 1e-7 for ties that scipy.stats.fisher_exact uses.
// The counts must be valid (0 ≤ d ≤ n, n > 0).
func FisherExact(d1, n1, d2, n2 int64) float64 {
	total, bad := n1+n2, d1+d2
	lo, hi := max(0, bad-n2), min(bad, n1)
	logPMF := func(x int64) float64 {
		return logChoose(bad, x) + logChoose(total-bad, n1-x) - logChoose(total, n1)
	}
	obs := logPMF(d1) + math.Log1p(1e-7)
	var p float64
	for x := lo; x <= hi; x++ {
		if l := logPMF(x); l <= obs {
			p += math.Exp(l)
		}
	}
	return math.Min(1, p)
}

// logChoose returns ln C(n, k).
func logChoose(n, k int64) float64 {
	a, _ := math.Lgamma(float64(n + 1))
	b, _ := math.Lgamma(float64(k + 1))
	c, _ := math.Lgamma(float64(n - k + 1))
	return a - b - c
}

func checkProportionPair(d, n int64, which string) error {
	switch {
	case n <= 0:
		return &FieldError{Field: "inspected" + which, Value: strconv.FormatInt(n, 10), Reason: "must be a whole number greater than 0"}
	case d < 0:
		return &FieldError{Field: "defective" + which, Value: strconv.FormatInt(d, 10), Reason: "must not be negative"}
	case d > n:
		return &FieldError{Field: "defective" + which, Value: strconv.FormatInt(d, 10), Reason: fmt.Sprintf("is more than the %d units inspected", n)}
	}
	return nil
}

// ComparePoissonRates compares the defect rates r1 = c1/e1 and r2 = c2/e2
// (defects per unit inspected).
//
// The interval for r1 − r2 is the MOVER interval of Zou & Donner (2008,
// "Construction of confidence limits about effect measures: a general
// approach", Statistics in Medicine 27:1693–1702) built, as Newcombe's
// method 10 is for proportions, from the score limits of each rate: the
// roots in λ of (c − λe)² = z²·λe,
//
//	λ = (c + z²/2 ± z·√(c + z²/4)) / e,
//
// combined as
//
//	lower = r1 − r2 − √((r1−l1)² + (u2−r2)²)
//	upper = r1 − r2 + √((u1−r1)² + (r2−l2)²).
//
// The p-value is that of the exact conditional test (Przyborowski &
// Wilenski 1940, Biometrika 31:313–323): given C = c1 + c2, c1 is binomial
// (C, π) with π = e1/(e1+e2) when the rates are equal. The two-sided
// p-value sums the probabilities of all outcomes no more likely than the one
// observed (the rule of scipy.stats.binomtest, with its relative tolerance
// 1e-7 for ties). Z is the score statistic (c1 − Cπ)/√(Cπ(1−π)), which is
// also (r1 − r2)/√(r̄(1/e1 + 1/e2)) with r̄ = C/(e1+e2); with C = 0, Z = 0 and
// PValue = 1.
func ComparePoissonRates(c1 int64, e1 float64, c2 int64, e2 float64, level float64) (Difference, error) {
	for _, s := range []struct {
		c     int64
		e     float64
		which string
	}{{c1, e1, "1"}, {c2, e2, "2"}} {
		if s.c < 0 {
			return Difference{}, &FieldError{Field: "defects" + s.which, Value: strconv.FormatInt(s.c, 10), Reason: "must not be negative"}
		}
		if !(s.e > 0) || math.IsInf(s.e, 1) {
			return Difference{}, &FieldError{Field: "inspected" + s.which, Value: strconv.FormatFloat(s.e, 'g', -1, 64), Reason: "must be a number greater than 0"}
		}
	}
	if err := checkLevel(level); err != nil {
		return Difference{}, err
	}
	z := normalQuantile(level)
	r1, r2 := float64(c1)/e1, float64(c2)/e2
	l1, u1 := poissonScore(c1, e1, z)
	l2, u2 := poissonScore(c2, e2, z)
	diff := Difference{Difference: r1 - r2, Level: level}
	diff.Lower = diff.Difference - math.Hypot(r1-l1, u2-r2)
	diff.Upper = diff.Difference + math.Hypot(u1-r1, r2-l2)

	diff.Test = TestConditionalPoisson
	total := c1 + c2
	if total == 0 {
		diff.Z, diff.PValue = 0, 1
		return diff, nil
	}
	pi := e1 / (e1 + e2)
	ct := float64(total)
	diff.Z = (float64(c1) - ct*pi) / math.Sqrt(ct*pi*(1-pi))
	diff.PValue = binomialTwoSided(c1, total, pi)
	return diff, nil
}

// poissonScore returns the score limits for a Poisson rate (see
// ComparePoissonRates), with lower = 0 at c = 0.
func poissonScore(c int64, e, z float64) (lo, hi float64) {
	cf := float64(c)
	mid := cf + z*z/2
	half := z * math.Sqrt(cf+z*z/4)
	lo, hi = (mid-half)/e, (mid+half)/e
	if c == 0 {
		lo = 0
	}
	return math.Max(0, lo), hi
}

// binomialTwoSided returns the two-sided exact p-value for k successes of n
// at success probability p: the total probability of outcomes whose
// probability is at most that of k (times 1+1e-7, the tie tolerance of
// scipy.stats.binomtest). The binomial is unimodal, so the outcomes on the
// far side of the mode form one tail, found by bisection.
func binomialTwoSided(k, n int64, p float64) float64 {
	b := distuv.Binomial{N: float64(n), P: p}
	dk := b.Prob(float64(k)) * (1 + 1e-7)
	mean := float64(n) * p
	var pv float64
	switch {
	case float64(k) < mean:
		// Smallest j > mean with pmf(j) ≤ dk; add P(X ≥ j).
		lo, hi := int64(math.Ceil(mean)), n+1
		for lo < hi {
			mid := lo + (hi-lo)/2
			if b.Prob(float64(mid)) <= dk {
				hi = mid
			} else {
				lo = mid + 1
			}
		}
		pv = binomCDF(k, n, p) + binomSF(lo-1, n, p)
	case float64(k) > mean:
		// Largest j < mean with pmf(j) ≤ dk; add P(X ≤ j).
		lo, hi := int64(-1), int64(math.Floor(mean))
		for lo < hi {
			mid := hi - (hi-lo)/2
			if b.Prob(float64(mid)) <= dk {
				lo = mid
			} else {
				hi = mid - 1
			}
		}
		pv = binomSF(k-1, n, p) + binomCDF(lo, n, p)
	default:
		return 1
	}
	return math.Min(1, pv)
}

// binomCDF returns P(X ≤ k) for X binomial(n, p), via the regularized
// incomplete beta function: P(X ≤ k) = I_{1−p}(n−k, k+1).
func binomCDF(k, n int64, p float64) float64 {
	switch {
	case k < 0:
		return 0
	case k >= n:
		return 1
	}
	return mathext.RegIncBeta(float64(n-k), float64(k+1), 1-p)
}

// binomSF returns P(X > k) for X binomial(n, p): P(X > k) = I_p(k+1, n−k).
func binomSF(k, n int64, p float64) float64 {
	switch {
	case k < 0:
		return 1
	case k >= n:
		return 0
	}
	return mathext.RegIncBeta(float64(k+1), float64(n-k), p)
}

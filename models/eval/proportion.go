package eval

import (
	"math"
)

// z975 is the standard normal's 0.975 quantile, for two-sided 95 %
// intervals; z80 its 0.80 quantile, for 80 % power.
const (
	z975 = 1.959963984540054
	z80  = 0.8416212335729143
)

// ProportionTestName names the test of a difference of two proportions.
const ProportionTestName = "two-proportion z-test, pooled variance, two-sided, no continuity correction; intervals: Wilson score, 95 %"

// Proportion is a rate of successes over trials with its 95 % Wilson score
// interval. The Wilson interval stays inside [0, 1] and keeps its coverage
// at small counts and rates near 0, where the Wald interval does not
// (common practice for click-through rates).
type Proportion struct {
	Successes int64   `json:"successes"`
	Trials    int64   `json:"trials"`
	Rate      float64 `json:"rate"`
	Low       float64 `json:"low"`
	High      float64 `json:"high"`
}

// NewProportion returns x successes over n trials with its interval; with
// no trial the rate is 0 and the interval [0, 1].
func NewProportion(x, n int64) Proportion {
	p := Proportion{Successes: x, Trials: n, High: 1}
	if n <= 0 {
		return p
	}
	nf := float64(n)
	ph := float64(x) / nf
	p.Rate = ph
	z2 := z975 * z975
	den := 1 + z2/nf
	centre := (ph + z2/(2*nf)) / den
	half := z975 * math.Sqrt(ph*(1-ph)/nf+z2/(4*nf*nf)) / den
	p.Low, p.High = max(0, centre-half), min(1, centre+half)
	return p
}

// ProportionTest compares two proportions: A's rate minus B's with a 95 %
// (unpooled, Wald) interval of the difference, the pooled z statistic and
// its two-sided p-value, and the trials each side would need for the
// observed difference to be found at 5 % significance with 80 % power.
type ProportionTest struct {
	Diff     float64    `json:"diff"`
	DiffCI95 [2]float64 `json:"diff_ci95"`
	Z        float64    `json:"z"`
	P        float64    `json:"p"`
	// NeededPerArm is the trials per side for 80 % power at the observed
	// rates (0 when the rates are equal or a side has no trial): the usual
	// normal-approximation sample size of a two-sided test at 5 %.
	NeededPerArm int64 `json:"needed_per_arm"`
}

// CompareProportions tests a against b as ProportionTestName says. With a
// side that has no trial, or no variance at all, Z is 0 and P is 1.
func CompareProportions(a, b Proportion) ProportionTest {
	t := ProportionTest{P: 1}
	if a.Trials <= 0 || b.Trials <= 0 {
		return t
	}
	n1, n2 := float64(a.Trials), float64(b.Trials)
	p1, p2 := a.Rate, b.Rate
	t.Diff = p1 - p2
	se := math.Sqrt(p1*(1-p1)/n1 + p2*(1-p2)/n2)
	t.DiffCI95 = [2]float64{t.Diff - z975*se, t.Diff + z975*se}
	pool := float64(a.Successes+b.Successes) / (n1 + n2)
	sp := math.Sqrt(pool * (1 - pool) * (1/n1 + 1/n2))
	if sp > 0 {
		t.Z = t.Diff / sp
		t.P = math.Erfc(math.Abs(t.Z) / math.Sqrt2)
	}
	if d := math.Abs(t.Diff); d > 0 {
		pbar := (p1 + p2) / 2
		num := z975*math.Sqrt(2*pbar*(1-pbar)) + z80*math.Sqrt(p1*(1-p1)+p2*(1-p2))
		t.NeededPerArm = int64(math.Ceil(num * num / (d * d)))
	}
	return t
}

// BinomialSignTest is the two-sided exact binomial test of k successes in
// n trials against p = 1/2 (the sign test): the probability, under p = 1/2,
// of an outcome no more likely than k. With n = 0 it is 1.
func BinomialSignTest(k, n int64) float64 {
	if n <= 0 {
		return 1
	}
	logp := func(i int64) float64 {
		a, _ := math.Lgamma(float64(n + 1))
		b, _ := math.Lgamma(float64(i + 1))
		c, _ := math.Lgamma(float64(n - i + 1))
		return a - b - c - float64(n)*math.Ln2
	}
	obs := logp(k)
	// Under p = 1/2 the distribution is symmetric: sum the probabilities of
	// both tails at least as extreme as k (relative tolerance as in the
	// usual implementations, so ties of equal mass count).
	lo, hi := k, n-k
	if lo > hi {
		lo, hi = hi, lo
	}
	sum := 0.0
	for i := int64(0); i <= lo; i++ {
		sum += math.Exp(logp(i))
	}
	if lo == hi {
		return min(1, sum*2-math.Exp(obs))
	}
	return min(1, 2*sum)
}

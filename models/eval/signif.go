package eval

import (
	"math"
	"slices"
)

// TestName names the significance test reported.
const TestName = "Wilcoxon signed-rank, paired by query, two-sided; normal approximation with tie correction, zero differences dropped, no continuity correction"

// PairedTest is the comparison of one model with the best one on one
// per-query measure.
type PairedTest struct {
	// MeanDiff is the mean over queries of (this model − the best), with
	// a 95 % normal-approximation confidence interval of the paired mean.
	MeanDiff float64    `json:"mean_diff"`
	CI95     [2]float64 `json:"ci95"`
	// NonZero is the number of queries where the two differ; W is the sum
	// of the ranks of positive differences; Z its standard score.
	NonZero int64   `json:"nonzero"`
	W       float64 `json:"w_plus"`
	Z       float64 `json:"z"`
	P       float64 `json:"p"`
}

// Wilcoxon runs the paired test of x against y (x − y), as TestName says.
// With no nonzero difference, Z is 0 and P is 1.
func Wilcoxon(x, y []float64) PairedTest {
	n := min(len(x), len(y))
	var t PairedTest
	if n == 0 {
		t.P = 1
		return t
	}
	d := make([]float64, 0, n)
	sum, sum2 := 0.0, 0.0
	for i := range n {
		v := x[i] - y[i]
		sum += v
		sum2 += v * v
		if v != 0 {
			d = append(d, v)
		}
	}
	mean := sum / float64(n)
	t.MeanDiff = mean
	if n > 1 {
		sd := math.Sqrt(max(0, (sum2-float64(n)*mean*mean)/float64(n-1)))
		half := 1.959963984540054 * sd / math.Sqrt(float64(n))
		t.CI95 = [2]float64{mean - half, mean + half}
	} else {
		t.CI95 = [2]float64{mean, mean}
	}
	m := len(d)
	t.NonZero = int64(m)
	if m == 0 {
		t.P = 1
		return t
	}
	slices.SortFunc(d, func(a, b float64) int {
		aa, bb := math.Abs(a), math.Abs(b)
		switch {
		case aa < bb:
			return -1
		case aa > bb:
			return 1
		}
		return 0
	})
	// Average ranks over ties of |d|; the tie term corrects the variance.
	wPlus, ties := 0.0, 0.0
	for i := 0; i < m; {
		j := i
		for j < m && math.Abs(d[j]) == math.Abs(d[i]) {
			j++
		}
		rank := float64(i+1+j) / 2 // mean of ranks i+1..j
		for k := i; k < j; k++ {
			if d[k] > 0 {
				wPlus += rank
			}
		}
		c := float64(j - i)
		ties += c*c*c - c
		i = j
	}
	mf := float64(m)
	mu := mf * (mf + 1) / 4
	v := mf*(mf+1)*(2*mf+1)/24 - ties/48
	t.W = wPlus
	if v <= 0 {
		t.P = 1
		return t
	}
	t.Z = (wPlus - mu) / math.Sqrt(v)
	t.P = math.Erfc(math.Abs(t.Z) / math.Sqrt2)
	return t
}

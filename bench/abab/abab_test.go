package abab

import (
	"testing"
	"time"
)

func TestMedian(t *testing.T) {
	for _, c := range []struct {
		name string
		in   []float64
		want float64
	}{
		{"empty", nil, 0},
		{"odd", []float64{3, 1, 2}, 2},
		{"even", []float64{4, 1, 3, 2}, 2.5},
	} {
		t.Run(c.name, func(t *testing.T) {
			if got := Median(c.in); got != c.want {
				t.Errorf("Median(%v) = %g, want %g", c.in, got, c.want)
			}
		})
	}
}

func TestRunAlternatesAndRatios(t *testing.T) {
	var order []string
	p, err := Run("x", "ops/s", 3,
		func(r int) (float64, error) { order = append(order, "A"); return float64(2 * (r + 1)), nil },
		func(r int) (float64, error) { order = append(order, "B"); return float64(r + 1), nil })
	if err != nil {
		t.Fatal(err)
	}
	if got := len(order); got != 6 || order[0] != "A" || order[1] != "B" || order[4] != "A" {
		t.Errorf("order %v, want A B A B A B", order)
	}
	if p.Ratio() != 2 || p.MedianA() != 4 || p.MedianB() != 2 {
		t.Errorf("ratio %g medians %g %g, want 2, 4, 2", p.Ratio(), p.MedianA(), p.MedianB())
	}
	p.Target = 2.5
	if p.Met() {
		t.Error("ratio 2 meets target 2.5")
	}
}

func TestSummarize(t *testing.T) {
	ds := make([]time.Duration, 1000)
	for i := range ds {
		ds[i] = time.Duration(1000-i) * time.Microsecond // 1000..1 µs, reversed
	}
	l := Summarize(ds)
	if l.N != 1000 || l.P50 != 500 || l.P99 != 990 || l.Max != 1000 {
		t.Errorf("got %+v, want p50 500 p99 990 max 1000", l)
	}
}

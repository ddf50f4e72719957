// Package abab measures a hot path against its bare baseline side by side:
// the two alternate (A B A B ...) in one process or one script run, so that
// the noise of a shared machine hits both alike, and the figure reported is
// the median of each and the median of the per-pair ratios A/B.
//
// It also holds the small statistics the benchmark programs share:
// medians, percentiles of latency samples, and a JSON-lines record of every
// figure so bench/RESULTS.md can cite what a run printed.
package abab

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"slices"
	"strings"
	"time"
)

// Pair is the outcome of Run: one value of A and of B per round, and their
// ratio A/B per round.
type Pair struct {
	Name   string    `json:"name"`
	Unit   string    `json:"unit"`
	A      []float64 `json:"a"`
	B      []float64 `json:"b"`
	Ratios []float64 `json:"ratios"`
	// Target is the smallest (or, with Below, the largest) acceptable
	// median ratio; 0 means none.
	Target float64 `json:"target,omitempty"`
	Below  bool    `json:"below,omitempty"`
}

// MedianA returns the median of A.
func (p *Pair) MedianA() float64 { return Median(p.A) }

// MedianB returns the median of B.
func (p *Pair) MedianB() float64 { return Median(p.B) }

// Ratio returns the median of the per-round ratios.
func (p *Pair) Ratio() float64 { return Median(p.Ratios) }

// Met reports whether the median ratio meets the target (true without one).
func (p *Pair) Met() bool {
	switch {
	case p.Target == 0:
		return true
	case p.Below:
		return p.Ratio() <= p.Target
	}
	return p.Ratio() >= p.Target
}

// Run measures a and b alternately, rounds times each, A first in every
// round. Each function returns one measurement (a rate or a time, in the
// pair's unit).
func Run(name, unit string, rounds int, a, b func(round int) (float64, error)) (*Pair, error) {
	p := &Pair{Name: name, Unit: unit}
	for r := 0; r < rounds; r++ {
		va, err := a(r)
		if err != nil {
			return p, fmt.Errorf("%s: round %d: A: %w", name, r+1, err)
		}
		vb, err := b(r)
		if err != nil {
			return p, fmt.Errorf("%s: round %d: B: %w", name, r+1, err)
		}
		p.A, p.B = append(p.A, va), append(p.B, vb)
		ratio := 0.0
		if vb != 0 {
			ratio = va / vb
		}
		p.Ratios = append(p.Ratios, ratio)
		fmt.Fprintf(os.Stderr, "  %s round %d: A %s  B %s  A/B %.3f\n", name, r+1, Fmt(va), Fmt(vb), ratio)
	}
	return p, nil
}

// String renders the pair as one line of a report.
func (p *Pair) String() string {
	rs := make([]string, len(p.Ratios))
	for i, r := range p.Ratios {
		rs[i] = fmt.Sprintf("%.3f", r)
	}
	s := fmt.Sprintf("%s: A %s %s, B %s %s (medians), A/B %.3f (median of pairs %s)",
		p.Name, Fmt(p.MedianA()), p.Unit, Fmt(p.MedianB()), p.Unit, p.Ratio(), strings.Join(rs, " "))
	if p.Target != 0 {
		op := ">="
		if p.Below {
			op = "<="
		}
		verdict := "met"
		if !p.Met() {
			verdict = "MISSED"
		}
		s += fmt.Sprintf("; target A/B %s %.3g: %s", op, p.Target, verdict)
	}
	return s
}

// Median returns the median of xs (0 for none).
func Median(xs []float64) float64 {
	if len(xs) == 0 {
		return 0
	}
	s := slices.Clone(xs)
	slices.Sort(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}

// Latency summarises latency samples.
type Latency struct {
	N    int     `json:"n"`
	P50  float64 `json:"p50_us"`
	P90  float64 `json:"p90_us"`
	P99  float64 `json:"p99_us"`
	P999 float64 `json:"p999_us"`
	Max  float64 `json:"max_us"`
	Mean float64 `json:"mean_us"`
}

// Summarize returns the distribution of ds, in microseconds. ds is sorted
// in place.
func Summarize(ds []time.Duration) Latency {
	if len(ds) == 0 {
		return Latency{}
	}
	slices.Sort(ds)
	us := func(d time.Duration) float64 { return float64(d) / 1e3 }
	q := func(p float64) float64 {
		i := int(p * float64(len(ds)-1))
		return us(ds[i])
	}
	var sum time.Duration
	for _, d := range ds {
		sum += d
	}
	return Latency{N: len(ds), P50: q(0.50), P90: q(0.90), P99: q(0.99), P999: q(0.999), Max: us(ds[len(ds)-1]), Mean: us(sum) / float64(len(ds))}
}

// String renders a latency summary.
func (l Latency) String() string {
	return fmt.Sprintf("n=%d p50 %.1fµs p90 %.1fµs p99 %.1fµs p99.9 %.1fµs max %.1fµs mean %.1fµs", l.N, l.P50, l.P90, l.P99, l.P999, l.Max, l.Mean)
}

// Fmt prints a value with a precision that suits its size.
func Fmt(v float64) string {
	switch a := abs(v); {
	case a >= 1e6:
		return fmt.Sprintf("%.3fM", v/1e6)
	case a >= 1e4:
		return fmt.Sprintf("%.1fk", v/1e3)
	case a >= 100:
		return fmt.Sprintf("%.0f", v)
	case a >= 1:
		return fmt.Sprintf("%.2f", v)
	}
	return fmt.Sprintf("%.4g", v)
}

func abs(v float64) float64 {
	if v < 0 {
		return -v
	}
	return v
}

// Recorder appends one JSON object per figure to a file (or nowhere), so a
// results document can quote exactly what a run measured.
type Recorder struct {
	w     io.Writer
	bench string
}

// NewRecorder appends to path ("" records nothing). bench names the
// program in every record.
func NewRecorder(path, bench string) (*Recorder, func() error, error) {
	if path == "" {
		return &Recorder{w: io.Discard, bench: bench}, func() error { return nil }, nil
	}
	f, err := os.OpenFile(path, os.O_CREATE|os.O_APPEND|os.O_WRONLY, 0o644)
	if err != nil {
		return nil, nil, fmt.Errorf("results file: %w", err)
	}
	return &Recorder{w: f, bench: bench}, f.Close, nil
}

// Record writes one figure: what it is and its value(s).
func (r *Recorder) Record(what string, v any) {
	b, err := json.Marshal(map[string]any{"bench": r.bench, "what": what, "value": v, "at": time.Now().UTC().Format(time.RFC3339)})
	if err != nil {
		b = []byte(fmt.Sprintf(`{"bench":%q,"what":%q,"error":%q}`, r.bench, what, err.Error()))
	}
	r.w.Write(append(b, '\n'))
}

// Pair prints p to w and records it.
func (r *Recorder) Pair(w io.Writer, p *Pair) {
	fmt.Fprintln(w, p.String())
	r.Record(p.Name, map[string]any{"a": p.A, "b": p.B, "ratios": p.Ratios, "median_a": p.MedianA(), "median_b": p.MedianB(), "ratio": p.Ratio(), "unit": p.Unit, "target": p.Target, "met": p.Met()})
}

// Verdict words whether a target is met, as every figure line prints it.
func Verdict(ok bool) string {
	if ok {
		return "met"
	}
	return "MISSED"
}

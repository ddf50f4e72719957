package session

import (
	"fmt"
	"html/template"
	"math"
	"strings"
	"sync"
	"sync/atomic"
	"time"
)

// history keeps the service's own recent figures for the operator page's
// charts: one sample per interval, the last historyLen of them. Samples are
// taken when requests arrive (the first request after an interval ends
// takes one), so history needs no goroutine of its own; a service nobody
// asks keeps no samples, and the page, which is a request, always takes
// one. It is operational telemetry, so it reads the wall clock, never event
// time.
type history struct {
	interval time.Duration
	now      func() time.Time

	next atomic.Int64 // unix ns when the next sample is due
	// lat counts query latencies of the current interval by bucket; a
	// query adds to it without a lock.
	lat [latBuckets]atomic.Uint64

	mu       sync.Mutex // protects the fields below
	samples  []sample   // ring of the last historyLen samples
	head     int        // index of the oldest sample once the ring is full
	last     time.Time  // when the previous sample was taken
	applied  uint64     // events applied at the previous sample
	rejected uint64     // events rejected at the previous sample
	primed   bool       // applied and rejected hold a previous sample
}

// sample is one interval of the service's life.
type sample struct {
	At       time.Time
	Ingest   float64 // events applied per second over the interval
	Lag      float64 // consumer lag in messages at the sample
	Rejected float64 // events rejected during the interval
	Queries  float64 // queries answered during the interval
	P50, P99 float64 // query latency over the interval, ms (0 without queries)
}

const (
	historyLen      = 120 // ten minutes at the default interval
	historyInterval = 5 * time.Second
	// Latency buckets are log-spaced from 10 µs by a factor of 10^(1/20)
	// (about 12 %), so a quantile read off them is within 12 % of the
	// true value up to 10^(latBuckets/20) × 10 µs ≈ 10 s.
	latBuckets = 120
	latBase    = 10 * time.Microsecond
)

func newHistory(interval time.Duration, now func() time.Time) *history {
	if interval <= 0 {
		interval = historyInterval
	}
	if now == nil {
		now = time.Now
	}
	h := &history{interval: interval, now: now}
	h.next.Store(now().Add(interval).UnixNano())
	return h
}

// observe counts one query's latency in the current interval.
func (h *history) observe(d time.Duration) {
	b := 0
	if d > latBase {
		b = int(math.Ceil(20 * math.Log10(float64(d)/float64(latBase))))
	}
	h.lat[min(b, latBuckets-1)].Add(1)
}

// bucketMS is the upper bound of latency bucket b, in milliseconds.
func bucketMS(b int) float64 {
	return float64(latBase) * math.Pow(10, float64(b)/20) / float64(time.Millisecond)
}

// counters are the engine figures a sample reads: lock-free atomics, so a
// sample taken inside a request costs no engine lock and no store walk
// (Stats would size the store on disk).
type counters struct {
	applied, rejected, lag uint64
}

// counters reads the figures the operator page's history samples.
func (e *Engine) counters() counters {
	return counters{applied: e.applied.Load(), rejected: e.rejected.Load(), lag: e.Lag()}
}

// maybeSample takes a sample when one is due (or always, with force),
// reading the engine's counters through read.
func (h *history) maybeSample(read func() counters, force bool) {
	now := h.now()
	due := h.next.Load()
	if !force && now.UnixNano() < due {
		return
	}
	if !h.mu.TryLock() {
		if !force {
			return // another request is taking this sample
		}
		h.mu.Lock()
	}
	defer h.mu.Unlock()
	if !force && now.UnixNano() < h.next.Load() {
		return
	}
	h.next.Store(now.Add(h.interval).UnixNano())
	st := read()
	var counts [latBuckets]uint64
	var n uint64
	for i := range h.lat {
		counts[i] = h.lat[i].Swap(0)
		n += counts[i]
	}
	s := sample{At: now, Lag: float64(st.lag), Queries: float64(n)}
	if n > 0 {
		s.P50, s.P99 = quantileMS(&counts, n, 0.50), quantileMS(&counts, n, 0.99)
	}
	if h.primed {
		if secs := now.Sub(h.last).Seconds(); secs > 0 && st.applied >= h.applied {
			s.Ingest = float64(st.applied-h.applied) / secs
		}
		if st.rejected >= h.rejected {
			s.Rejected = float64(st.rejected - h.rejected)
		}
	}
	h.last, h.applied, h.rejected, h.primed = now, st.applied, st.rejected, true
	if len(h.samples) < historyLen {
		h.samples = append(h.samples, s)
		return
	}
	h.samples[h.head] = s
	h.head = (h.head + 1) % historyLen
}

// quantileMS reads quantile q off bucket counts totalling n.
func quantileMS(counts *[latBuckets]uint64, n uint64, q float64) float64 {
	rank := uint64(math.Ceil(q * float64(n)))
	var seen uint64
	for b, c := range counts {
		seen += c
		if seen >= rank {
			return bucketMS(b)
		}
	}
	return bucketMS(latBuckets - 1)
}

// snapshot returns the samples, oldest first.
func (h *history) snapshot() []sample {
	h.mu.Lock()
	defer h.mu.Unlock()
	out := make([]sample, 0, len(h.samples))
	out = append(out, h.samples[h.head:]...)
	return append(out, h.samples[:h.head]...)
}

// historyChart is one chart of the operator page.
type historyChart struct {
	Title string
	Now   string // the latest value, as shown beside the title
	SVG   template.HTML
}

// historyCharts draws the page's charts from the samples: ingest rate,
// consumer lag, query latency (p50 and p99) and rejected events.
func historyCharts(ss []sample) []historyChart {
	pick := func(f func(sample) float64) []float64 {
		out := make([]float64, len(ss))
		for i, s := range ss {
			out[i] = f(s)
		}
		return out
	}
	latest := func(v []float64, unit string) string {
		switch {
		case len(v) == 0:
			return "no sample yet"
		case math.IsNaN(v[len(v)-1]):
			return "no queries"
		}
		return fmtValue(v[len(v)-1]) + unit
	}
	// A latency of an interval without queries is unknown, not zero: NaN
	// leaves a gap in the line.
	lat := func(f func(sample) float64) []float64 {
		return pick(func(s sample) float64 {
			if s.Queries == 0 {
				return math.NaN()
			}
			return f(s)
		})
	}
	ingest := pick(func(s sample) float64 { return s.Ingest })
	lag := pick(func(s sample) float64 { return s.Lag })
	p50 := lat(func(s sample) float64 { return s.P50 })
	p99 := lat(func(s sample) float64 { return s.P99 })
	rej := pick(func(s sample) float64 { return s.Rejected })
	span := ""
	if len(ss) > 1 {
		span = ss[len(ss)-1].At.Sub(ss[0].At).Round(time.Second).String()
	}
	return []historyChart{
		{"ingest (events/s)", latest(ingest, "/s"), sparkline(span, line{"#0072B2", ingest})},
		{"consumer lag (messages)", latest(lag, ""), sparkline(span, line{"#D55E00", lag})},
		{"query latency p50 / p99 (ms)", latencyNow(p50, p99), sparkline(span, line{"#009E73", p50}, line{"#CC79A7", p99})},
		{"rejected events (per sample)", latest(rej, ""), sparkline(span, line{"#A8200D", rej})},
	}
}

// latencyNow writes the latest p50 and p99, or says there were no queries.
func latencyNow(p50, p99 []float64) string {
	if len(p50) == 0 {
		return "no sample yet"
	}
	a, b := p50[len(p50)-1], p99[len(p99)-1]
	if math.IsNaN(a) {
		return "no queries"
	}
	return fmtValue(a) + " / " + fmtValue(b) + " ms"
}

type line struct {
	Color  string
	Values []float64
}

// fmtValue writes a chart value compactly: no exponent, at most three
// significant decimals.
func fmtValue(v float64) string {
	switch a := math.Abs(v); {
	case a >= 1e6:
		return fmt.Sprintf("%.1fM", v/1e6)
	case a >= 1e4:
		return fmt.Sprintf("%.1fk", v/1e3)
	case a >= 100 || a == 0:
		return fmt.Sprintf("%.0f", v)
	case a >= 1:
		return fmt.Sprintf("%.1f", v)
	}
	return fmt.Sprintf("%.3f", v)
}

// sparkline draws lines over a shared y axis from 0 to the largest value,
// as inline SVG (the page's CSP allows no script and no remote asset).
// Only numbers and fixed colours enter the markup.
func sparkline(span string, ls ...line) template.HTML {
	const w, h, padL, padB = 260, 70, 34, 14
	ymax := 0.0
	n := 0
	for _, l := range ls {
		n = max(n, len(l.Values))
		for _, v := range l.Values {
			if !math.IsNaN(v) {
				ymax = max(ymax, v)
			}
		}
	}
	if ymax <= 0 {
		ymax = 1
	}
	var b strings.Builder
	fmt.Fprintf(&b, `<svg class="spark" xmlns="http://www.w3.org/2000/svg" viewBox="0 0 %d %d" width="%d" height="%d" role="img">`, w, h, w, h)
	fmt.Fprintf(&b, `<line x1="%d" y1="%d" x2="%d" y2="%d" stroke="#ccc"/>`, padL, h-padB, w, h-padB)
	fmt.Fprintf(&b, `<text x="%d" y="10" text-anchor="end" font-size="9" fill="#666">%s</text>`, padL-4, fmtValue(ymax))
	fmt.Fprintf(&b, `<text x="%d" y="%d" text-anchor="end" font-size="9" fill="#666">0</text>`, padL-4, h-padB)
	if span != "" {
		fmt.Fprintf(&b, `<text x="%d" y="%d" font-size="9" fill="#666">last %s</text>`, padL, h-2, template.HTMLEscapeString(span))
	}
	if n < 2 {
		fmt.Fprintf(&b, `<text x="%d" y="%d" font-size="10" fill="#888">collecting samples…</text>`, padL+8, h/2)
	}
	for _, l := range ls {
		if len(l.Values) < 2 {
			continue
		}
		// A NaN value ends a run of points: each run is its own polyline,
		// a run of one point a dot.
		var run []string
		var lastX, lastY float64
		draw := func() {
			switch len(run) {
			case 0:
			case 1:
				fmt.Fprintf(&b, `<circle cx="%.1f" cy="%.1f" r="1.6" fill="%s"/>`, lastX, lastY, l.Color)
			default:
				fmt.Fprintf(&b, `<polyline fill="none" stroke="%s" stroke-width="1.6" points="%s"/>`, l.Color, strings.Join(run, " "))
			}
			run = run[:0]
		}
		for i, v := range l.Values {
			if math.IsNaN(v) {
				draw()
				continue
			}
			lastX = float64(padL) + float64(w-padL-2)*float64(i)/float64(n-1)
			lastY = float64(h-padB) - float64(h-padB-4)*v/ymax
			run = append(run, fmt.Sprintf("%.1f,%.1f", lastX, lastY))
		}
		draw()
	}
	b.WriteString(`</svg>`)
	return template.HTML(b.String()) // built from numbers and constants only
}

// Command soak runs a bounded load against one `waymark serve` on
// loopback (issue 5's soak; not part of CI): events are published to the
// service's embedded NATS server at a fixed rate while query workers ask
// for next items and scores at a fixed rate, for a fixed time, and then
// the service is stopped gracefully. Every 10 s it samples the process's
// resident memory (/proc/PID/status VmRSS, and RssAnon without the
// memory-mapped files), the Go heap and goroutines
// (from /metrics), ingest progress and the queries of the interval (count,
// p50, p99, max and errors as the client saw them, and the p99 bucket of
// the service's own waymark_query_seconds histogram, which leaves out HTTP
// and the client), and prints one row; at the end it prints a verdict on
// memory, client p99 against a target and errors. Memory is judged by the
// process's peak resident set (/proc/PID/status VmHWM, read just before
// the stop, so no spike between samples escapes) against serve's memory
// budget (waymark_memory_budget_bytes, --memory-budget): over it fails.
//
// Everything stops by itself: the load after --duration, the service
// right after it. Only loopback addresses are used.
//
//	go build -o /tmp/waymark ./cmd/waymark
//	go run ./bench/soak --bin /tmp/waymark --duration 10m
package main

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"waymark/bench/svc"
	"waymark/bench/synth"
	"waymark/stream"
)

type config struct {
	bin         string
	duration    time.Duration
	every       time.Duration
	eventRate   int
	queryRate   int
	workers     int
	items       int
	dir         string
	keep        bool
	targetP99   time.Duration
	serveFlags  string
	maxHeapGrow float64
}

func main() {
	var c config
	flag.StringVar(&c.bin, "bin", "", "waymark `binary` (empty: build ./cmd/waymark into the work folder)")
	flag.DurationVar(&c.duration, "duration", 10*time.Minute, "how long the load runs")
	flag.DurationVar(&c.every, "sample", 10*time.Second, "sampling interval")
	flag.IntVar(&c.eventRate, "event-rate", 2000, "events published per second")
	flag.IntVar(&c.queryRate, "query-rate", 200, "queries per second, over all workers")
	flag.IntVar(&c.workers, "workers", 8, "query workers")
	flag.IntVar(&c.items, "items", 20_000, "catalogue size of the generated stream")
	flag.StringVar(&c.dir, "dir", "", "work `folder` (empty: a new temporary one)")
	flag.BoolVar(&c.keep, "keep", false, "keep the work folder")
	flag.DurationVar(&c.targetP99, "target-p99", 50*time.Millisecond, "p99 query latency every interval must stay under")
	flag.Float64Var(&c.maxHeapGrow, "max-heap-growth", 0.25, "largest allowed growth of the mean Go heap from the second third of the run to the last")
	flag.StringVar(&c.serveFlags, "serve-flags", "", "extra flags for serve, space-separated")
	flag.Parse()
	if c.duration <= 0 || c.every <= 0 || c.eventRate < 10 || c.queryRate < 1 || c.workers < 1 {
		fmt.Fprintln(os.Stderr, "soak: --duration and --sample must be positive, --event-rate at least 10, --query-rate and --workers at least 1")
		os.Exit(2)
	}
	ok, err := run(c)
	if err != nil {
		fmt.Fprintln(os.Stderr, "soak:", err)
		os.Exit(1)
	}
	if !ok {
		os.Exit(1)
	}
}

// window collects one interval's query latencies and errors.
type window struct {
	mu   sync.Mutex
	lat  []time.Duration
	errs int
	last string // last error, for the log
}

func (w *window) add(d time.Duration, err error) {
	w.mu.Lock()
	if err != nil {
		w.errs++
		w.last = err.Error()
	} else {
		w.lat = append(w.lat, d)
	}
	w.mu.Unlock()
}

func (w *window) take() (lat []time.Duration, errs int, last string) {
	w.mu.Lock()
	lat, errs, last = w.lat, w.errs, w.last
	w.lat, w.errs, w.last = nil, 0, ""
	w.mu.Unlock()
	slices.Sort(lat)
	return lat, errs, last
}

func quantile(s []time.Duration, q float64) time.Duration {
	if len(s) == 0 {
		return 0
	}
	i := int(q*float64(len(s)-1) + 0.5)
	return s[i]
}

// recent keeps the latest sessions and items published, for queries that
// look like live traffic.
type recent struct {
	mu       sync.Mutex
	sessions []string
	items    []string
	pos      int
}

func newRecent() *recent {
	return &recent{sessions: make([]string, 0, 4096), items: make([]string, 0, 4096)}
}

func (r *recent) add(evs []stream.Event) {
	r.mu.Lock()
	for i := range evs {
		if len(r.sessions) < cap(r.sessions) {
			r.sessions = append(r.sessions, evs[i].Session)
			r.items = append(r.items, evs[i].Item)
			continue
		}
		r.sessions[r.pos], r.items[r.pos] = evs[i].Session, evs[i].Item
		r.pos = (r.pos + 1) % len(r.sessions)
	}
	r.mu.Unlock()
}

func (r *recent) pick(rng *rand.Rand, nItems int) (string, []string) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if len(r.sessions) == 0 {
		return "", nil
	}
	s := r.sessions[rng.IntN(len(r.sessions))]
	its := make([]string, nItems)
	for i := range its {
		its[i] = r.items[rng.IntN(len(r.items))]
	}
	return s, its
}

type sample struct {
	at                 time.Duration
	applied, published uint64
	queries, errs      int
	p50, p99, max      time.Duration
	srvP99             time.Duration // upper bound of the service's own query-time bucket
	rss, anon, heap    float64
	goroutines         float64
	sessions           int
	lag                uint64
}

func run(c config) (bool, error) {
	var err error
	if c.dir == "" {
		if c.dir, err = os.MkdirTemp("", "soak-"); err != nil {
			return false, err
		}
	}
	if err := os.MkdirAll(c.dir, 0o755); err != nil {
		return false, err
	}
	if !c.keep {
		defer os.RemoveAll(c.dir)
	}
	if c.bin == "" {
		c.bin = filepath.Join(c.dir, "waymark")
		if out, err := exec.Command("go", "build", "-o", c.bin, "./cmd/waymark").CombinedOutput(); err != nil {
			return false, fmt.Errorf("go build: %v: %s", err, out)
		}
	}
	total := int(float64(c.eventRate)*c.duration.Seconds()*1.1) + c.eventRate
	evs := synth.Generate(synth.Options{Events: total, Items: c.items, Concurrent: 500, Seed: 11})
	var extra []string
	if f := strings.Fields(c.serveFlags); len(f) > 0 {
		extra = f
	}
	s, err := svc.Start(c.bin, filepath.Join(c.dir, "data"), extra...)
	if err != nil {
		return false, err
	}
	stopped := false
	defer func() {
		if !stopped {
			_ = s.Stop(60 * time.Second)
		}
	}()
	if _, err := s.WaitReady(2 * time.Minute); err != nil {
		return false, err
	}
	fmt.Printf("soak: %s, %d events/s published, %d queries/s from %d workers, %d items, sampled every %s, p99 target %s, serve pid %d\n",
		c.duration, c.eventRate, c.queryRate, c.workers, c.items, c.every, c.targetP99, s.Cmd.Process.Pid)

	ctx, cancel := context.WithTimeout(context.Background(), c.duration)
	defer cancel()
	bo := stream.DefaultBusOptions()
	bo.URL, bo.Name = s.NATS, "soak"
	bus, err := stream.Connect(ctx, bo)
	if err != nil {
		return false, err
	}
	defer bus.Close()

	rec := newRecent()
	var published atomic.Uint64
	var pubErrs atomic.Int64
	var wg sync.WaitGroup
	wg.Add(1)
	go func() { // the producer: a batch every 100 ms
		defer wg.Done()
		per := c.eventRate / 10
		t := time.NewTicker(100 * time.Millisecond)
		defer t.Stop()
		for off := 0; off+per <= len(evs); off += per {
			select {
			case <-ctx.Done():
				return
			case <-t.C:
			}
			part := evs[off : off+per]
			if err := bus.PublishEvents(ctx, part); err != nil {
				if ctx.Err() == nil {
					pubErrs.Add(1)
				}
				continue
			}
			published.Add(uint64(len(part)))
			rec.add(part)
		}
	}()

	win := &window{}
	hc := &http.Client{Timeout: 10 * time.Second, Transport: &http.Transport{MaxIdleConnsPerHost: c.workers}}
	perWorker := time.Duration(float64(time.Second) * float64(c.workers) / float64(c.queryRate))
	for w := 0; w < c.workers; w++ {
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			rng := rand.New(rand.NewPCG(uint64(w), 99))
			t := time.NewTicker(perWorker)
			defer t.Stop()
			for n := 0; ; n++ {
				select {
				case <-ctx.Done():
					return
				case <-t.C:
				}
				sess, its := rec.pick(rng, 11)
				if sess == "" {
					continue
				}
				var req *http.Request
				switch n % 10 {
				case 0, 1, 2, 3, 4: // a tracked session
					req, _ = http.NewRequest("GET", s.HTTP+"/v1/sessions/"+sess+"/next?k=10", nil)
				case 5, 6, 7: // a sequence sent by the caller
					b, _ := json.Marshal(map[string]any{"items": its[:1+rng.IntN(5)], "k": 20})
					req, _ = http.NewRequest("POST", s.HTTP+"/v1/next", bytes.NewReader(b))
				default: // a ranker scoring its candidates
					b, _ := json.Marshal(map[string]any{"items": its[:1], "candidates": its[1:]})
					req, _ = http.NewRequest("POST", s.HTTP+"/v1/score", bytes.NewReader(b))
				}
				start := time.Now()
				err := do(hc, req)
				if ctx.Err() != nil && err != nil {
					return // the run ended during this request
				}
				win.add(time.Since(start), err)
			}
		}(w)
	}

	// The sampler.
	var samples []sample
	m0, prevBuckets, _ := scrape(hc, s.HTTP+"/metrics")
	budget := m0["waymark_memory_budget_bytes"]
	fmt.Printf("%7s %10s %10s %7s %8s %8s %8s %9s %6s %9s %9s %9s %6s %9s %7s\n",
		"t", "applied", "published", "q/s", "p50 ms", "p99 ms", "max ms", "srv p99≤", "errors", "RSS MiB", "anon MiB", "heap MiB", "gorout", "sessions", "lag")
	start := time.Now()
	tick := time.NewTicker(c.every)
	for done := false; !done; {
		select {
		case <-ctx.Done():
			done = true
		case <-tick.C:
		}
		if done && time.Since(start)-time.Duration(len(samples))*c.every < c.every/2 {
			break // the last tick has just sampled this interval
		}
		lat, errs, last := win.take()
		sm := sample{at: time.Since(start).Round(time.Second), published: published.Load(), queries: len(lat) + errs, errs: errs,
			p50: quantile(lat, 0.5), p99: quantile(lat, 0.99), max: quantile(lat, 1)}
		if st, err := s.Stats(); err == nil {
			sm.applied, sm.sessions = st.Applied, st.Sessions
			if sm.published > st.Applied {
				sm.lag = sm.published - st.Applied
			}
		}
		// VmRSS counts the store's and the stream's memory-mapped files
		// too (reclaimable page cache); RssAnon is the process's own memory.
		mem := procStatus(s.Cmd.Process.Pid, "VmRSS", "RssAnon")
		sm.rss, sm.anon = float64(mem[0])/(1<<20), float64(mem[1])/(1<<20)
		if m, b, err := scrape(hc, s.HTTP+"/metrics"); err == nil {
			sm.heap = m["go_memstats_heap_alloc_bytes"] / (1 << 20)
			sm.goroutines = m["go_goroutines"]
			sm.srvP99 = bucketQuantile(prevBuckets, b, 0.99)
			prevBuckets = b
		}
		interval := c.every.Seconds()
		if done {
			interval = time.Since(start).Seconds() - float64(len(samples))*c.every.Seconds()
		}
		samples = append(samples, sm)
		fmt.Printf("%7s %10d %10d %7.0f %8.2f %8.2f %8.2f %9.2f %6d %9.1f %9.1f %9.1f %6.0f %9d %7d\n",
			sm.at, sm.applied, sm.published, float64(sm.queries)/max(interval, 1e-3),
			ms(sm.p50), ms(sm.p99), ms(sm.max), ms(sm.srvP99), sm.errs, sm.rss, sm.anon, sm.heap, sm.goroutines, sm.sessions, sm.lag)
		if errs > 0 {
			fmt.Printf("        last error: %s\n", last)
		}
	}
	tick.Stop()
	wg.Wait()

	// Let ingest finish, then check that every published event was applied.
	pub := published.Load()
	var final svc.Stats
	deadline := time.Now().Add(2 * time.Minute)
	for time.Now().Before(deadline) {
		if final, err = s.Stats(); err == nil && final.Applied >= pub {
			break
		}
		time.Sleep(100 * time.Millisecond)
	}
	peak := float64(procStatus(s.Cmd.Process.Pid, "VmHWM")[0])
	stopErr := s.Stop(60 * time.Second)
	stopped = true
	return verdict(c, samples, pub, final, pubErrs.Load(), stopErr, peak, budget), nil
}

// verdict prints the summary and judges the run. peak is the process's
// peak resident set and budget its memory budget, in bytes (budget 0: the
// binary exports none, so there is nothing to judge against).
func verdict(c config, samples []sample, pub uint64, final svc.Stats, pubErrs int64, stopErr error, peak, budget float64) bool {
	ok := true
	var queries, errs int
	var worst, worstSrv time.Duration
	var rssMax, anonMax, heapMax float64
	over := 0
	for _, s := range samples {
		queries += s.queries
		errs += s.errs
		worst = max(worst, s.p99)
		worstSrv = max(worstSrv, s.srvP99)
		if s.p99 > c.targetP99 {
			over++
		}
		rssMax = max(rssMax, s.rss)
		anonMax = max(anonMax, s.anon)
		heapMax = max(heapMax, s.heap)
	}
	third := len(samples) / 3
	mean := func(ss []sample, f func(sample) float64) float64 {
		if len(ss) == 0 {
			return 0
		}
		t := 0.0
		for _, s := range ss {
			t += f(s)
		}
		return t / float64(len(ss))
	}
	heap := func(s sample) float64 { return s.heap }
	rss := func(s sample) float64 { return s.rss }
	anon := func(s sample) float64 { return s.anon }
	mid, end := samples[third:2*third], samples[2*third:]
	hMid, hEnd := mean(mid, heap), mean(end, heap)
	rMid, rEnd := mean(mid, rss), mean(end, rss)
	aMid, aEnd := mean(mid, anon), mean(end, anon)
	fmt.Printf("\nsummary: %d queries, %d errors, worst interval p99 %.2f ms (target %s, exceeded in %d of %d intervals), worst service-side p99 bucket %.2f ms; %d events published (%d publish errors), %d applied (%d rejected)\n",
		queries, errs, ms(worst), c.targetP99, over, len(samples), ms(worstSrv), pub, pubErrs, final.Applied, final.Rejected)
	fmt.Printf("summary: RSS max %.1f MiB, mean %.1f MiB in the second third, %.1f MiB in the last; anonymous max %.1f MiB, mean %.1f → %.1f MiB; Go heap max %.1f MiB, mean %.1f → %.1f MiB\n",
		rssMax, rMid, rEnd, anonMax, aMid, aEnd, heapMax, hMid, hEnd)
	switch {
	case peak == 0:
		fmt.Println("summary: peak RSS unknown (no /proc)")
	case budget == 0:
		fmt.Printf("summary: peak RSS %.1f MiB; the binary reports no memory budget\n", peak/(1<<20))
	default:
		fmt.Printf("summary: peak RSS %.1f MiB against the memory budget of %.0f MiB (%.0f %%)\n", peak/(1<<20), budget/(1<<20), 100*peak/budget)
		if peak > budget {
			fmt.Printf("FAIL: peak RSS %.1f MiB is above the memory budget of %.0f MiB\n", peak/(1<<20), budget/(1<<20))
			ok = false
		}
	}
	if errs > 0 || pubErrs > 0 {
		fmt.Println("FAIL: errors during the soak")
		ok = false
	}
	if worst > c.targetP99 {
		fmt.Printf("FAIL: an interval's p99 %.2f ms is above the target %s\n", ms(worst), c.targetP99)
		ok = false
	}
	if third > 0 && hMid > 0 && (hEnd-hMid)/hMid > c.maxHeapGrow {
		fmt.Printf("FAIL: the mean Go heap grew %.0f %% from the second third to the last (allowed %.0f %%)\n", 100*(hEnd-hMid)/hMid, 100*c.maxHeapGrow)
		ok = false
	}
	if final.Applied != pub || final.Rejected != 0 {
		fmt.Printf("FAIL: %d events published, %d applied and %d rejected\n", pub, final.Applied, final.Rejected)
		ok = false
	}
	if stopErr != nil {
		fmt.Println("FAIL: graceful stop:", stopErr)
		ok = false
	}
	if ok {
		fmt.Println("soak: PASS")
	}
	return ok
}

func ms(d time.Duration) float64 { return float64(d) / float64(time.Millisecond) }

func do(hc *http.Client, req *http.Request) error {
	if req.Method == "POST" {
		req.Header.Set("Content-Type", "application/json")
	}
	resp, err := hc.Do(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		return err
	}
	if resp.StatusCode != http.StatusOK {
		return fmt.Errorf("%s %s: %d %s", req.Method, req.URL.Path, resp.StatusCode, bytes.TrimSpace(b))
	}
	return nil
}

// scrape reads the unlabelled samples of a Prometheus text exposition,
// and the service's query-time histogram (waymark_query_seconds, every
// endpoint and source summed) as cumulative counts by upper bound.
func scrape(hc *http.Client, url string) (map[string]float64, map[float64]float64, error) {
	resp, err := hc.Get(url)
	if err != nil {
		return nil, nil, err
	}
	defer resp.Body.Close()
	out := map[string]float64{}
	buckets := map[float64]float64{}
	sc := bufio.NewScanner(resp.Body)
	sc.Buffer(make([]byte, 64<<10), 1<<20)
	for sc.Scan() {
		l := sc.Text()
		if rest, ok := strings.CutPrefix(l, "waymark_query_seconds_bucket{"); ok {
			_, le, _ := strings.Cut(rest, `le="`)
			le, val, _ := strings.Cut(le, `"} `)
			b, err1 := strconv.ParseFloat(le, 64) // "+Inf" parses as +Inf
			v, err2 := strconv.ParseFloat(strings.TrimSpace(val), 64)
			if err1 == nil && err2 == nil {
				buckets[b] += v
			}
			continue
		}
		if l == "" || l[0] == '#' || strings.ContainsRune(l, '{') {
			continue
		}
		name, val, ok := strings.Cut(l, " ")
		if !ok {
			continue
		}
		if v, err := strconv.ParseFloat(strings.TrimSpace(val), 64); err == nil {
			out[name] = v
		}
	}
	return out, buckets, sc.Err()
}

// bucketQuantile returns the upper bound of the histogram bucket that
// holds quantile q of the counts added between prev and cur.
func bucketQuantile(prev, cur map[float64]float64, q float64) time.Duration {
	les := make([]float64, 0, len(cur))
	for le := range cur {
		les = append(les, le)
	}
	slices.Sort(les)
	if len(les) == 0 {
		return 0
	}
	total := cur[les[len(les)-1]] - prev[les[len(les)-1]]
	if total <= 0 {
		return 0
	}
	for _, le := range les {
		if cur[le]-prev[le] >= q*total {
			if math.IsInf(le, 1) {
				return time.Duration(math.MaxInt64)
			}
			return time.Duration(le * float64(time.Second))
		}
	}
	return 0
}

// procStatus reads fields of /proc/PID/status given in kB (VmRSS,
// RssAnon, ...), in bytes.
func procStatus(pid int, fields ...string) []uint64 {
	out := make([]uint64, len(fields))
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		return out
	}
	for _, l := range strings.Split(string(b), "\n") {
		name, v, ok := strings.Cut(l, ":")
		if i := slices.Index(fields, name); ok && i >= 0 {
			kb, _ := strconv.ParseUint(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(v), "kB")), 10, 64)
			out[i] = kb << 10
		}
	}
	return out
}

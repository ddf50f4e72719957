// Command ingest measures the bus paths of issue 6 against a bare consumer
// on the same embedded server and stream, A B A B:
//
//	ingest fill    --dir D --events N     pre-fill a stream template (D/nats)
//	ingest bus     --template D ...       figure 1: serve consuming the pre-filled stream vs the bare consumer
//	ingest live    ...                    figure 1, live: the same while a publisher runs
//	ingest restart --template D ...       figure 7: start-to-ready after the template is learned
//	ingest fresh   --template D ...       figure 8: first click published → item in an answer, at a fixed ingest rate
//	ingest bare    ...                    the bare consumer process (started by the others)
//
// `waymark serve` runs as its own process (--waymark BIN) with its embedded
// NATS server and default flush; the bare consumer runs as its own process
// too, embedding the same server on a copy of the same stream folder, so the
// two sides pay the same costs except the ones under test.
package main

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"sort"
	"strings"
	"sync/atomic"
	"syscall"
	"time"

	"github.com/nats-io/nats.go"

	"waymark/bench/abab"
	"waymark/bench/bare"
	"waymark/bench/svc"
	"waymark/bench/synth"
	"waymark/stream"
)

func main() {
	if len(os.Args) < 2 {
		fmt.Fprintln(os.Stderr, "usage: ingest fill|bus|live|restart|fresh|bare [flags]")
		os.Exit(2)
	}
	cmd, args := os.Args[1], os.Args[2:]
	var err error
	switch cmd {
	case "fill":
		err = runFill(args)
	case "bus":
		err = runBus(args)
	case "live":
		err = runLive(args)
	case "restart":
		err = runRestart(args)
	case "fresh":
		err = runFresh(args)
	case "bare":
		err = runBareChild(args)
	default:
		err = fmt.Errorf("unknown command %q", cmd)
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "ingest "+cmd+":", err)
		os.Exit(1)
	}
}

// common flags
type common struct {
	fs        *flag.FlagSet
	waymark   string
	work      string
	events    int
	items     int
	rounds    int
	jsonOut   string
	template  string
	serveArgs string
}

// fromTemplate copies the pre-filled stream template into a fresh folder
// of the work folder; the caller removes it.
func (c *common) fromTemplate(name string) (string, error) {
	dir := filepath.Join(c.work, name)
	return dir, svc.CopyDir(c.template, dir)
}

// start starts serve on dir with the extra flags.
func (c *common) start(dir string) (*svc.Serve, error) {
	return svc.Start(c.waymark, dir, strings.Fields(c.serveArgs)...)
}

// serveCopy starts serve on a fresh copy of the template named name; done
// stops it and removes the copy.
func (c *common) serveCopy(name string) (s *svc.Serve, done func(), err error) {
	dir, err := c.fromTemplate(name)
	if err == nil {
		s, err = c.start(dir)
	}
	if err != nil {
		os.RemoveAll(dir)
		return nil, nil, err
	}
	return s, func() { s.Stop(time.Minute); os.RemoveAll(dir) }, nil
}

func newCommon(name string) *common {
	c := &common{fs: flag.NewFlagSet(name, flag.ExitOnError)}
	c.fs.StringVar(&c.waymark, "waymark", "./waymark", "the waymark `binary`")
	c.fs.StringVar(&c.work, "work", os.TempDir(), "scratch `folder` for data folders")
	c.fs.IntVar(&c.events, "events", 1_000_000, "events")
	c.fs.IntVar(&c.items, "items", 100_000, "catalogue size")
	c.fs.IntVar(&c.rounds, "rounds", 3, "A B rounds")
	c.fs.StringVar(&c.jsonOut, "json", "", "append figures as JSON lines to `file`")
	c.fs.StringVar(&c.template, "template", "", "pre-filled stream template `folder` (from ingest fill)")
	c.fs.StringVar(&c.serveArgs, "serve-args", "", "extra serve flags, space-separated (e.g. \"--flush-events 50000\")")
	return c
}

// liveStart is the event time of live traffic: after any template's events.
const liveStart = 1767225600000 + 120*24*3600*1000

// ---- fill ----

func runFill(args []string) error {
	c := newCommon("fill")
	dir := c.fs.String("dir", "", "template `folder` to create")
	c.fs.Parse(args)
	if *dir == "" {
		return fmt.Errorf("--dir is required")
	}
	if _, err := os.Stat(*dir); err == nil {
		return fmt.Errorf("%s exists", *dir)
	}
	ctx := context.Background()
	ns, err := stream.StartServer(ctx, stream.ServerOptions{Dir: filepath.Join(*dir, "nats"), Listen: "127.0.0.1:-1"})
	if err != nil {
		return err
	}
	defer ns.Shutdown(ctx)
	bo := stream.DefaultBusOptions()
	bo.URL = ns.ClientURL()
	bus, err := stream.Connect(ctx, bo)
	if err != nil {
		return err
	}
	defer bus.Close()
	if err := bus.EnsureStreams(ctx); err != nil {
		return err
	}
	gen := synth.NewGen(synth.Options{Items: c.items, Concurrent: 1000})
	start := time.Now()
	bytes, err := publish(ctx, bus, gen, c.events, 0, nil, nil)
	if err != nil {
		return err
	}
	d := time.Since(start)
	fmt.Printf("filled %s: %d events, %.0f bytes each on average, published at %s events/s\n", *dir, c.events, float64(bytes)/float64(c.events), abab.Fmt(float64(c.events)/d.Seconds()))
	return nil
}

// publish publishes n events from gen as ~200-byte lines, rate events/s
// (0: as fast as the server acknowledges, in batches of 10,000; else in
// batches of 1000), numbering
// event ids from seq0. It returns the bytes published.
func publish(ctx context.Context, bus *stream.Bus, gen *synth.Gen, n int, rate float64, stop <-chan struct{}, lastTS *atomic.Int64) (int64, error) {
	batch := 1000
	if rate == 0 {
		batch = 10_000 // as fast as possible: fewer waits for the last ack
	}
	var total int64
	start := time.Now()
	subject := bus.Options().Subject
	for sent := 0; sent < n; {
		select {
		case <-stop:
			return total, nil
		default:
		}
		m := min(batch, n-sent)
		buf := make([]byte, 0, m*220)
		data := make([][]byte, m)
		for i := range data {
			ev := gen.Next()
			s := len(buf)
			buf = synth.AppendLine(buf, &ev, uint64(sent+i))
			data[i] = buf[s:len(buf):len(buf)]
		}
		total += int64(len(buf))
		if err := bus.PublishRaw(ctx, subject, data); err != nil {
			return total, err
		}
		if lastTS != nil {
			lastTS.Store(gen.LastTS())
		}
		sent += m
		if rate > 0 {
			due := start.Add(time.Duration(float64(sent) / rate * float64(time.Second)))
			if w := time.Until(due); w > 0 {
				time.Sleep(w)
			}
		}
	}
	return total, nil
}

// ---- the bare consumer child ----

type childReport struct {
	URL     string  `json:"url,omitempty"`
	N       int     `json:"n,omitempty"`
	Bad     int     `json:"bad,omitempty"`
	Rate    float64 `json:"rate,omitempty"`
	FirstNS int64   `json:"first_ns,omitempty"`
	LastNS  int64   `json:"last_ns,omitempty"`
}

func runBareChild(args []string) error {
	fs := flag.NewFlagSet("bare", flag.ExitOnError)
	dir := fs.String("dir", "", "NATS storage `folder` (a template's nats/ copy, or empty)")
	n := fs.Int("events", 1_000_000, "messages to consume (0: until stopped)")
	startOnly := fs.Bool("start-only", false, "start the server, report ready, stop")
	seen := fs.String("seen", "", "publish the item of every event whose item starts with fresh- on this core `subject`")
	ackEvery := fs.Int("ack-every", 1000, "acknowledge every this many messages (AckAll)")
	sameWork := fs.Bool("same-work", false, "also make the core learners' pair updates in Go maps (bare.SameWork) for every event")
	fs.Parse(args)
	ctx, cancel := signal.NotifyContext(context.Background(), syscall.SIGTERM, os.Interrupt)
	defer cancel()
	ns, err := stream.StartServer(ctx, stream.ServerOptions{Dir: *dir, Listen: "127.0.0.1:-1"})
	if err != nil {
		return err
	}
	defer ns.Shutdown(context.Background())
	bo := stream.DefaultBusOptions()
	bo.URL = ns.ClientURL()
	bus, err := stream.Connect(ctx, bo)
	if err != nil {
		return err
	}
	defer bus.Close()
	if err := bus.EnsureStreams(ctx); err != nil {
		return err
	}
	out := json.NewEncoder(os.Stdout)
	out.Encode(childReport{URL: ns.ClientURL()}) // the ready line
	if *startOnly {
		return nil
	}
	if *n == 0 {
		*n = int(^uint(0) >> 1)
	}
	var onMsg func(*stream.Event)
	if *sameWork {
		onMsg = bare.NewSameWork().Add
	}
	if *seen != "" {
		nc := bus.Conn()
		onMsg = func(ev *stream.Event) {
			if strings.HasPrefix(ev.Item, "fresh-") {
				nc.Publish(*seen, []byte(ev.Item))
			}
		}
	}
	res, err := bare.Consume(ctx, bus.JetStream(), bo.Stream, bo.Subject, *n, *ackEvery, onMsg)
	if err != nil && ctx.Err() == nil {
		return err
	}
	return out.Encode(childReport{N: res.N, Bad: res.Bad, Rate: res.Rate(), FirstNS: res.First.UnixNano(), LastNS: res.Last.UnixNano()})
}

// child is a running bare consumer process.
type child struct {
	cmd     *exec.Cmd
	lines   *bufio.Scanner
	ready   childReport
	readyIn time.Duration // exec to ready line
}

func startChild(self string, args ...string) (*child, error) {
	cmd := exec.Command(self, append([]string{"bare"}, args...)...)
	cmd.Stderr = os.Stderr
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		return nil, err
	}
	start := time.Now()
	if err := cmd.Start(); err != nil {
		return nil, err
	}
	c := &child{cmd: cmd, lines: bufio.NewScanner(stdout)}
	if !c.lines.Scan() {
		cmd.Wait()
		return nil, fmt.Errorf("bare consumer printed no ready line")
	}
	c.readyIn = time.Since(start)
	if err := json.Unmarshal(c.lines.Bytes(), &c.ready); err != nil {
		return nil, err
	}
	return c, nil
}

func (c *child) result() (childReport, error) {
	var r childReport
	if !c.lines.Scan() {
		c.cmd.Wait()
		return r, fmt.Errorf("bare consumer printed no result")
	}
	if err := json.Unmarshal(c.lines.Bytes(), &r); err != nil {
		return r, err
	}
	return r, c.cmd.Wait()
}

func (c *child) stop() (childReport, error) {
	c.cmd.Process.Signal(syscall.SIGTERM)
	return c.result()
}

func self() string {
	p, err := os.Executable()
	if err != nil {
		return os.Args[0]
	}
	return p
}

// ---- bus: pre-filled stream ----

func runBus(args []string) error {
	c := newCommon("bus")
	profile := c.fs.String("profile", "", "save a 5 s CPU profile of serve during round 1 to `file`")
	sameWork := c.fs.Bool("same-work", false, "also run serve against a bare consumer that makes the core learners' pair updates in Go maps")
	c.fs.Parse(args)
	if c.template == "" {
		return fmt.Errorf("--template is required")
	}
	rec, closeRec, err := abab.NewRecorder(c.jsonOut, "ingest bus")
	if err != nil {
		return err
	}
	defer closeRec()
	fmt.Printf("bus: serve (embedded server, file storage, default flush, default models) consuming a pre-filled stream of %d events vs the bare consumer\n", c.events)
	runs := 0
	serveRun := func(r int) (float64, error) {
		runs++
		s, done, err := c.serveCopy(fmt.Sprintf("bus-a-%d", runs))
		if err != nil {
			return 0, err
		}
		defer done()
		if runs == 1 && *profile != "" {
			go func() {
				time.Sleep(time.Second)
				if err := s.Profile(context.Background(), 5*time.Second, *profile); err != nil {
					fmt.Fprintln(os.Stderr, "profile:", err)
				}
			}()
		}
		p, err := s.WaitApplied(uint64(c.events), 20*time.Millisecond, 15*time.Minute)
		if err != nil {
			return 0, err
		}
		fmt.Fprintf(os.Stderr, "    serve: first applied %s after start, all %d after %s\n", p.First.Sub(s.Started).Round(time.Millisecond), p.N, p.Last.Sub(s.Started).Round(time.Millisecond))
		if m, err := s.Metrics("waymark_flush", "waymark_bus_consumer_recreations", "waymark_bus_redelivered"); err == nil {
			fmt.Printf("  round %d serve metrics: %s\n", r+1, flushSummary(m))
		}
		return p.Rate(), nil
	}
	// bareRun is the bare consumer on a copy of the same stream; with
	// sameWork it also makes the core learners' pair updates in Go maps,
	// with no store.
	bareRun := func(sameWork bool) func(int) (float64, error) {
		return func(r int) (float64, error) {
			dir, err := c.fromTemplate(fmt.Sprintf("bus-b-%d-%v", r, sameWork))
			defer os.RemoveAll(dir)
			if err != nil {
				return 0, err
			}
			args := []string{"--dir", filepath.Join(dir, "nats"), "--events", fmt.Sprint(c.events)}
			if sameWork {
				args = append(args, "--same-work")
			}
			ch, err := startChild(self(), args...)
			if err != nil {
				return 0, err
			}
			res, err := ch.result()
			if err != nil {
				return 0, err
			}
			if res.Bad > 0 {
				return 0, fmt.Errorf("%d events did not decode", res.Bad)
			}
			return res.Rate, nil
		}
	}
	pair, err := abab.Run("ingest through the bus, pre-filled: serve (A) vs bare decode+ack consumer (B)", "events/s", c.rounds, serveRun,
		bareRun(false))
	if err != nil {
		return err
	}
	pair.Target = 0.6
	rec.Pair(os.Stdout, pair)
	if !*sameWork {
		return nil
	}
	same, err := abab.Run("ingest through the bus, pre-filled: serve (A) vs bare consumer making the same pair updates in Go maps (B)", "events/s", c.rounds, serveRun, bareRun(true))
	if err != nil {
		return err
	}
	rec.Pair(os.Stdout, same)
	return nil
}

// ---- live ----

func runLive(args []string) error {
	c := newCommon("live")
	c.fs.Parse(args)
	rec, closeRec, err := abab.NewRecorder(c.jsonOut, "ingest live")
	if err != nil {
		return err
	}
	defer closeRec()
	ctx := context.Background()
	pubRates := map[string][]float64{}
	pubTo := func(url string, side string) (chan error, error) {
		bo := stream.DefaultBusOptions()
		bo.URL, bo.Name = url, "bench-publisher"
		bo.PublishWindow = 16384
		bus, err := stream.Connect(ctx, bo)
		if err != nil {
			return nil, err
		}
		errc := make(chan error, 1)
		go func() {
			defer bus.Close()
			gen := synth.NewGen(synth.Options{Items: c.items, Concurrent: 1000, Start: liveStart})
			start := time.Now()
			_, err := publish(ctx, bus, gen, c.events, 0, nil, nil)
			pubRates[side] = append(pubRates[side], float64(c.events)/time.Since(start).Seconds())
			errc <- err
		}()
		return errc, nil
	}
	fmt.Printf("live: %d events published as fast as acknowledged while serve / the bare consumer consume them\n", c.events)
	pair, err := abab.Run("ingest through the bus, live publishing: serve (A) vs bare decode+ack consumer (B)", "events/s", c.rounds,
		func(r int) (float64, error) {
			dir := filepath.Join(c.work, fmt.Sprintf("live-a-%d", r))
			defer os.RemoveAll(dir)
			s, err := c.start(dir)
			if err != nil {
				return 0, err
			}
			defer s.Stop(time.Minute)
			if err := s.WaitHealthy(time.Minute); err != nil {
				return 0, err
			}
			errc, err := pubTo(s.NATS, "A")
			if err != nil {
				return 0, err
			}
			p, err := s.WaitApplied(uint64(c.events), 20*time.Millisecond, 15*time.Minute)
			if perr := <-errc; perr != nil {
				return 0, perr
			}
			if err != nil {
				return 0, err
			}
			return p.Rate(), nil
		},
		func(r int) (float64, error) {
			dir := filepath.Join(c.work, fmt.Sprintf("live-b-%d", r))
			defer os.RemoveAll(dir)
			ch, err := startChild(self(), "--dir", dir, "--events", fmt.Sprint(c.events))
			if err != nil {
				return 0, err
			}
			errc, err := pubTo(ch.ready.URL, "B")
			if err != nil {
				return 0, err
			}
			res, err := ch.result()
			if perr := <-errc; perr != nil {
				return 0, perr
			}
			if err != nil {
				return 0, err
			}
			return res.Rate, nil
		})
	if err != nil {
		return err
	}
	pair.Target = 0.6
	rec.Pair(os.Stdout, pair)
	fmt.Printf("  publisher rate: with serve %s events/s, with the bare consumer %s events/s (medians)\n", abab.Fmt(abab.Median(pubRates["A"])), abab.Fmt(abab.Median(pubRates["B"])))
	rec.Record("publisher rates", pubRates)
	return nil
}

// ---- restart ----

func runRestart(args []string) error {
	c := newCommon("restart")
	c.fs.Parse(args)
	if c.template == "" {
		return fmt.Errorf("--template is required")
	}
	rec, closeRec, err := abab.NewRecorder(c.jsonOut, "ingest restart")
	if err != nil {
		return err
	}
	defer closeRec()
	dir, err := c.fromTemplate("restart")
	defer os.RemoveAll(dir)
	if err != nil {
		return err
	}
	s, err := c.start(dir)
	if err != nil {
		return err
	}
	p, err := s.WaitApplied(uint64(c.events), 200*time.Millisecond, 60*time.Minute)
	if err != nil {
		s.Stop(time.Minute)
		return err
	}
	fmt.Printf("restart: serve learned %d events from the pre-filled stream at %s events/s (%s from start)\n", c.events, abab.Fmt(p.Rate()), p.Last.Sub(s.Started).Round(time.Second))
	rec.Record("learn before restart", map[string]any{"events": c.events, "events_per_s": p.Rate()})
	stopStart := time.Now()
	if err := s.Stop(5 * time.Minute); err != nil {
		return err
	}
	fmt.Printf("  shutdown (final flush) took %s\n", time.Since(stopStart).Round(time.Millisecond))
	du, _ := exec.Command("du", "-sh", filepath.Join(dir, "store"), filepath.Join(dir, "nats")).Output()
	fmt.Printf("  sizes: %s", strings.ReplaceAll(string(du), "\n", "; "))
	fmt.Println()
	pair, err := abab.Run("restart after learning: serve start-to-ready (A) vs bare embedded server start on the same stream (B)", "s", c.rounds,
		func(r int) (float64, error) {
			s, err := c.start(dir)
			if err != nil {
				return 0, err
			}
			d, err := s.WaitReady(5 * time.Minute)
			if serr := s.Stop(5 * time.Minute); err == nil {
				err = serr
			}
			return d.Seconds(), err
		},
		func(r int) (float64, error) {
			ch, err := startChild(self(), "--dir", filepath.Join(dir, "nats"), "--start-only")
			if err != nil {
				return 0, err
			}
			ch.cmd.Wait()
			return ch.readyIn.Seconds(), nil
		})
	if err != nil {
		return err
	}
	rec.Pair(os.Stdout, pair)
	fmt.Printf("  serve start-to-ready median %.2f s; target <= 5 s: %s\n", pair.MedianA(), abab.Verdict(pair.MedianA() <= 5))
	rec.Record("restart target", map[string]any{"median_s": pair.MedianA(), "target_s": 5, "met": pair.MedianA() <= 5})
	return nil
}

// ---- freshness ----

func runFresh(args []string) error {
	c := newCommon("fresh")
	rate := c.fs.Float64("rate", 100_000, "background ingest `rate`, events/s")
	probes := c.fs.Int("probes", 30, "probes per round")
	limit := c.fs.Duration("limit", 10*time.Second, "give a probe up after this long (it counts as this long)")
	every := c.fs.Duration("every", 300*time.Millisecond, "pause between probes")
	// Polling is the probe's own load on serve: every answer costs serve
	// about 100 µs of CPU, so polling each 0.5 ms took a fifth of a core
	// from the consumer under test. 5 ms adds at most 5 ms to a figure
	// whose target is 1 s.
	poll := c.fs.Duration("poll", 5*time.Millisecond, "pause between a probe's queries")
	c.fs.Parse(args)
	if c.template == "" {
		return fmt.Errorf("--template is required")
	}
	rec, closeRec, err := abab.NewRecorder(c.jsonOut, "ingest fresh")
	if err != nil {
		return err
	}
	defer closeRec()
	ctx := context.Background()
	var allA, allB []time.Duration
	censored := 0
	// lastTS is the event time of the newest background event, so probes
	// are stamped at the stream's present: a probe behind the watermark
	// would have its session expired between its two clicks.
	var lastTS atomic.Int64
	lastTS.Store(liveStart)
	var lags []uint64
	achieved := map[string][]float64{}
	// background publishes at rate until stop is closed and reports the
	// rate it achieved.
	background := func(url, side string, stop chan struct{}) (chan error, *stream.Bus, error) {
		bo := stream.DefaultBusOptions()
		bo.URL, bo.Name = url, "bench-background"
		bus, err := stream.Connect(ctx, bo)
		if err != nil {
			return nil, nil, err
		}
		errc := make(chan error, 1)
		go func() {
			gen := synth.NewGen(synth.Options{Items: c.items, Concurrent: 1000, Start: liveStart, SessionPrefix: "live"})
			start := time.Now()
			var n int
			for {
				select {
				case <-stop:
					achieved[side] = append(achieved[side], float64(n)/time.Since(start).Seconds())
					errc <- nil
					return
				default:
				}
				// A tenth of a second's worth at a time, paced inside.
				if _, err := publish(ctx, bus, gen, int(*rate)/10, *rate, stop, &lastTS); err != nil {
					errc <- err
					return
				}
				n += int(*rate) / 10
			}
		}()
		return errc, bus, nil
	}
	probe := func(bus *stream.Bus, k int, wait func(item string) error) (time.Duration, error) {
		ts := lastTS.Load() + 1
		a := stream.Event{Session: fmt.Sprintf("probe-%d", k), Item: fmt.Sprintf("fresh-%d-a", k), TS: ts}
		b := stream.Event{Session: a.Session, Item: fmt.Sprintf("fresh-%d-b", k), TS: ts + 1}
		if err := bus.PublishEvents(ctx, []stream.Event{a}); err != nil {
			return 0, err
		}
		t0 := time.Now()
		if err := bus.PublishEvents(ctx, []stream.Event{b}); err != nil {
			return 0, err
		}
		if err := wait(b.Item); err != nil {
			if errors.Is(err, errLate) {
				censored++
				return *limit, nil // counted as the limit: the true value is larger
			}
			return 0, err
		}
		return time.Since(t0), nil
	}
	fmt.Printf("fresh: %d probes per round at %s events/s of background ingest; a probe publishes a new item's first click and queries every %s until an answer holds it\n", *probes, abab.Fmt(*rate), *poll)
	pair, err := abab.Run("freshness: serve, click published → item in a /v1/next answer (A) vs bare consumer receipt (B), median per round", "ms", c.rounds,
		func(r int) (float64, error) {
			s, done, err := c.serveCopy(fmt.Sprintf("fresh-a-%d", r))
			if err != nil {
				return 0, err
			}
			defer done()
			if _, err := s.WaitApplied(uint64(c.events), 100*time.Millisecond, 15*time.Minute); err != nil {
				return 0, err
			}
			stop := make(chan struct{})
			errc, bus, err := background(s.NATS, "A", stop)
			if err != nil {
				return 0, err
			}
			defer bus.Close()
			time.Sleep(time.Second) // reach the steady rate
			var ds []time.Duration
			for k := range *probes {
				d, err := probe(bus, r*1000+k, func(item string) error {
					body := []byte(fmt.Sprintf(`{"items":[%q],"k":10}`, strings.TrimSuffix(item, "b")+"a"))
					deadline := time.Now().Add(*limit)
					for time.Now().Before(deadline) {
						resp, err := s.Post("/v1/next", body)
						if err != nil {
							return err
						}
						if strings.Contains(string(resp), `"`+item+`"`) {
							return nil
						}
						time.Sleep(*poll)
					}
					return errLate
				})
				if err != nil {
					close(stop)
					return 0, err
				}
				ds = append(ds, d)
				time.Sleep(*every)
			}
			if st, err := s.Stats(); err == nil {
				lags = append(lags, st.Lag)
			}
			close(stop)
			if err := <-errc; err != nil {
				return 0, err
			}
			allA = append(allA, ds...)
			return abab.Summarize(ds).P50 / 1000, nil
		},
		func(r int) (float64, error) {
			dir := filepath.Join(c.work, fmt.Sprintf("fresh-b-%d", r))
			defer os.RemoveAll(dir)
			ch, err := startChild(self(), "--dir", dir, "--events", "0", "--seen", "bench.seen")
			if err != nil {
				return 0, err
			}
			nc, err := nats.Connect(ch.ready.URL)
			if err != nil {
				return 0, err
			}
			defer nc.Close()
			seen := make(chan string, 64)
			sub, err := nc.Subscribe("bench.seen", func(m *nats.Msg) { seen <- string(m.Data) })
			if err != nil {
				return 0, err
			}
			defer sub.Unsubscribe()
			nc.Flush()
			stop := make(chan struct{})
			errc, bus, err := background(ch.ready.URL, "B", stop)
			if err != nil {
				return 0, err
			}
			defer bus.Close()
			time.Sleep(time.Second)
			var ds []time.Duration
			for k := range *probes {
				d, err := probe(bus, r*1000+k, func(item string) error {
					timeout := time.After(*limit)
					for {
						select {
						case got := <-seen:
							if got == item {
								return nil
							}
						case <-timeout:
							return errLate
						}
					}
				})
				if err != nil {
					close(stop)
					return 0, err
				}
				ds = append(ds, d)
				time.Sleep(*every)
			}
			close(stop)
			if err := <-errc; err != nil {
				return 0, err
			}
			if _, err := ch.stop(); err != nil {
				return 0, err
			}
			allB = append(allB, ds...)
			return abab.Summarize(ds).P50 / 1000, nil
		})
	if err != nil {
		return err
	}
	rec.Pair(os.Stdout, pair)
	la, lb := abab.Summarize(allA), abab.Summarize(allB)
	fmt.Printf("  serve, all probes: %s\n  bare, all probes: %s\n", la, lb)
	fmt.Printf("  background rate achieved: with serve %s events/s, with bare %s events/s (medians)\n", abab.Fmt(abab.Median(achieved["A"])), abab.Fmt(abab.Median(achieved["B"])))
	fmt.Printf("  probes given up after %s (counted as %s): %d; serve consumer lag at the end of each round: %v messages\n", *limit, *limit, censored, lags)
	fmt.Printf("  target: serve p99 <= 1 s at %s events/s: %s (p99 %.1f ms)\n", abab.Fmt(*rate), abab.Verdict(la.P99 <= 1e6), la.P99/1000)
	rec.Record("freshness serve", la)
	rec.Record("freshness bare", lb)
	rec.Record("freshness background rate", achieved)
	return nil
}

// flushSummary condenses the flush and consumer metrics of one run.
func flushSummary(m map[string]float64) string {
	var parts []string
	get := func(suffix string) (float64, bool) {
		for k, v := range m {
			if strings.HasSuffix(k, suffix) {
				return v, true
			}
		}
		return 0, false
	}
	if n, ok := get("flush_bytes_count"); ok && n > 0 {
		sum, _ := get("flush_bytes_sum")
		parts = append(parts, fmt.Sprintf("%.0f flushes, %.1f MB per flush, %.0f MB in all", n, sum/n/(1<<20), sum/(1<<20)))
	}
	if n, ok := get("flush_seconds_count"); ok && n > 0 {
		sum, _ := get("flush_seconds_sum")
		parts = append(parts, fmt.Sprintf("%.2f s per flush (encode+commit)", sum/n))
	}
	for k, v := range m {
		if strings.Contains(k, "recreations") || strings.Contains(k, "redelivered") {
			parts = append(parts, fmt.Sprintf("%s %.0f", k, v))
		}
	}
	sort.Strings(parts[min(len(parts), 2):])
	return strings.Join(parts, "; ")
}

// errLate says a probe's item did not show up within the limit.
var errLate = errors.New("not seen within the limit")

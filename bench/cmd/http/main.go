// Command http measures next-item queries over HTTP (issue 6, figure 4):
// wrk (Debian's) drives POST /v1/next of a `waymark serve` that learned a
// pre-filled stream, with varied sessions (bench/wrk/next.lua), against a
// bare Go handler that reads the request and answers a body of the same
// size, A B A B. Then it paces wrk to half of waymark's peak rate and
// reports the latency distribution there, for both.
//
//	http run --template D --waymark ./waymark --wrk-script bench/wrk/next.lua
//	http bare --addr 127.0.0.1:P --size N        (the bare handler, started by run)
package main

import (
	"bufio"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"net/http"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"syscall"
	"time"

	"waymark/bench/abab"
	"waymark/bench/svc"
	"waymark/bench/synth"
)

func main() {
	if len(os.Args) < 2 {
		fmt.Fprintln(os.Stderr, "usage: http run|bare [flags]")
		os.Exit(2)
	}
	var err error
	switch os.Args[1] {
	case "run":
		err = run(os.Args[2:])
	case "bare":
		err = bareServer(os.Args[2:])
	default:
		err = fmt.Errorf("unknown command %q", os.Args[1])
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "http:", err)
		os.Exit(1)
	}
}

// bareServer answers every request with a fixed JSON body of size bytes
// after reading the request body: the least an HTTP JSON endpoint does.
func bareServer(args []string) error {
	fs := flag.NewFlagSet("bare", flag.ExitOnError)
	addr := fs.String("addr", "127.0.0.1:0", "listen `address`")
	size := fs.Int("size", 600, "response body `bytes`")
	fs.Parse(args)
	// {"items":[],"pad":"xx…x"}\n: 22 bytes of frame, padded to size.
	body := []byte(`{"items":[],"pad":"` + strings.Repeat("x", max(0, *size-22)) + `"}` + "\n")
	srv := &http.Server{Addr: *addr, ReadHeaderTimeout: 10 * time.Second, Handler: http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		io.Copy(io.Discard, r.Body)
		w.Header().Set("Content-Type", "application/json")
		w.Write(body)
	})}
	ctx, cancel := signal.NotifyContext(context.Background(), syscall.SIGTERM, os.Interrupt)
	defer cancel()
	go func() {
		<-ctx.Done()
		srv.Shutdown(context.Background())
	}()
	if err := srv.ListenAndServe(); err != http.ErrServerClosed {
		return err
	}
	return nil
}

type wrkResult struct {
	Requests            int
	DurationUS          int
	Errors              int
	P50, P90, P99, P999 float64 // µs
	Max, Mean           float64
	Rate                float64 // requests/s
}

var wrkLine = regexp.MustCompile(`WRK_RESULT requests=(\d+) duration_us=(\d+) errors=(\d+) p50=(\d+) p90=(\d+) p99=(\d+) p999=(\d+) max=(\d+) mean=([\d.]+)`)

func runWrk(script, bodies, url string, threads, conns int, d time.Duration, delayMS int) (wrkResult, error) {
	var r wrkResult
	cmd := exec.Command("wrk", "-t", strconv.Itoa(threads), "-c", strconv.Itoa(conns), "-d", fmt.Sprintf("%ds", int(d.Seconds())), "--timeout", "5s", "-s", script, url)
	cmd.Env = append(os.Environ(), "WRK_BODIES="+bodies, "WRK_DELAY_MS="+strconv.Itoa(delayMS))
	out, err := cmd.CombinedOutput()
	if err != nil {
		return r, fmt.Errorf("wrk: %v: %s", err, out)
	}
	m := wrkLine.FindStringSubmatch(string(out))
	if m == nil {
		return r, fmt.Errorf("wrk printed no WRK_RESULT: %s", out)
	}
	f := func(i int) float64 { v, _ := strconv.ParseFloat(m[i], 64); return v }
	r = wrkResult{Requests: int(f(1)), DurationUS: int(f(2)), Errors: int(f(3)), P50: f(4), P90: f(5), P99: f(6), P999: f(7), Max: f(8), Mean: f(9)}
	r.Rate = float64(r.Requests) / (float64(r.DurationUS) / 1e6)
	if r.Errors > 0 {
		return r, fmt.Errorf("wrk: %d errors (non-2xx or socket) of %d requests", r.Errors, r.Requests)
	}
	return r, nil
}

func run(args []string) error {
	fs := flag.NewFlagSet("run", flag.ExitOnError)
	waymark := fs.String("waymark", "./waymark", "the waymark `binary`")
	template := fs.String("template", "", "pre-filled stream template `folder` (from ingest fill)")
	events := fs.Int("events", 1_000_000, "events in the template")
	items := fs.Int("items", 100_000, "catalogue size of the template")
	work := fs.String("work", os.TempDir(), "scratch `folder`")
	script := fs.String("wrk-script", "bench/wrk/next.lua", "wrk Lua `script`")
	threads := fs.Int("threads", 2, "wrk threads")
	conns := fs.Int("conns", 32, "wrk connections for the peak runs")
	dur := fs.Duration("duration", 10*time.Second, "wrk run length")
	rounds := fs.Int("rounds", 3, "A B rounds")
	k := fs.Int("k", 10, "k of every request")
	jsonOut := fs.String("json", "", "append figures as JSON lines to `file`")
	profile := fs.String("profile", "", "save a CPU profile of serve during the first peak run to `file`")
	serveArgs := fs.String("serve-args", "", "extra serve flags, space-separated (e.g. \"--explore-every 0\")")
	fs.Parse(args)
	if *template == "" {
		return fmt.Errorf("--template is required")
	}
	if _, err := exec.LookPath("wrk"); err != nil {
		return fmt.Errorf("wrk not found (Debian: apt-get install -y wrk)")
	}
	rec, closeRec, err := abab.NewRecorder(*jsonOut, "http")
	if err != nil {
		return err
	}
	defer closeRec()

	dir := filepath.Join(*work, "http-serve")
	defer os.RemoveAll(dir)
	if err := svc.CopyDir(*template, dir); err != nil {
		return err
	}
	s, err := svc.Start(*waymark, dir, strings.Fields(*serveArgs)...)
	if err != nil {
		return err
	}
	defer s.Stop(time.Minute)
	if _, err := s.WaitApplied(uint64(*events), 100*time.Millisecond, 15*time.Minute); err != nil {
		return err
	}
	// Request bodies: sessions of 1 to 20 clicks from the template's
	// generator shape, another seed.
	bodies := filepath.Join(*work, "http-bodies.txt")
	defer os.Remove(bodies)
	size, err := writeBodies(bodies, *items, *k, s)
	if err != nil {
		return err
	}
	fmt.Printf("http: serve %s learned %d events; mean /v1/next response body %d bytes; bare handler answers %d bytes\n", *serveArgs, *events, size, size)
	port, err := svc.FreePort()
	if err != nil {
		return err
	}
	exe, _ := os.Executable()
	bareCmd := exec.Command(exe, "bare", "--addr", fmt.Sprintf("127.0.0.1:%d", port), "--size", strconv.Itoa(size))
	bareCmd.Stderr = os.Stderr
	if err := bareCmd.Start(); err != nil {
		return err
	}
	defer func() { bareCmd.Process.Signal(syscall.SIGTERM); bareCmd.Wait() }()
	bareURL := fmt.Sprintf("http://127.0.0.1:%d", port)
	for i := 0; ; i++ {
		if resp, err := http.Get(bareURL); err == nil {
			resp.Body.Close()
			break
		}
		if i > 500 {
			return fmt.Errorf("bare handler did not start")
		}
		time.Sleep(10 * time.Millisecond)
	}
	// Warm-up, both.
	runWrk(*script, bodies, s.HTTP, *threads, *conns, 2*time.Second, 0)
	runWrk(*script, bodies, bareURL, *threads, *conns, 2*time.Second, 0)

	var peakA, peakB []wrkResult
	pair, err := abab.Run(fmt.Sprintf("HTTP POST /v1/next peak throughput, wrk -t%d -c%d -d%s: serve (A) vs bare handler (B)", *threads, *conns, *dur), "req/s", *rounds,
		func(round int) (float64, error) {
			if round == 0 && *profile != "" {
				go func() {
					time.Sleep(time.Second)
					if err := s.Profile(context.Background(), *dur-2*time.Second, *profile); err != nil {
						fmt.Fprintln(os.Stderr, "profile:", err)
					}
				}()
			}
			r, err := runWrk(*script, bodies, s.HTTP, *threads, *conns, *dur, 0)
			peakA = append(peakA, r)
			return r.Rate, err
		},
		func(int) (float64, error) {
			r, err := runWrk(*script, bodies, bareURL, *threads, *conns, *dur, 0)
			peakB = append(peakB, r)
			return r.Rate, err
		})
	if err != nil {
		return err
	}
	pair.Target = 0.5
	rec.Pair(os.Stdout, pair)
	for i := range peakA {
		fmt.Printf("  round %d at peak: serve p50 %.0fµs p99 %.0fµs; bare p50 %.0fµs p99 %.0fµs\n", i+1, peakA[i].P50, peakA[i].P99, peakB[i].P50, peakB[i].P99)
	}
	rec.Record("peak rounds", map[string]any{"serve": peakA, "bare": peakB})

	// Half of serve's peak: pace every connection with a 2 ms pause after
	// each response and pick the connection count that gives the rate,
	// correcting once or twice from what wrk achieved.
	half := pair.MedianA() / 2
	const delayMS = 2
	pick := func(url string) (int, error) {
		c := max(1, int(math.Round(half*0.0022)))
		for range 3 {
			r, err := runWrk(*script, bodies, url, *threads, c, 4*time.Second, delayMS)
			if err != nil {
				return 0, err
			}
			next := max(1, int(math.Round(float64(c)*half/r.Rate)))
			if math.Abs(r.Rate-half)/half < 0.05 || next == c {
				break
			}
			c = next
		}
		return c, nil
	}
	cA, err := pick(s.HTTP)
	if err != nil {
		return err
	}
	cB, err := pick(bareURL)
	if err != nil {
		return err
	}
	var halfA, halfB []wrkResult
	hp, err := abab.Run(fmt.Sprintf("HTTP POST /v1/next p99 at half of serve's peak (%s req/s; %d and %d paced connections): serve (A) vs bare handler (B)", abab.Fmt(half), cA, cB), "µs", *rounds,
		func(int) (float64, error) {
			r, err := runWrk(*script, bodies, s.HTTP, *threads, cA, *dur, delayMS)
			halfA = append(halfA, r)
			return r.P99, err
		},
		func(int) (float64, error) {
			r, err := runWrk(*script, bodies, bareURL, *threads, cB, *dur, delayMS)
			halfB = append(halfB, r)
			return r.P99, err
		})
	if err != nil {
		return err
	}
	rec.Pair(os.Stdout, hp)
	for i := range halfA {
		fmt.Printf("  round %d at half peak: serve %s req/s p50 %.0fµs p90 %.0fµs p99 %.0fµs p99.9 %.0fµs; bare %s req/s p50 %.0fµs p99 %.0fµs\n", i+1,
			abab.Fmt(halfA[i].Rate), halfA[i].P50, halfA[i].P90, halfA[i].P99, halfA[i].P999, abab.Fmt(halfB[i].Rate), halfB[i].P50, halfB[i].P99)
	}
	fmt.Printf("  target: serve p99 <= 2 ms at half of peak: %s (median p99 %.0fµs)\n", abab.Verdict(hp.MedianA() <= 2000), hp.MedianA())
	rec.Record("half peak rounds", map[string]any{"serve": halfA, "bare": halfB, "target_us": 2000, "met": hp.MedianA() <= 2000})
	return nil
}

// writeBodies writes 2000 request bodies and returns the mean size of
// serve's answers to the first 200.
func writeBodies(path string, items, k int, s *svc.Serve) (int, error) {
	f, err := os.Create(path)
	if err != nil {
		return 0, err
	}
	w := bufio.NewWriter(f)
	g := synth.NewGen(synth.Options{Items: items, Seed: 4242, SessionPrefix: "q"})
	total, n := 0, 0
	for i := range 2000 {
		L := 1 + i%20
		sess := make([]string, L)
		for j := range sess {
			sess[j] = g.Next().Item
		}
		b, _ := json.Marshal(map[string]any{"items": sess, "k": k})
		w.Write(b)
		w.WriteByte('\n')
		if i < 200 {
			resp, err := s.Post("/v1/next", b)
			if err != nil {
				return 0, err
			}
			total += len(resp)
			n++
		}
	}
	if err := w.Flush(); err != nil {
		return 0, err
	}
	return total / n, f.Close()
}

// Command learn measures learning in process (issue 6, figure 2): events/s
// through the session tracker and every core learner, with no bus and no
// disk, against the bare pair counter on the same events, A B A B. A second
// pair sets it against the same pair updates hand-rolled in Go maps
// (bare.SameWork), which shows what the learning job itself costs on the
// machine. It also runs the pipeline with the session-kNN index, and each
// learner alone so a profile can be read per model.
//
//	go run ./bench/cmd/learn --events 1000000 --rounds 5
package main

import (
	"flag"
	"fmt"
	"os"
	"runtime"
	"runtime/pprof"
	"strings"
	"time"

	"waymark/bench/abab"
	"waymark/bench/bare"
	"waymark/bench/synth"
	"waymark/session"
)

func main() {
	events := flag.Int("events", 1_000_000, "events per run")
	items := flag.Int("items", 100_000, "catalogue size")
	rounds := flag.Int("rounds", 5, "A B rounds")
	procs := flag.Int("procs", 1, "GOMAXPROCS (1: one core, the garbage collector included)")
	breakdown := flag.Bool("breakdown", true, "also time each learner alone (one run each)")
	cpu := flag.String("cpuprofile", "", "write a CPU profile of the core-pipeline runs to `file`")
	out := flag.String("json", "", "append figures as JSON lines to `file`")
	only := flag.String("profile-models", "", "only profile a pipeline of these comma-separated `specs` (with --cpuprofile) and exit")
	flag.Parse()
	runtime.GOMAXPROCS(*procs)
	rec, closeRec, err := abab.NewRecorder(*out, "learn")
	if err != nil {
		fail(err)
	}
	defer closeRec()

	evs := synth.Generate(synth.Options{Events: *events, Items: *items, Concurrent: 1000})
	fmt.Printf("learn: %d events over %d items, 1000 concurrent sessions, GOMAXPROCS=%d\n", len(evs), *items, *procs)
	bareRun := func(int) (float64, error) {
		c := bare.NewPairCounter()
		start := time.Now()
		for i := range evs {
			c.Add(&evs[i])
		}
		return rate(len(evs), start), nil
	}
	// The same learning job hand-rolled: every pair update the core
	// learners make, in Go maps, and nothing else.
	sameRun := func(int) (float64, error) {
		c := bare.NewSameWork()
		runtime.GC()
		start := time.Now()
		for i := range evs {
			c.Add(&evs[i])
		}
		return rate(len(evs), start), nil
	}
	pipeRun := func(models ...string) func(int) (float64, error) {
		return func(int) (float64, error) {
			o := session.DefaultPipelineOptions()
			if len(models) > 0 {
				o.Models = models
			}
			p, err := session.NewPipeline(o)
			if err != nil {
				return 0, err
			}
			runtime.GC()
			start := time.Now()
			for i := range evs {
				p.Apply(&evs[i])
			}
			return rate(len(evs), start), nil
		}
	}
	if *cpu != "" {
		f, err := os.Create(*cpu)
		if err != nil {
			fail(err)
		}
		pprof.StartCPUProfile(f)
	}
	if *only != "" {
		var r float64
		for range *rounds {
			if r, err = pipeRun(strings.Split(*only, ",")...)(0); err != nil {
				fail(err)
			}
			fmt.Printf("  %s: %s events/s\n", *only, abab.Fmt(r))
		}
		pprof.StopCPUProfile()
		return
	}
	core, err := abab.Run("learn: tracker + core learners (A) vs bare pair count (B)", "events/s", *rounds, pipeRun(), bareRun)
	if err != nil {
		fail(err)
	}
	if *cpu != "" {
		pprof.StopCPUProfile()
	}
	rec.Pair(os.Stdout, core)
	fmt.Printf("  core learners: median %s events/s; target >= 1M events/s on one core: %s\n", abab.Fmt(core.MedianA()), abab.Verdict(core.MedianA() >= 1e6))
	rec.Record("core events/s", map[string]any{"median": core.MedianA(), "target": 1e6, "met": core.MedianA() >= 1e6})

	same, err := abab.Run("learn: tracker + core learners (A) vs the same pair updates in Go maps (B)", "events/s", *rounds, pipeRun(), sameRun)
	if err != nil {
		fail(err)
	}
	rec.Pair(os.Stdout, same)
	reach := "no"
	if same.MedianB() >= 1e6 {
		reach = "yes"
	}
	fmt.Printf("  the same updates in Go maps: median %s events/s; do they reach 1M events/s on one core? %s\n", abab.Fmt(same.MedianB()), reach)
	rec.Record("same-work bare events/s", map[string]any{"median": same.MedianB(), "ratio": same.Ratio()})

	knn, err := abab.Run("learn: core learners + session-kNN index (A) vs bare pair count (B)", "events/s", *rounds, pipeRun("blend", "vsknn"), bareRun)
	if err != nil {
		fail(err)
	}
	rec.Pair(os.Stdout, knn)

	if *breakdown {
		fmt.Println("each learner alone (plus the popularity and catalogue learners every pipeline has), one run each:")
		for _, m := range []string{"pop", "markov", "sr", "iknn", "content", "vsknn"} {
			r, err := pipeRun(m)(0)
			if err != nil {
				fail(err)
			}
			b, _ := bareRun(0)
			fmt.Printf("  %-8s %s events/s (bare %s, ratio %.3f)\n", m, abab.Fmt(r), abab.Fmt(b), r/b)
			rec.Record("alone "+m, map[string]any{"events_per_s": r, "bare": b})
		}
	}
}

func rate(n int, start time.Time) float64 { return float64(n) / time.Since(start).Seconds() }

func fail(err error) {
	fmt.Fprintln(os.Stderr, "learn:", err)
	os.Exit(1)
}

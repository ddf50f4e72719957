// Command replay measures offline replay (issue 6, figure 5): `waymark
// replay` running the prequential evaluation of sr with K=20 over a
// 1M-event JSON-lines file, against the bare decode of the same file (read
// lines, decode each with the project's decoder, nothing else), each as
// its own process, A B A B. A third pass times the learning-only replay
// (a temporal split after the last event: everything learned, nothing
// asked), and the in-process learning of the same events by sr alone. A
// second pair sets the prequential replay against the same evaluation
// written plainly (bare.PrequentialSR: decode, rank the last item's rules
// in a Go map, learn 1/gap rules), which shows what the job itself costs.
//
//	replay run --waymark ./waymark --events 1000000
//	replay decode FILE          (the bare decode, started by run)
//	replay prequential FILE     (the plain evaluation, started by run)
package main

import (
	"bufio"
	"context"
	"flag"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"runtime/pprof"
	"time"

	"waymark/bench/abab"
	"waymark/bench/bare"
	"waymark/bench/synth"
	"waymark/models/eval"
	"waymark/session"
	"waymark/stream"
)

func main() {
	if len(os.Args) < 2 {
		fmt.Fprintln(os.Stderr, "usage: replay run|decode [flags]")
		os.Exit(2)
	}
	var err error
	switch os.Args[1] {
	case "run":
		err = run(os.Args[2:])
	case "profile":
		err = profile(os.Args[2:])
	case "prequential":
		if len(os.Args) != 3 {
			err = fmt.Errorf("usage: replay prequential FILE")
			break
		}
		var p *bare.PrequentialSR
		var n int
		if p, n, err = bare.PrequentialFile(os.Args[2], 20); err == nil {
			fmt.Printf("%d events, %d asked, HitRate@20 %.4f, MRR@20 %.4f\n", n, p.Asked, p.HitRate(), p.MRR())
		}
	case "decode":
		if len(os.Args) != 3 {
			err = fmt.Errorf("usage: replay decode FILE")
			break
		}
		var n int
		n, err = bare.DecodeFile(os.Args[2])
		fmt.Println(n)
	default:
		err = fmt.Errorf("unknown command %q", os.Args[1])
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "replay:", err)
		os.Exit(1)
	}
}

func run(args []string) error {
	fs := flag.NewFlagSet("run", flag.ExitOnError)
	waymark := fs.String("waymark", "./waymark", "the waymark `binary`")
	events := fs.Int("events", 1_000_000, "events in the file")
	items := fs.Int("items", 100_000, "catalogue size")
	rounds := fs.Int("rounds", 3, "A B rounds")
	work := fs.String("work", os.TempDir(), "scratch `folder`")
	jsonOut := fs.String("json", "", "append figures as JSON lines to `file`")
	fs.Parse(args)
	rec, closeRec, err := abab.NewRecorder(*jsonOut, "replay")
	if err != nil {
		return err
	}
	defer closeRec()
	path := filepath.Join(*work, "replay-events.jsonl")
	defer os.Remove(path)
	evs := synth.Generate(synth.Options{Events: *events, Items: *items, Concurrent: 1000})
	if err := writeFile(path, evs); err != nil {
		return err
	}
	st, _ := os.Stat(path)
	fmt.Printf("replay: %d events, %d MB of JSON lines (%.0f bytes a line)\n", *events, st.Size()>>20, float64(st.Size())/float64(*events))
	self, _ := os.Executable()
	timed := func(name string, args ...string) func(int) (float64, error) {
		return func(int) (float64, error) {
			start := time.Now()
			out, err := exec.Command(name, args...).CombinedOutput()
			if err != nil {
				return 0, fmt.Errorf("%s: %v: %s", name, err, out)
			}
			return float64(*events) / time.Since(start).Seconds(), nil
		}
	}
	decode := timed(self, "decode", path)
	preq, err := abab.Run("replay: waymark replay --models sr --k 20, prequential (A) vs bare decode of the file (B)", "events/s", *rounds,
		timed(*waymark, "replay", "--models", "sr", "--k", "20", "--quiet", path), decode)
	if err != nil {
		return err
	}
	preq.Target = 0.25
	rec.Pair(os.Stdout, preq)
	same, err := abab.Run("replay: waymark replay --models sr --k 20, prequential (A) vs the same evaluation written plainly in Go maps, bare decode included (B)", "events/s", *rounds,
		timed(*waymark, "replay", "--models", "sr", "--k", "20", "--quiet", path), timed(self, "prequential", path))
	if err != nil {
		return err
	}
	rec.Pair(os.Stdout, same)
	learn, err := abab.Run("replay: learning-only pass, waymark replay --models sr --split-at 2100-01-01 (A) vs bare decode of the file (B)", "events/s", *rounds,
		timed(*waymark, "replay", "--models", "sr", "--k", "20", "--quiet", "--split-at", "2100-01-01T00:00:00Z", path), decode)
	if err != nil {
		return err
	}
	rec.Pair(os.Stdout, learn)
	fmt.Printf("  learning-only replay, whole process: median %s events/s; target >= 1M events/s: %s\n", abab.Fmt(learn.MedianA()), abab.Verdict(learn.MedianA() >= 1e6))
	// The learning pass alone, in process: what the replay spends after
	// reading the file.
	var rates []float64
	for range *rounds {
		o := session.DefaultPipelineOptions()
		o.Models = []string{"sr"}
		p, err := session.NewPipeline(o)
		if err != nil {
			return err
		}
		runtime.GC()
		start := time.Now()
		for i := range evs {
			p.Apply(&evs[i])
		}
		rates = append(rates, float64(len(evs))/time.Since(start).Seconds())
	}
	fmt.Printf("  learning pass in process (tracker + sr + pop + catalogue, decoded events): median %s events/s of %v; target >= 1M events/s: %s\n", abab.Fmt(abab.Median(rates)), fmtAll(rates), abab.Verdict(abab.Median(rates) >= 1e6))
	rec.Record("learning-only", map[string]any{"process_median": learn.MedianA(), "in_process": rates, "in_process_median": abab.Median(rates), "target": 1e6})
	return nil
}

// profile runs the same prequential evaluation in process under the CPU
// profiler: eval.Load then eval.Run with sr and K=20, as `waymark replay
// --models sr --k 20` does.
func profile(args []string) error {
	fs := flag.NewFlagSet("profile", flag.ExitOnError)
	events := fs.Int("events", 1_000_000, "events")
	items := fs.Int("items", 100_000, "catalogue size")
	cpu := fs.String("cpuprofile", "replay.prof", "profile `file`")
	work := fs.String("work", os.TempDir(), "scratch `folder`")
	fs.Parse(args)
	path := filepath.Join(*work, "replay-profile.jsonl")
	defer os.Remove(path)
	evs := synth.Generate(synth.Options{Events: *events, Items: *items, Concurrent: 1000})
	if err := writeFile(path, evs); err != nil {
		return err
	}
	f, err := os.Create(*cpu)
	if err != nil {
		return err
	}
	defer f.Close()
	ctx := context.Background()
	pprof.StartCPUProfile(f)
	defer pprof.StopCPUProfile()
	start := time.Now()
	r, err := stream.OpenFile(path)
	if err != nil {
		return err
	}
	l, err := eval.Load(ctx, []eval.Source{{Name: path, Reader: r}}, eval.LoadOptions{})
	r.Close()
	if err != nil {
		return err
	}
	loaded := time.Since(start)
	o := eval.DefaultOptions()
	o.Models = []string{"sr"}
	o.K = []int{20}
	rep, err := eval.Run(ctx, l, o)
	if err != nil {
		return err
	}
	fmt.Printf("load %s, run %s, %d queries\n", loaded.Round(time.Millisecond), (time.Since(start) - loaded).Round(time.Millisecond), rep.Scoring.Queries)
	return nil
}

func writeFile(path string, evs []stream.Event) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	w := bufio.NewWriterSize(f, 1<<20)
	var buf []byte
	for i := range evs {
		buf = synth.AppendLine(buf[:0], &evs[i], uint64(i))
		buf = append(buf, '\n')
		w.Write(buf)
	}
	if err := w.Flush(); err != nil {
		return err
	}
	return f.Close()
}

func fmtAll(xs []float64) []string {
	out := make([]string, len(xs))
	for i, x := range xs {
		out[i] = abab.Fmt(x)
	}
	return out
}

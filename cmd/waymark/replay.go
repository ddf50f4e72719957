package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
	"time"

	"waymark/models"
	"waymark/models/eval"
	"waymark/stream"
	"waymark/stream/dataset"
)

const replayUsage = `usage: waymark replay [flags] FILE...
       waymark replay [flags] --nats URL --stream NAME [--from SEQ|TIME] [--to SEQ|TIME]

Replay a click log through the same tracker and models serve uses, in event
time, and score next-item recommendations with the session-based metrics.

Sources: event files (JSON lines or CSV with a header, gzip detected), the
open datasets' own files (--format msnbc|eshop, or detected), or a range of a
JetStream stream. Several files are read in the order given and merged by
event time; an event earlier than the one before it in its file is counted
and sorted into place, or refused with --strict-order.

Protocols: prequential (default: ask, then learn, every click), temporal
(--split-at TIME or --test-days N: learn before, test the sessions starting
at or after), kfold (the sequence-prediction protocol: 14-fold
cross-validation over sessions, the last 2 items as the target).

Models: --models takes comma-separated specs, e.g. "sr(window=5),markov";
a parameter may list alternatives with '|': "sr(window=2|5|10)" scores
three models in one pass. A model named alone returns only its own
candidates; blend includes popularity by design.

Preprocessing (defaults drop nothing, as serve learns everything; the
session-based literature uses --min-session-length 2 --min-item-support 5).

Examples:
  waymark replay --models markov,sr,iknn,blend --json out.json clicks.jsonl.gz
  waymark replay --split-at 2026-03-01T00:00:00Z --models "sr(window=2|5|10)" log.csv
  waymark replay --protocol kfold --models markov ../shared/data/msnbc/msnbc990928.seq.gz

flags:
`

type replayFlags struct {
	format, models, ks, target, protocol, exclude          string
	splitAt                                                string
	testDays                                               float64
	learnTest, strict, catalog, timings, quiet, dropUnseen bool
	minLen, minSupport, cold                               int
	window, maxSess, capItem, srWindow                     int
	timeout, halfLife                                      time.Duration
	jsonOut, csvOut, htmlOut                               string
	bus                                                    *busFlags
	streamName, subject, catalogSubject, from, to          string
	folds, kMinLen, kSessions, kTargets, kContext          int
	seed                                                   uint64
}

func runReplay(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	po := eval.DefaultOptions()
	bd := stream.DefaultBusOptions()
	kd := eval.DefaultKFoldOptions()
	var f replayFlags
	fs := flag.NewFlagSet("replay", flag.ContinueOnError)
	fs.StringVar(&f.format, "format", dataset.FormatAuto, "input `format`: "+strings.Join(dataset.Formats(), ", "))
	fs.BoolVar(&f.strict, "strict-order", false, "refuse input whose event times go back instead of sorting it")
	fs.BoolVar(&f.catalog, "catalog", true, "apply the catalogue records the sources carry (stream catalogue subject, dataset item attributes)")
	f.bus = addBusFlags(fs, "", "NATS `URL` to replay a stream range from (instead of files)")
	fs.StringVar(&f.streamName, "stream", bd.Stream, "JetStream stream `name` to replay")
	fs.StringVar(&f.subject, "subject", bd.Subject, "`subject` of click events in the stream")
	fs.StringVar(&f.catalogSubject, "catalog-subject", bd.CatalogSubject, "`subject` of catalogue records in the stream")
	fs.StringVar(&f.from, "from", "", "first stream `sequence` or stored time (RFC 3339) of the range; empty: the first")
	fs.StringVar(&f.to, "to", "", "last stream `sequence` or stored time (RFC 3339) of the range; empty: the last at start")

	fs.StringVar(&f.protocol, "protocol", "", "`protocol`: prequential, temporal, kfold (default prequential, temporal with --split-at or --test-days)")
	fs.StringVar(&f.splitAt, "split-at", "", "temporal split `time` (RFC 3339): learn before, test sessions starting at or after")
	fs.Float64Var(&f.testDays, "test-days", 0, "temporal split this many `days` before the last event")
	fs.BoolVar(&f.learnTest, "learn-during-test", false, "temporal: keep learning after the split (test, then learn)")
	fs.StringVar(&f.target, "target", string(eval.TargetNext), "`target`: next (the next click) or rest (any later click of the session)")
	fs.StringVar(&f.exclude, "exclude", "", "`items` a query may not be answered with: session (as serve) or none (default: session; kfold: none)")
	fs.IntVar(&f.folds, "folds", kd.Folds, "kfold: number of folds")
	fs.IntVar(&f.kMinLen, "kfold-min-length", kd.MinLength, "kfold: shortest session taken, after removing consecutive repeats")
	fs.IntVar(&f.kSessions, "kfold-sessions", kd.MaxSessions, "kfold: sessions taken, in log order (0: all)")
	fs.IntVar(&f.kTargets, "kfold-targets", kd.Targets, "kfold: last items of a session that form the target")
	fs.IntVar(&f.kContext, "kfold-context", kd.Context, "kfold: items before the target that form the query")
	fs.Uint64Var(&f.seed, "seed", kd.Seed, "kfold: shuffle seed")

	fs.StringVar(&f.models, "models", models.DefaultBlendSpec, "model `specs`, comma-separated; alternatives with '|' form a grid")
	fs.StringVar(&f.ks, "k", "1,5,10,20", "cut-offs, comma-separated `list`")
	fs.IntVar(&f.window, "window", po.Pipeline.Tracker.Window, "recent clicks kept per session (serve's default)")
	fs.DurationVar(&f.timeout, "session-timeout", po.Pipeline.Tracker.Timeout, "event-time inactivity that ends a session (serve's default)")
	fs.IntVar(&f.maxSess, "max-sessions", po.Pipeline.Tracker.MaxSessions, "sessions tracked at once (serve's default)")
	fs.DurationVar(&f.halfLife, "half-life", po.Pipeline.HalfLife, "decay half-life of every count, in event time (serve's default)")
	fs.IntVar(&f.capItem, "neighbors-per-item", po.Pipeline.Set.CapPerItem, "neighbour list cap per item and model (serve's default)")
	fs.IntVar(&f.srWindow, "sr-window", po.Pipeline.Set.SRWindow, "Sequential Rules window m when a spec gives none (serve's default)")

	fs.IntVar(&f.minLen, "min-session-length", 1, "drop sessions with fewer clicks (literature: 2)")
	fs.IntVar(&f.minSupport, "min-item-support", 1, "drop items with fewer clicks in training (literature: 5)")
	fs.BoolVar(&f.dropUnseen, "drop-unseen", false, "temporal: drop test clicks on items unseen in training")
	fs.IntVar(&f.cold, "cold-threshold", po.ColdThreshold, "a target is cold with fewer learned clicks than this")

	fs.StringVar(&f.jsonOut, "json", "", "write the report as JSON to `file` (deterministic)")
	fs.StringVar(&f.csvOut, "csv", "", "write one row per model as CSV to `file`")
	fs.StringVar(&f.htmlOut, "html", "", "write a self-contained HTML report to `file`")
	fs.BoolVar(&f.timings, "timings", false, "put query latency (wall time) into the JSON, CSV and HTML too")
	fs.BoolVar(&f.quiet, "quiet", false, "no table on standard output, no progress bar")
	if code, ok := parseFlags(fs, replayUsage, args, stdout, stderr); !ok {
		return code
	}
	usageErr := func(format string, a ...any) int { return usageError(stderr, "replay", format, a...) }
	if (fs.NArg() == 0) == (f.bus.url == "") {
		return usageErr("give event files, or --nats with --stream, not both")
	}
	if f.bus.url == "" && (f.from != "" || f.to != "") {
		return usageErr("--from and --to select a stream range; they need --nats")
	}
	opts, err := f.options(po)
	if err == nil {
		err = opts.Validate()
	}
	if err != nil {
		return usageErr("%v", err)
	}

	progress := !f.quiet && isTerminal(stderr)
	var srcs []eval.Source
	var closers []io.Closer
	defer func() {
		for _, c := range closers {
			c.Close()
		}
	}()
	if f.bus.url != "" {
		ro, err := f.rangeOptions()
		if err != nil {
			return usageErr("%v", err)
		}
		bo := bd
		f.bus.apply(&bo)
		bo.Stream, bo.Subject, bo.CatalogSubject, bo.Name = f.streamName, f.subject, f.catalogSubject, "waymark-replay"
		bus, err := stream.Connect(ctx, bo)
		if err != nil {
			fmt.Fprintln(stderr, "waymark replay:", err)
			return 1
		}
		defer bus.Close()
		rr, err := dataset.OpenRange(ctx, bus.JetStream(), ro)
		if err != nil {
			fmt.Fprintln(stderr, "waymark replay:", err)
			return 1
		}
		srcs = append(srcs, eval.Source{Name: "stream " + f.streamName, Reader: rr})
	} else {
		for _, path := range fs.Args() {
			file, err := dataset.Open(path, f.format)
			if err != nil {
				fmt.Fprintln(stderr, "waymark replay:", err)
				return 1
			}
			closers = append(closers, file)
			srcs = append(srcs, eval.Source{Name: path, Reader: file})
		}
	}
	bad := 0
	lo := eval.LoadOptions{
		StrictOrder: f.strict,
		Catalog:     f.catalog,
		OnBadRecord: func(src string, err error) {
			if bad++; bad <= maxReported {
				fmt.Fprintf(stderr, "%s: %v\n", src, err)
			}
		},
	}
	if progress {
		fmt.Fprint(stderr, "reading events...")
	}
	log, err := eval.Load(ctx, srcs, lo)
	if progress {
		fmt.Fprint(stderr, "\r\033[K")
	}
	if err != nil {
		fmt.Fprintln(stderr, "waymark replay:", err)
		return 1
	}
	if bad > maxReported {
		fmt.Fprintf(stderr, "... %d bad records in all, skipped\n", bad)
	}
	if progress {
		start := time.Now()
		opts.Progress = func(done, total int64) { progressBar(stderr, done, total, start) }
	}
	rep, err := eval.Run(ctx, log, opts)
	if progress {
		fmt.Fprint(stderr, "\r\033[K")
	}
	if err != nil {
		if errors.Is(err, eval.ErrBadOption) {
			return usageErr("%v", err)
		}
		fmt.Fprintln(stderr, "waymark replay:", err)
		return 1
	}
	rep.Run = runInfo("replay", args)
	for _, w := range rep.Warnings {
		fmt.Fprintln(stderr, "waymark replay: warning:", w)
	}
	if rep.Dataset.OutOfOrder > 0 {
		fmt.Fprintf(stderr, "waymark replay: %d events were out of time order in their file and were sorted into place\n", rep.Dataset.OutOfOrder)
	}
	out := eval.OutputOptions{Timings: f.timings}
	writers := []struct {
		path  string
		write func(io.Writer, eval.OutputOptions) error
	}{{f.jsonOut, rep.WriteJSON}, {f.csvOut, rep.WriteCSV}, {f.htmlOut, rep.WriteHTML}}
	for _, w := range writers {
		if w.path == "" {
			continue
		}
		if err := writeFile(w.path, func(wr io.Writer) error { return w.write(wr, out) }); err != nil {
			fmt.Fprintln(stderr, "waymark replay:", err)
			return 1
		}
	}
	if !f.quiet {
		if err := rep.WriteTable(stdout); err != nil {
			fmt.Fprintln(stderr, "waymark replay:", err)
			return 1
		}
	}
	return 0
}

// options turns the flags into eval options.
func (f *replayFlags) options(o eval.Options) (eval.Options, error) {
	var err error
	if o.Models, err = eval.ExpandModels(f.models); err != nil {
		return o, err
	}
	o.K = nil
	for _, s := range strings.Split(f.ks, ",") {
		k, err := strconv.Atoi(strings.TrimSpace(s))
		if err != nil {
			return o, fmt.Errorf("--k %q: %q is not an integer", f.ks, s)
		}
		o.K = append(o.K, k)
	}
	o.Protocol = eval.Protocol(f.protocol)
	if f.splitAt != "" {
		if o.SplitAt, err = time.Parse(time.RFC3339Nano, f.splitAt); err != nil {
			return o, fmt.Errorf("--split-at %q is not an RFC 3339 time", f.splitAt)
		}
	}
	o.TestDays = f.testDays
	if o.Protocol == "" {
		o.Protocol = eval.Prequential
		if f.splitAt != "" || f.testDays != 0 {
			o.Protocol = eval.Temporal
		}
	}
	o.LearnDuringTest = f.learnTest
	o.Target = eval.Target(f.target)
	o.Exclude = eval.Exclusion(f.exclude)
	o.Pipeline.Tracker.Window, o.Pipeline.Tracker.Timeout, o.Pipeline.Tracker.MaxSessions = f.window, f.timeout, f.maxSess
	o.Pipeline.HalfLife = f.halfLife
	o.Pipeline.Set.CapPerItem, o.Pipeline.Set.SRWindow = f.capItem, f.srWindow
	o.MinSessionLength, o.MinItemSupport, o.DropUnseen, o.ColdThreshold = f.minLen, f.minSupport, f.dropUnseen, f.cold
	o.KFold = eval.KFoldOptions{Folds: f.folds, MinLength: f.kMinLen, MaxSessions: f.kSessions, Targets: f.kTargets, Context: f.kContext, Seed: f.seed}
	// Zero would silently mean "the default" further down; refuse it here
	// so a typo is not taken for a setting.
	for name, v := range map[string]int{"--window": f.window, "--max-sessions": f.maxSess, "--neighbors-per-item": f.capItem,
		"--sr-window": f.srWindow, "--min-session-length": f.minLen, "--min-item-support": f.minSupport, "--cold-threshold": f.cold,
		"--folds": f.folds, "--kfold-min-length": f.kMinLen, "--kfold-targets": f.kTargets, "--kfold-context": f.kContext} {
		if v < 1 {
			return o, fmt.Errorf("%s %d must be at least 1", name, v)
		}
	}
	if f.timeout <= 0 || f.halfLife <= 0 {
		return o, fmt.Errorf("--session-timeout and --half-life must be positive")
	}
	return o, nil
}

// rangeOptions parses --from and --to: an integer is a stream sequence,
// anything else an RFC 3339 time.
func (f *replayFlags) rangeOptions() (dataset.RangeOptions, error) {
	ro := dataset.RangeOptions{Stream: f.streamName, Subject: f.subject, CatalogSubject: f.catalogSubject}
	parse := func(name, s string, seq *uint64, t *time.Time) error {
		if s == "" {
			return nil
		}
		if n, err := strconv.ParseUint(s, 10, 64); err == nil {
			if n == 0 {
				return fmt.Errorf("%s 0: stream sequences start at 1", name)
			}
			*seq = n
			return nil
		}
		v, err := time.Parse(time.RFC3339Nano, s)
		if err != nil {
			return fmt.Errorf("%s %q is neither a stream sequence nor an RFC 3339 time", name, s)
		}
		*t = v
		return nil
	}
	if err := parse("--from", f.from, &ro.FromSeq, &ro.FromTime); err != nil {
		return ro, err
	}
	if err := parse("--to", f.to, &ro.ToSeq, &ro.ToTime); err != nil {
		return ro, err
	}
	return ro, nil
}

func writeFile(path string, write func(io.Writer) error) error {
	fh, err := os.Create(path)
	if err != nil {
		return err
	}
	if err := write(fh); err != nil {
		fh.Close()
		return err
	}
	return fh.Close()
}

// progressBar redraws one line on a terminal.
func progressBar(w io.Writer, done, total int64, start time.Time) {
	if total <= 0 {
		return
	}
	const width = 30
	n := int(done * width / total)
	rate := float64(done) / max(time.Since(start).Seconds(), 1e-3)
	fmt.Fprintf(w, "\r[%s%s] %3d%%  %d/%d  %.0f/s", strings.Repeat("#", n), strings.Repeat(".", width-n), done*100/total, done, total, rate)
}

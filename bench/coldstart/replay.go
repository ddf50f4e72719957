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
	"waymark/stream/dataset"
)

// runReplay is `waymark replay`'s prequential path (eval.Load, eval.Run
// with serve's pipeline defaults) with one addition: catalogue records
// from files of their own.
func runReplay(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("replay", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var catFiles stringList
	fs.Var(&catFiles, "catalog-file", "catalogue records (JSON lines) applied at their published time; repeatable")
	fileCat := fs.Bool("catalog", true, "apply the catalogue records the event files carry (the e-shop's attributes)")
	format := fs.String("format", dataset.FormatAuto, "input `format` of the event files: auto, events, msnbc, eshop")
	specs := fs.String("models", models.DefaultBlendSpec, "model `specs`, comma-separated; alternatives with '|' form a grid")
	ks := fs.String("k", "1,5,10,20", "cut-offs, comma-separated `list`")
	cold := fs.Int("cold-threshold", eval.DefaultOptions().ColdThreshold, "a target is cold with fewer learned clicks than this")
	jsonOut := fs.String("json", "", "write the report as JSON to `file`")
	timings := fs.Bool("timings", false, "put query latency into the JSON")
	quiet := fs.Bool("quiet", false, "no table on standard output")
	fs.Usage = func() {
		fmt.Fprintln(fs.Output(), "usage: coldstart replay [flags] FILE...\n\nPrequential replay by the project's evaluator, with catalogue records from --catalog-file.\n\nflags:")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() == 0 {
		fs.Usage()
		return 2
	}
	opts := eval.DefaultOptions()
	var err error
	if opts.Models, err = eval.ExpandModels(*specs); err != nil {
		fmt.Fprintln(stderr, "coldstart replay:", err)
		return 2
	}
	if opts.K, err = parseKs(*ks); err != nil {
		fmt.Fprintln(stderr, "coldstart replay:", err)
		return 2
	}
	opts.ColdThreshold = *cold
	if err := opts.Validate(); err != nil {
		fmt.Fprintln(stderr, "coldstart replay:", err)
		return 2
	}
	start := time.Now()
	cl, err := load(ctx, fs.Args(), loadOptions{format: *format, fileCatalog: *fileCat, catalogFiles: catFiles}, stderr)
	if err != nil {
		fmt.Fprintln(stderr, "coldstart replay:", err)
		return 1
	}
	log, err := eval.Load(ctx, []eval.Source{{Name: strings.Join(fs.Args(), "+"), Reader: &memReader{es: cl.entries}}}, eval.LoadOptions{Catalog: true})
	if err != nil {
		fmt.Fprintln(stderr, "coldstart replay:", err)
		return 1
	}
	rep, err := eval.Run(ctx, log, opts)
	if err != nil {
		fmt.Fprintln(stderr, "coldstart replay:", err)
		return 1
	}
	fmt.Fprintf(stderr, "coldstart replay: %d clicks, %d catalogue records applied (%d published after the last click), %d bad records, %s\n",
		len(cl.entries), cl.records, cl.late, cl.bad, time.Since(start).Round(100*time.Millisecond))
	if *jsonOut != "" {
		f, err := os.Create(*jsonOut)
		if err == nil {
			err = rep.WriteJSON(f, eval.OutputOptions{Timings: *timings})
			if cerr := f.Close(); err == nil {
				err = cerr
			}
		}
		if err != nil {
			fmt.Fprintln(stderr, "coldstart replay:", err)
			return 1
		}
	}
	if !*quiet {
		if err := rep.WriteTable(stdout); err != nil {
			fmt.Fprintln(stderr, "coldstart replay:", err)
			return 1
		}
	}
	return 0
}

func parseKs(s string) ([]int, error) {
	var out []int
	for _, p := range strings.Split(s, ",") {
		k, err := strconv.Atoi(strings.TrimSpace(p))
		if err != nil {
			return nil, fmt.Errorf("--k %q: %q is not an integer", s, p)
		}
		out = append(out, k)
	}
	return out, nil
}

package main

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"time"

	"waymark/models"
	"waymark/session"
	"waymark/stream"
	"waymark/stream/dataset"
)

// runExportPriors learns a log (up to --until) in a serve engine and writes
// the engine's priors export with the header GET /v1/admin/priors writes.
func runExportPriors(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("export-priors", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var catFiles stringList
	fs.Var(&catFiles, "catalog-file", "catalogue records (JSON lines) applied at their published time; repeatable")
	format := fs.String("format", dataset.FormatAuto, "input `format` of the event files")
	blend := fs.String("blend", models.DefaultBlendSpec, "the engine's blend `spec` (its parts are what is exported)")
	until := fs.String("until", "", "learn clicks before this `time` (RFC 3339) only; empty: all")
	out := fs.String("out", "", "priors `file` to write (required)")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() == 0 || *out == "" {
		fmt.Fprintln(stderr, "usage: coldstart export-priors --out FILE [--until TIME] [--catalog-file FILE] EVENTS...")
		return 2
	}
	var limit int64 = 1<<63 - 1
	if *until != "" {
		t, err := time.Parse(time.RFC3339Nano, *until)
		if err != nil {
			fmt.Fprintf(stderr, "coldstart export-priors: --until %q is not an RFC 3339 time\n", *until)
			return 2
		}
		limit = t.UnixMilli()
	}
	start := time.Now()
	cl, err := load(ctx, fs.Args(), loadOptions{format: *format, fileCatalog: true, catalogFiles: catFiles}, stderr)
	if err != nil {
		fmt.Fprintln(stderr, "coldstart export-priors:", err)
		return 1
	}
	g, err := newEngine(ctx, engineConfig{blend: *blend})
	if err != nil {
		fmt.Fprintln(stderr, "coldstart export-priors:", err)
		return 1
	}
	defer g.close()
	for i := range cl.entries {
		en := &cl.entries[i]
		if en.ev.TS >= limit {
			break
		}
		for j := range en.recs {
			if err := g.sendItem(ctx, &en.recs[j]); err != nil {
				fmt.Fprintln(stderr, "coldstart export-priors:", err)
				return 1
			}
		}
		if err := g.sendEvent(ctx, &en.ev); err != nil {
			fmt.Fprintln(stderr, "coldstart export-priors:", err)
			return 1
		}
	}
	if err := g.rejected(); err != nil {
		fmt.Fprintln(stderr, "coldstart export-priors:", err)
		return 1
	}
	f, err := os.Create(*out)
	if err != nil {
		fmt.Fprintln(stderr, "coldstart export-priors:", err)
		return 1
	}
	bw := bufio.NewWriter(f)
	enc := json.NewEncoder(bw)
	st := g.e.Stats()
	rows := 0
	err = enc.Encode(map[string]any{"format": session.PriorsFormat, "version": 1, "items": st.Items, "events_applied": st.EventsApplied, "watermark": st.Watermark})
	if err == nil {
		err = g.e.ExportPriors(func(row stream.PriorRow) error { rows++; return enc.Encode(row) })
	}
	if err == nil {
		err = bw.Flush()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		fmt.Fprintln(stderr, "coldstart export-priors:", err)
		return 1
	}
	fmt.Fprintf(stdout, "wrote %s: %d neighbour lists from %d clicks (watermark %s) in %s\n", *out, rows, st.EventsApplied, st.Watermark, time.Since(start).Round(100*time.Millisecond))
	return 0
}

// importOptions are `waymark priors import`'s flags.
type importOptions struct {
	mapFile  string
	unmapped string // drop or keep
	weight   float64
	models   string // comma-separated exporting models to take; empty: all
}

// readPriors reads a priors file and maps it as `waymark priors import`
// does (session.ReadPriors): ids through the map, unmapped items dropped or
// kept, weights scaled, rows left empty dropped. It returns the rows to
// publish and how many were dropped.
func readPriors(path string, o importOptions) ([]stream.PriorRow, int, error) {
	if !(o.weight > 0) || (o.unmapped != "drop" && o.unmapped != "keep") {
		return nil, 0, fmt.Errorf("priors: --weight must be > 0 and --unmapped drop or keep")
	}
	imp := session.PriorsImport{KeepUnmapped: o.unmapped == "keep", Weight: o.weight, Models: session.ParseModelList(o.models)}
	if o.mapFile != "" {
		var err error
		if imp.IDMap, err = session.ReadIDMap(o.mapFile); err != nil {
			return nil, 0, err
		}
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, 0, err
	}
	defer f.Close()
	var out []stream.PriorRow
	_, dropped, err := session.ReadPriors(f, imp, func(r stream.PriorRow) error {
		out = append(out, r)
		return nil
	})
	if err != nil {
		return nil, 0, fmt.Errorf("%s: %w", path, err)
	}
	return out, dropped, nil
}

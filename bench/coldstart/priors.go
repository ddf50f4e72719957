package main

import (
	"bufio"
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
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
// does (cmd/waymark/priors.go): ids through the map, unmapped items
// dropped or kept, weights scaled, rows left empty dropped. It returns the
// rows to publish and how many were dropped.
func readPriors(path string, o importOptions) ([]stream.PriorRow, int, error) {
	if !(o.weight > 0) || (o.unmapped != "drop" && o.unmapped != "keep") {
		return nil, 0, fmt.Errorf("priors: --weight must be > 0 and --unmapped drop or keep")
	}
	mapping := map[string]string{}
	if o.mapFile != "" {
		var err error
		if mapping, err = readMapping(o.mapFile); err != nil {
			return nil, 0, err
		}
	}
	keep := map[string]bool{}
	for _, m := range strings.Split(o.models, ",") {
		if m = strings.TrimSpace(m); m != "" {
			keep[m] = true
		}
	}
	mapID := func(id string) (string, bool) {
		if o.mapFile == "" {
			return id, true
		}
		if to, ok := mapping[id]; ok {
			return to, true
		}
		return id, o.unmapped == "keep"
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, 0, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 1<<20), 64<<20)
	var out []stream.PriorRow
	dropped := 0
	for line := 1; sc.Scan(); line++ {
		if line == 1 {
			var hdr struct {
				Format  string `json:"format"`
				Version int    `json:"version"`
			}
			if err := json.Unmarshal(sc.Bytes(), &hdr); err != nil || hdr.Format != session.PriorsFormat || hdr.Version != 1 {
				return nil, 0, fmt.Errorf("%s: the first line is not a %s version 1 header", path, session.PriorsFormat)
			}
			continue
		}
		var row stream.PriorRow
		if err := json.Unmarshal(sc.Bytes(), &row); err != nil {
			return nil, 0, fmt.Errorf("%s: line %d: %w", path, line, err)
		}
		if len(keep) > 0 && !keep[row.Model] {
			continue
		}
		item, ok := mapID(row.Item)
		if !ok {
			dropped++
			continue
		}
		r := stream.PriorRow{Item: item}
		for _, n := range row.Neighbors {
			if to, ok := mapID(n.Item); ok {
				r.Neighbors = append(r.Neighbors, stream.PriorNeighbor{Item: to, Weight: n.Weight * o.weight})
			}
		}
		if len(r.Neighbors) == 0 {
			dropped++
			continue
		}
		if err := r.Validate(); err != nil {
			return nil, 0, fmt.Errorf("%s: line %d: %w", path, line, err)
		}
		out = append(out, r)
	}
	return out, dropped, sc.Err()
}

// readMapping reads from,to pairs; a first line "from,to" is a header.
func readMapping(path string) (map[string]string, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.FieldsPerRecord = 2
	m := map[string]string{}
	for n := 1; ; n++ {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			return m, nil
		}
		if err != nil {
			return nil, fmt.Errorf("id map %s: %w", path, err)
		}
		if n == 1 && rec[0] == "from" && rec[1] == "to" {
			continue
		}
		m[rec[0]] = rec[1]
	}
}

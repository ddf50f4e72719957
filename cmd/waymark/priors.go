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

	"waymark/session"
	"waymark/stream"
)

// runPriors exports a running service's learned neighbours, or imports
// such an export into another deployment through an id mapping.
func runPriors(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	usage := func(w io.Writer) {
		fmt.Fprintln(w, "usage: waymark priors export [flags]\n       waymark priors import [flags] FILE\n\nexport writes a running service's item-item statistics in the priors format (stream/FORMAT.md);\nimport publishes them to another deployment's bus through an id mapping, scaled by a weight.\nThe new site then answers from its first event; the priors fade as local clicks arrive.\nRun 'waymark priors export --help' or 'waymark priors import --help' for flags.")
	}
	if len(args) == 0 {
		usage(stderr)
		return 2
	}
	switch args[0] {
	case "export":
		return priorsExport(ctx, args[1:], stdout, stderr)
	case "import":
		return priorsImport(ctx, args[1:], stdout, stderr)
	case "-h", "--help", "help":
		usage(stdout)
		return 0
	}
	fmt.Fprintf(stderr, "waymark priors: unknown subcommand %q\n", args[0])
	usage(stderr)
	return 2
}

func priorsExport(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("priors export", flag.ContinueOnError)
	fs.SetOutput(stderr)
	addr := fs.String("http", "http://127.0.0.1:8080", "`URL` of the running service")
	out := fs.String("out", "", "output `file` (default standard output)")
	token := fs.String("auth-token", os.Getenv("WAYMARK_AUTH_TOKEN"), "bearer `token` of the service (default $WAYMARK_AUTH_TOKEN)")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	resp, code := adminCall(ctx, "GET", *addr+"/v1/admin/priors", *token, "waymark priors export", stderr)
	if resp == nil {
		return code
	}
	defer resp.Body.Close()
	w := stdout
	if *out != "" {
		f, err := os.Create(*out)
		if err != nil {
			fmt.Fprintln(stderr, "waymark priors export:", err)
			return 1
		}
		defer f.Close()
		w = f
	}
	n, err := io.Copy(w, resp.Body)
	if err != nil {
		fmt.Fprintln(stderr, "waymark priors export:", err)
		return 1
	}
	if *out != "" {
		fmt.Fprintf(stdout, "wrote %s (%d bytes)\n", *out, n)
	}
	return 0
}

func priorsImport(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	d := stream.DefaultBusOptions()
	fs := flag.NewFlagSet("priors import", flag.ContinueOnError)
	fs.SetOutput(stderr)
	url := fs.String("nats", "nats://127.0.0.1:4222", "NATS `URL` of the deployment that imports")
	creds := fs.String("nats-creds", "", "NATS credentials `file`")
	streamName := fs.String("stream", d.Stream, "JetStream stream `name`")
	control := fs.String("control-subject", d.ControlSubject, "control `subject`")
	mapFile := fs.String("map", "", "CSV `file` of from,to item ids (a header line is allowed); empty keeps ids as they are")
	unmapped := fs.String("unmapped", "drop", "items missing from the map: drop or keep")
	weight := fs.Float64("weight", 0.5, "scale of the imported weights (the priors' share next to local evidence)")
	models := fs.String("models", "", "comma-separated exporting models to take (default all), e.g. iknn,sr")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() != 1 || !(*weight > 0) || (*unmapped != "drop" && *unmapped != "keep") {
		fmt.Fprintln(stderr, "usage: waymark priors import [--map FILE] [--weight W] [--unmapped drop|keep] FILE")
		return 2
	}
	mapping := map[string]string{}
	if *mapFile != "" {
		var err error
		if mapping, err = readMapping(*mapFile); err != nil {
			fmt.Fprintln(stderr, "waymark priors import:", err)
			return 1
		}
	}
	keep := map[string]bool{}
	for _, m := range strings.Split(*models, ",") {
		if m = strings.TrimSpace(m); m != "" {
			keep[m] = true
		}
	}
	mapID := func(id string) (string, bool) {
		if *mapFile == "" {
			return id, true
		}
		if to, ok := mapping[id]; ok {
			return to, true
		}
		return id, *unmapped == "keep"
	}
	f, err := os.Open(fs.Arg(0))
	if err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 1
	}
	defer f.Close()
	bo := d
	bo.URL, bo.CredsFile, bo.Stream, bo.ControlSubject, bo.Name = *url, *creds, *streamName, *control, "waymark-priors"
	bus, err := stream.Connect(ctx, bo)
	if err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 1
	}
	defer bus.Close()
	if err := bus.CreateStreams(ctx); err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 1
	}
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 1<<20), 64<<20)
	var batch [][]byte
	rows, dropped, line := 0, 0, 0
	flush := func() error {
		if len(batch) == 0 {
			return nil
		}
		err := bus.PublishRaw(ctx, bus.Options().ControlSubject, batch)
		batch = batch[:0]
		return err
	}
	start := time.Now()
	for sc.Scan() {
		line++
		if line == 1 {
			var hdr struct {
				Format  string `json:"format"`
				Version int    `json:"version"`
			}
			if err := json.Unmarshal(sc.Bytes(), &hdr); err != nil || hdr.Format != session.PriorsFormat || hdr.Version != 1 {
				fmt.Fprintf(stderr, "waymark priors import: %s: the first line is not a %s version 1 header\n", fs.Arg(0), session.PriorsFormat)
				return 1
			}
			continue
		}
		var row stream.PriorRow
		if err := json.Unmarshal(sc.Bytes(), &row); err != nil {
			fmt.Fprintf(stderr, "waymark priors import: line %d: %v\n", line, err)
			return 1
		}
		if len(keep) > 0 && !keep[row.Model] {
			continue
		}
		item, ok := mapID(row.Item)
		if !ok {
			dropped++
			continue
		}
		out := stream.PriorRow{Item: item}
		for _, n := range row.Neighbors {
			if to, ok := mapID(n.Item); ok {
				out.Neighbors = append(out.Neighbors, stream.PriorNeighbor{Item: to, Weight: n.Weight * *weight})
			}
		}
		if len(out.Neighbors) == 0 {
			dropped++
			continue
		}
		if err := out.Validate(); err != nil {
			fmt.Fprintf(stderr, "waymark priors import: line %d: %v\n", line, err)
			return 1
		}
		msg, _ := json.Marshal(stream.Control{Prior: &out})
		batch = append(batch, msg)
		rows++
		if len(batch) == 1000 {
			if err := flush(); err != nil {
				fmt.Fprintln(stderr, "waymark priors import:", err)
				return 1
			}
		}
	}
	if err := sc.Err(); err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 1
	}
	if err := flush(); err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 1
	}
	fmt.Fprintf(stdout, "imported %d neighbour lists (weight %g), dropped %d unmapped, in %s\n", rows, *weight, dropped, time.Since(start).Round(time.Millisecond))
	return 0
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

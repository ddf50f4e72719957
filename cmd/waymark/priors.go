package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
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
	weight := fs.Float64("weight", 0.5, "scale of the imported weights, more than 0 and at most 1 (the priors' share next to local evidence)")
	models := fs.String("models", "", "comma-separated exporting models to take (default all): iknn, markov, sr")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() != 1 || (*unmapped != "drop" && *unmapped != "keep") {
		fmt.Fprintln(stderr, "usage: waymark priors import [--map FILE] [--weight W] [--unmapped drop|keep] FILE")
		return 2
	}
	o := session.PriorsImport{KeepUnmapped: *unmapped == "keep", Weight: *weight, Models: session.ParseModelList(*models)}
	if err := o.Validate(); err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 2
	}
	if *mapFile != "" {
		var err error
		if o.IDMap, err = session.ReadIDMap(*mapFile); err != nil {
			fmt.Fprintln(stderr, "waymark priors import:", err)
			return 1
		}
	}
	f, err := os.Open(fs.Arg(0))
	if err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 1
	}
	defer f.Close()
	// Check the whole file before publishing any of it: a bad line in
	// the middle must not leave half an import on the log.
	if _, _, err := session.ReadPriors(f, o, func(stream.PriorRow) error { return nil }); err != nil {
		fmt.Fprintf(stderr, "waymark priors import: %s: %v\n", fs.Arg(0), err)
		return 1
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 1
	}
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
	var batch [][]byte
	flush := func() error {
		if len(batch) == 0 {
			return nil
		}
		err := bus.PublishRaw(ctx, bus.Options().ControlSubject, batch)
		batch = batch[:0]
		return err
	}
	start := time.Now()
	rows, dropped, err := session.ReadPriors(f, o, func(row stream.PriorRow) error {
		msg, _ := json.Marshal(stream.Control{Prior: &row})
		if batch = append(batch, msg); len(batch) == 1000 {
			return flush()
		}
		return nil
	})
	if err != nil {
		fmt.Fprintf(stderr, "waymark priors import: %s: %v\n", fs.Arg(0), err)
		return 1
	}
	if err := flush(); err != nil {
		fmt.Fprintln(stderr, "waymark priors import:", err)
		return 1
	}
	fmt.Fprintf(stdout, "imported %d neighbour lists (weight %g), dropped %d unmapped, in %s\n", rows, *weight, dropped, time.Since(start).Round(time.Millisecond))
	return 0
}

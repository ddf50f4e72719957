package main

import (
	"context"
	"encoding/json"
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
	if len(args) == 0 {
		fmt.Fprint(stderr, priorsUsage)
		return 2
	}
	switch args[0] {
	case "export":
		return priorsExport(ctx, args[1:], stdout, stderr)
	case "import":
		return priorsImport(ctx, args[1:], stdout, stderr)
	case "-h", "-help", "--help", "help":
		fmt.Fprint(stdout, priorsUsage)
		return 0
	}
	fmt.Fprintf(stderr, "waymark priors: unknown subcommand %q\n", args[0])
	fmt.Fprint(stderr, priorsUsage)
	return 2
}

const priorsUsage = `usage: waymark priors export [flags]
       waymark priors import [flags] FILE

export writes a running service's item-item statistics in the priors format (stream/FORMAT.md);
import publishes them to another deployment's bus through an id mapping, scaled by a weight.
The new site then answers from its first event; the priors fade as local clicks arrive.
Run 'waymark priors export --help' or 'waymark priors import --help' for flags.
`

func priorsExport(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("priors export", flag.ContinueOnError)
	addr := fs.String("http", "http://127.0.0.1:8080", "`URL` of the running service")
	out := fs.String("out", "", "output `file` (default standard output)")
	token := fs.String("auth-token", os.Getenv("WAYMARK_AUTH_TOKEN"), "bearer `token` of the service (default $WAYMARK_AUTH_TOKEN)")
	const head = "usage: waymark priors export [flags]\n\nWrite a running service's learned item-item statistics (its neighbour lists) in the\npriors format (stream/FORMAT.md), for 'waymark priors import' on a new site.\n\nflags:\n"
	if code, ok := parseFlags(fs, head, args, stdout, stderr); !ok {
		return code
	}
	if fs.NArg() != 0 {
		return usageError(stderr, "priors export", "unexpected argument %q (the output file goes with --out)", fs.Arg(0))
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
	nb := addBusFlags(fs, "nats://127.0.0.1:4222", "NATS `URL` of the deployment that imports")
	streamName := fs.String("stream", d.Stream, "JetStream stream `name`")
	control := fs.String("control-subject", d.ControlSubject, "control `subject`")
	mapFile := fs.String("map", "", "CSV `file` of from,to item ids (a header line is allowed); empty keeps ids as they are")
	unmapped := fs.String("unmapped", "drop", "items missing from the map: `drop` or `keep`")
	weight := fs.Float64("weight", 0.5, "`scale` of the imported weights, more than 0 and at most 1 (the priors' share next to local evidence)")
	models := fs.String("models", "", "comma-separated exporting `models` to take (default all): iknn, markov, sr")
	const head = "usage: waymark priors import [flags] FILE\n\nPublish a priors export (stream/FORMAT.md) to this deployment's bus through an id\nmapping, scaled by --weight; every replica applies it from the log.\n\nflags:\n"
	if code, ok := parseFlags(fs, head, args, stdout, stderr); !ok {
		return code
	}
	switch {
	case fs.NArg() != 1:
		return usageError(stderr, "priors import", "give exactly one priors FILE (got %d arguments)", fs.NArg())
	case !(*weight > 0 && *weight <= 1):
		return usageError(stderr, "priors import", "--weight %g must be more than 0 and at most 1", *weight)
	case *unmapped != "drop" && *unmapped != "keep":
		return usageError(stderr, "priors import", "--unmapped %q must be drop or keep", *unmapped)
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
	nb.apply(&bo)
	bo.Stream, bo.ControlSubject, bo.Name = *streamName, *control, "waymark-priors"
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

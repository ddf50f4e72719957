package main

import (
	"bufio"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"slices"
	"strings"
	"time"

	"waymark/stream"
	"waymark/stream/dataset"
)

func runSend(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	d := stream.DefaultBusOptions()
	fs := flag.NewFlagSet("send", flag.ContinueOnError)
	nb := addBusFlags(fs, "nats://127.0.0.1:4222", "NATS `URL`")
	streamName := fs.String("stream", d.Stream, "JetStream stream `name` (created if missing)")
	subject := fs.String("subject", d.Subject, "`subject` of click events")
	catalog := fs.String("catalog-subject", d.CatalogSubject, "`subject` of catalogue records")
	items := fs.Bool("items", false, "the files hold catalogue records (JSON lines), not click events")
	format := fs.String("format", dataset.FormatAuto, "input `format`: "+strings.Join(dataset.Formats(), ", ")+" (as replay reads them)")
	withCatalog := fs.Bool("catalog", true, "also publish the catalogue records a dataset carries (the e-shop file's product attributes)")
	batch := fs.Int("batch", 10_000, "number of `events` per publish batch")
	quiet := fs.Bool("quiet", false, "no progress line")
	if code, ok := parseFlags(fs, sendUsage, args, stdout, stderr); !ok {
		return code
	}
	switch {
	case fs.NArg() == 0:
		return usageError(stderr, "send", "no FILE given")
	case *batch < 1:
		return usageError(stderr, "send", "--batch %d must be at least 1", *batch)
	case !slices.Contains(dataset.Formats(), *format):
		return usageError(stderr, "send", "--format %q is not one of %s", *format, strings.Join(dataset.Formats(), ", "))
	}
	bo := d
	nb.apply(&bo)
	bo.Stream, bo.Subject, bo.CatalogSubject, bo.Name = *streamName, *subject, *catalog, "waymark-send"
	bus, err := stream.Connect(ctx, bo)
	if err != nil {
		fmt.Fprintln(stderr, "waymark send:", err)
		return 1
	}
	defer bus.Close()
	if err := bus.CreateStreams(ctx); err != nil {
		fmt.Fprintln(stderr, "waymark send:", err)
		return 1
	}
	progress := !*quiet && isTerminal(stderr)
	var sent, bad int
	start := time.Now()
	for _, path := range fs.Args() {
		var n, b int
		if *items {
			n, b, err = sendItems(ctx, bus, path, *batch, stderr)
		} else {
			n, b, err = sendEvents(ctx, bus, path, *format, *withCatalog, *batch, stderr, func(total int) {
				if progress {
					fmt.Fprintf(stderr, "\r%s: %d events sent (%.0f/s)", path, sent+total, float64(sent+total)/time.Since(start).Seconds())
				}
			})
		}
		sent += n
		bad += b
		if progress {
			fmt.Fprintln(stderr)
		}
		if err != nil {
			fmt.Fprintf(stderr, "waymark send: %s: %v\n", path, err)
			fmt.Fprintf(stdout, "sent %d, rejected %d before the failure\n", sent, bad)
			return 1
		}
	}
	what := "events"
	if *items {
		what = "catalogue records"
	}
	fmt.Fprintf(stdout, "sent %d %s, rejected %d invalid lines, in %s\n", sent, what, bad, time.Since(start).Round(time.Millisecond))
	if bad > 0 {
		// The valid rest is on the bus; a script still has to learn that
		// its input was not clean.
		fmt.Fprintf(stderr, "waymark send: %d invalid lines rejected (the first %d are shown above); the valid rest was published\n", bad, min(bad, maxReported))
		return 1
	}
	return 0
}

const sendUsage = `usage: waymark send [flags] FILE...

Publish click events to the bus: the project's JSON lines or CSV with a header
(stream/FORMAT.md), or the open datasets replay reads (--format msnbc|eshop, or
detected). Gzip is detected. "csv" and "ndjson" read the project's formats
whatever the file is called; "events" decides by the name (.csv or .csv.gz:
CSV, else JSON lines). With --items the files hold catalogue records instead.

Invalid lines are reported (the first 10) and skipped; the valid rest is
published, and send then exits with status 1 and says how many were rejected.

Examples:
  waymark send --nats nats://127.0.0.1:4222 clicks.ndjson.gz
  waymark send --format eshop ../shared/data/eshop-clothing-2008/eshop-clothing-2008.csv.gz
  waymark send --items catalog.ndjson

flags:
`

// maxReported bounds the invalid lines send prints.
const maxReported = 10

func sendEvents(ctx context.Context, bus *stream.Bus, path, format string, withCatalog bool, batch int, stderr io.Writer, tick func(int)) (sent, bad int, err error) {
	r, err := dataset.Open(path, format)
	if err != nil {
		return 0, 0, err
	}
	defer r.Close()
	buf := make([]stream.Event, 0, batch)
	flush := func() error {
		// A dataset's catalogue records go first, so each item's record
		// precedes its first click on the log (as replay applies them).
		if recs := r.TakeItems(); withCatalog && len(recs) > 0 {
			data := make([][]byte, len(recs))
			for i := range recs {
				data[i] = recs[i].AppendJSON(nil)
			}
			if err := bus.PublishRaw(ctx, bus.Options().CatalogSubject, data); err != nil {
				return err
			}
		}
		if len(buf) == 0 {
			return nil
		}
		if err := bus.PublishEvents(ctx, buf); err != nil {
			return err
		}
		sent += len(buf)
		buf = buf[:0]
		tick(sent)
		return nil
	}
	for {
		ev, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		var le *stream.LineError
		if errors.As(err, &le) {
			if bad++; bad <= maxReported {
				fmt.Fprintf(stderr, "%s: %v\n", path, le)
			}
			continue
		}
		if err != nil {
			return sent, bad, err
		}
		if buf = append(buf, ev); len(buf) == batch {
			if err := flush(); err != nil {
				return sent, bad, err
			}
		}
	}
	return sent, bad, flush()
}

func sendItems(ctx context.Context, bus *stream.Bus, path string, batch int, stderr io.Writer) (sent, bad int, err error) {
	f, err := os.Open(path)
	if err != nil {
		return 0, 0, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 1<<20), 16<<20)
	var data [][]byte
	line := 0
	for sc.Scan() {
		line++
		if len(sc.Bytes()) == 0 {
			continue
		}
		rec, err := stream.DecodeItemJSON(sc.Bytes())
		if err != nil {
			if bad++; bad <= maxReported {
				fmt.Fprintf(stderr, "%s: line %d: %v\n", path, line, err)
			}
			continue
		}
		data = append(data, rec.AppendJSON(nil))
		if len(data) == batch {
			if err := bus.PublishRaw(ctx, bus.Options().CatalogSubject, data); err != nil {
				return sent, bad, err
			}
			sent += len(data)
			data = data[:0]
		}
	}
	if err := sc.Err(); err != nil {
		return sent, bad, err
	}
	if len(data) > 0 {
		if err := bus.PublishRaw(ctx, bus.Options().CatalogSubject, data); err != nil {
			return sent, bad, err
		}
		sent += len(data)
	}
	return sent, bad, nil
}

// isTerminal reports whether w is a character device (a terminal).
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

package main

import (
	"bufio"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"time"

	"waymark/stream"
)

func runSend(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	d := stream.DefaultBusOptions()
	fs := flag.NewFlagSet("send", flag.ContinueOnError)
	fs.SetOutput(stderr)
	nb := addBusFlags(fs, "nats://127.0.0.1:4222", "NATS `URL`")
	streamName := fs.String("stream", d.Stream, "JetStream stream `name` (created if missing)")
	subject := fs.String("subject", d.Subject, "`subject` of click events")
	catalog := fs.String("catalog-subject", d.CatalogSubject, "`subject` of catalogue records")
	items := fs.Bool("items", false, "the files hold catalogue records (JSON lines), not click events")
	batch := fs.Int("batch", 10_000, "events per publish batch")
	quiet := fs.Bool("quiet", false, "no progress line")
	fs.Usage = func() {
		fmt.Fprintln(fs.Output(), "usage: waymark send [flags] FILE...\n\nPublish click events (JSON lines or CSV with a header, optionally gzip) to the bus.\nInvalid lines are reported and skipped; the valid rest is published.\n\nflags:")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() == 0 || *batch < 1 {
		fs.Usage()
		return 2
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
			n, b, err = sendEvents(ctx, bus, path, *batch, stderr, func(total int) {
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
	return 0
}

// maxReported bounds the invalid lines send prints.
const maxReported = 10

func sendEvents(ctx context.Context, bus *stream.Bus, path string, batch int, stderr io.Writer, tick func(int)) (sent, bad int, err error) {
	r, err := stream.OpenFile(path)
	if err != nil {
		return 0, 0, err
	}
	defer r.Close()
	buf := make([]stream.Event, 0, batch)
	flush := func() error {
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

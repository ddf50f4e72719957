// Command waymark is a streaming next-item recommender for anonymous
// visitors: it learns from click events on NATS JetStream and answers "what
// next?" from a session's own clicks.
//
// Usage:
//
//	waymark serve   [flags]          run the service (embedded NATS by default)
//	waymark send    [flags] FILE...  publish a click log to the bus
//	waymark replay  [flags] FILE...  evaluate models offline on a click log
//	waymark snapshot [flags]         snapshot a running service for new replicas
//	waymark priors export|import     carry item-item statistics to a new site
//	waymark demo    [flags]          run an invented shop end to end
//
// Run "waymark COMMAND --help" for each command's flags.
package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

type command struct {
	name    string
	summary string
	run     func(ctx context.Context, args []string, stdout, stderr io.Writer) int
}

func commands() []command {
	return []command{
		{"serve", "run the service: learn from the bus, answer over HTTP", runServe},
		{"send", "publish a click log (JSON lines, CSV or an open dataset; gzip) to the bus", runSend},
		{"replay", "evaluate models offline by replaying a click log", runReplay},
		{"snapshot", "store a consistent snapshot of a running service for new replicas", runSnapshot},
		{"priors", "export item-item statistics, or import them into a new site", runPriors},
		{"demo", "run an invented shop end to end (embedded NATS, temporary folder)", runDemo},
	}
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: waymark COMMAND [flags]")
	fmt.Fprintln(w, "\ncommands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-8s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nRun 'waymark COMMAND --help' for a command's flags.")
}

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		usage(stderr)
		return 2
	}
	switch args[0] {
	case "-h", "-help", "--help", "help":
		usage(stdout)
		return 0
	}
	for _, c := range commands() {
		if c.name == args[0] {
			return c.run(ctx, args[1:], stdout, stderr)
		}
	}
	fmt.Fprintf(stderr, "waymark: unknown command %q\n", args[0])
	usage(stderr)
	return 2
}

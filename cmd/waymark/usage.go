package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
)

// parseFlags parses args with fs, so that every command treats help and
// usage errors alike: --help prints head and the flags once, to stdout
// (where a pager or grep finds them), and returns (0, false); a usage error
// prints the message and a pointer to --help on stderr and returns
// (2, false). Go's flag package would print its own "Usage of" text to the
// flag set's output on both paths, so that output is silenced here.
func parseFlags(fs *flag.FlagSet, head string, args []string, stdout, stderr io.Writer) (code int, ok bool) {
	fs.SetOutput(io.Discard)
	fs.Usage = func() {}
	err := fs.Parse(args)
	switch {
	case err == nil:
		return 0, true
	case errors.Is(err, flag.ErrHelp):
		printUsage(stdout, fs, head)
		return 0, false
	}
	return usageError(stderr, fs.Name(), "%v", err), false
}

// printUsage writes head, then every flag with its default, to w.
func printUsage(w io.Writer, fs *flag.FlagSet, head string) {
	fmt.Fprint(w, head)
	fs.SetOutput(w)
	fs.PrintDefaults()
	fs.SetOutput(io.Discard)
}

// usageError reports a wrong invocation of command name on stderr and
// returns the exit code of usage errors, 2.
func usageError(stderr io.Writer, name, format string, a ...any) int {
	fmt.Fprintf(stderr, "waymark %s: %s\n", name, fmt.Sprintf(format, a...))
	fmt.Fprintf(stderr, "run 'waymark %s --help' for usage\n", name)
	return 2
}

package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	code := run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

const usage = `usage: coldstart replay|export-priors|serve|table|eshop-split [flags] ...
run 'coldstart SUBCOMMAND --help' for the flags of each`

func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		fmt.Fprintln(stderr, usage)
		return 2
	}
	cmds := map[string]func(context.Context, []string, io.Writer, io.Writer) int{
		"replay":        runReplay,
		"export-priors": runExportPriors,
		"serve":         runServe,
		"table":         runTable,
		"eshop-split":   runEshopSplit,
	}
	if f, ok := cmds[args[0]]; ok {
		return f(ctx, args[1:], stdout, stderr)
	}
	if args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		fmt.Fprintln(stdout, usage)
		return 0
	}
	fmt.Fprintf(stderr, "coldstart: unknown subcommand %q\n%s\n", args[0], usage)
	return 2
}

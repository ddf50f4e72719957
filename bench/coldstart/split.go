package main

import (
	"bufio"
	"compress/gzip"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"time"
)

// runEshopSplit writes two files in the e-shop's own format from the
// original: the home market (visitors of one country) and a second market
// (every other country) that opens on a later date. The second file holds
// only its rows from that date, so a replay of it starts with nothing, as
// a new site does; the first holds every home row, for exporting priors
// up to the opening. Rows keep their order, so the e-shop reader gives
// each file the same click order as the original (its event times are
// its own: a day's rows a second apart from midnight).
func runEshopSplit(_ context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("eshop-split", flag.ContinueOnError)
	fs.SetOutput(stderr)
	home := fs.String("home", "29", "country `code` of the home market (the e-shop's 29 is its own country)")
	open := fs.String("open", "2008-07-01", "`date` the second market opens")
	outA := fs.String("home-out", "", "home market `file` (.csv.gz)")
	outB := fs.String("second-out", "", "second market `file` (.csv.gz)")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() != 1 || *outA == "" || *outB == "" {
		fmt.Fprintln(stderr, "usage: coldstart eshop-split --home-out FILE --second-out FILE [--home CODE] [--open DATE] ESHOP.csv.gz")
		return 2
	}
	day, err := time.Parse(time.DateOnly, *open)
	if err != nil {
		fmt.Fprintf(stderr, "coldstart eshop-split: --open %q is not a date (YYYY-MM-DD)\n", *open)
		return 2
	}
	nA, nB, err := splitEshop(fs.Arg(0), *home, day, *outA, *outB)
	if err != nil {
		fmt.Fprintln(stderr, "coldstart eshop-split:", err)
		return 1
	}
	fmt.Fprintf(stdout, "home market (country %s): %d rows to %s; second market from %s: %d rows to %s\n", *home, nA, *outA, *open, nB, *outB)
	return 0
}

func splitEshop(in, home string, open time.Time, outA, outB string) (int, int, error) {
	f, err := os.Open(in)
	if err != nil {
		return 0, 0, err
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		return 0, 0, fmt.Errorf("%s: %w", in, err)
	}
	type out struct {
		f  *os.File
		zw *gzip.Writer
		bw *bufio.Writer
		n  int
	}
	mk := func(path string) (*out, error) {
		fh, err := os.Create(path)
		if err != nil {
			return nil, err
		}
		zw := gzip.NewWriter(fh)
		zw.ModTime = time.Time{}
		return &out{f: fh, zw: zw, bw: bufio.NewWriter(zw)}, nil
	}
	a, err := mk(outA)
	if err != nil {
		return 0, 0, err
	}
	b, err := mk(outB)
	if err != nil {
		a.f.Close()
		return 0, 0, err
	}
	sc := bufio.NewScanner(zr)
	for line := 1; sc.Scan(); line++ {
		row := sc.Text()
		if line == 1 {
			fmt.Fprintln(a.bw, row)
			fmt.Fprintln(b.bw, row)
			continue
		}
		// year;month;day;order;country;...
		c := strings.SplitN(row, ";", 6)
		if len(c) < 6 {
			return 0, 0, fmt.Errorf("%s: line %d: fewer than 6 fields", in, line)
		}
		var y, m, d int
		if _, err := fmt.Sscanf(c[0]+" "+c[1]+" "+c[2], "%d %d %d", &y, &m, &d); err != nil {
			return 0, 0, fmt.Errorf("%s: line %d: date: %w", in, line, err)
		}
		switch {
		case c[4] == home:
			fmt.Fprintln(a.bw, row)
			a.n++
		case !time.Date(y, time.Month(m), d, 0, 0, 0, 0, time.UTC).Before(open):
			fmt.Fprintln(b.bw, row)
			b.n++
		}
	}
	if err := sc.Err(); err != nil {
		return 0, 0, fmt.Errorf("%s: %w", in, err)
	}
	for _, o := range []*out{a, b} {
		err := o.bw.Flush()
		if err == nil {
			err = o.zw.Close()
		}
		if cerr := o.f.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			return 0, 0, err
		}
	}
	return a.n, b.n, nil
}

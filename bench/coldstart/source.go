package main

import (
	"bufio"
	"cmp"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"strings"

	"waymark/stream"
	"waymark/stream/dataset"
)

// entry is one click and the catalogue records that take effect just
// before it.
type entry struct {
	ev   stream.Event
	recs []stream.ItemRecord
}

// clickLog is a whole input in event-time order.
type clickLog struct {
	entries []entry
	bad     int // records skipped as invalid
	records int // catalogue records attached
	late    int // catalogue records published after the last click, not applied
}

// loadOptions say what to read besides the events.
type loadOptions struct {
	format       string   // dataset format of the event files (auto, events, msnbc, eshop)
	fileCatalog  bool     // keep the records an event file carries (the e-shop's attributes)
	catalogFiles []string // files of catalogue records (JSON lines), applied at their published time
}

// stringList is a repeatable string flag.
type stringList []string

func (s *stringList) String() string     { return strings.Join(*s, ",") }
func (s *stringList) Set(v string) error { *s = append(*s, v); return nil }

func isBadRecord(err error) bool {
	var le *stream.LineError
	return errors.As(err, &le) || errors.Is(err, stream.ErrInvalidEvent) || errors.Is(err, stream.ErrInvalidItem)
}

// load reads every event file in the order given and every catalogue
// file, and returns the clicks sorted by event time (stably: equal times
// keep file order, as eval.Load keeps them), each with the records due
// before it. Bad lines are counted and the first few reported on warn.
func load(ctx context.Context, paths []string, o loadOptions, warn io.Writer) (*clickLog, error) {
	l := &clickLog{}
	report := func(src string, err error) {
		if l.bad++; l.bad <= 10 {
			fmt.Fprintf(warn, "%s: %v\n", src, err)
		}
	}
	for _, path := range paths {
		f, err := dataset.Open(path, o.format)
		if err != nil {
			return nil, err
		}
		for n := 0; ; n++ {
			if n%65536 == 0 && ctx.Err() != nil {
				f.Close()
				return nil, ctx.Err()
			}
			ev, err := f.Next()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				if !isBadRecord(err) {
					f.Close()
					return nil, fmt.Errorf("read %s: %w", path, err)
				}
				report(path, err)
				continue
			}
			e := entry{ev: ev}
			if recs := f.TakeItems(); o.fileCatalog && len(recs) > 0 {
				e.recs = recs
				l.records += len(recs)
			}
			l.entries = append(l.entries, e)
		}
		f.Close()
	}
	slices.SortStableFunc(l.entries, func(a, b entry) int { return cmp.Compare(a.ev.TS, b.ev.TS) })
	var recs []stream.ItemRecord
	for _, path := range o.catalogFiles {
		rs, err := readCatalog(path, report)
		if err != nil {
			return nil, err
		}
		recs = append(recs, rs...)
	}
	// A record takes effect at its published time: it is applied just
	// before the first click at or after that time (a record without one,
	// before the first click).
	slices.SortStableFunc(recs, func(a, b stream.ItemRecord) int { return cmp.Compare(a.Published, b.Published) })
	j := 0
	for i := range l.entries {
		for j < len(recs) && recs[j].Published <= l.entries[i].ev.TS {
			l.entries[i].recs = append(l.entries[i].recs, recs[j])
			l.records++
			j++
		}
	}
	l.late = len(recs) - j
	return l, nil
}

// readCatalog reads catalogue records, one JSON object a line.
func readCatalog(path string, report func(string, error)) ([]stream.ItemRecord, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 1<<16), stream.MaxLineBytes)
	var out []stream.ItemRecord
	for line := 1; sc.Scan(); line++ {
		b := sc.Bytes()
		if len(strings.TrimSpace(string(b))) == 0 {
			continue
		}
		r, err := stream.DecodeItemJSON(b)
		if err != nil {
			report(path, fmt.Errorf("line %d: %w", line, err))
			continue
		}
		out = append(out, r)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("read %s: %w", path, err)
	}
	return out, nil
}

// memReader hands a clickLog to eval.Load as a reader whose catalogue
// records come with the click they precede, as a dataset reader's do.
type memReader struct {
	es      []entry
	i       int
	pending []stream.ItemRecord
}

func (r *memReader) Next() (stream.Event, error) {
	if r.i >= len(r.es) {
		return stream.Event{}, io.EOF
	}
	e := &r.es[r.i]
	r.i++
	r.pending = e.recs
	return e.ev, nil
}

// TakeItems returns the records due before the event Next returned last.
func (r *memReader) TakeItems() []stream.ItemRecord {
	p := r.pending
	r.pending = nil
	return p
}

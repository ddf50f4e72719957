package eval

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"io"
	"slices"
	"time"

	"waymark/stream"
)

// Source is one input of a replay: a file, a stream range, anything that
// reads events in order.
type Source struct {
	Name   string
	Reader stream.Reader
}

// LoadOptions configures Load.
type LoadOptions struct {
	// StrictOrder refuses a source whose events go back in time; by default
	// they are sorted (stably, by event time) and counted.
	StrictOrder bool
	// OnBadRecord, when set, is called for every record skipped as invalid.
	OnBadRecord func(source string, err error)
	// Catalog keeps the catalogue records of sources that carry them (a
	// reader with a TakeItems() []stream.ItemRecord method); they are
	// applied in the replay just before the event they came with.
	Catalog bool
}

// Log is a click log held in memory, in event-time order, with session and
// item names interned to dense numbers.
type Log struct {
	sessions []string
	items    []string
	ev       []rec
	catalog  []catEntry
	sources  []SourceSummary
	bad      int64
	reorder  int64
}

// rec is one click: 24 bytes instead of a stream.Event's 80, which matters
// for a log of millions of clicks.
type rec struct {
	ts   int64
	sess uint32
	item uint32
	kind stream.Kind
}

type catEntry struct {
	ts  int64
	rec stream.ItemRecord
}

// SourceSummary counts what one source gave.
type SourceSummary struct {
	Name       string `json:"name"`
	Events     int64  `json:"events"`
	BadRecords int64  `json:"bad_records"`
	OutOfOrder int64  `json:"out_of_order"`
	Catalog    int64  `json:"catalog_records,omitempty"`
}

// Len returns the number of events.
func (l *Log) Len() int { return len(l.ev) }

// Sources returns what each source gave, in the order read.
func (l *Log) Sources() []SourceSummary { return l.sources }

// isBadRecord tells a skippable bad record from a failure of the source.
func isBadRecord(err error) bool {
	var le *stream.LineError
	return errors.As(err, &le) || errors.Is(err, stream.ErrInvalidEvent) || errors.Is(err, stream.ErrInvalidItem)
}

// Load reads every source to its end, in the order given, and returns the
// log sorted by event time. Events of equal time keep their input order
// (sources in the order given, records in file order), so the same inputs
// always give the same replay.
func Load(ctx context.Context, srcs []Source, opts LoadOptions) (*Log, error) {
	b := newBuilder()
	for _, src := range srcs {
		if err := b.read(ctx, src, opts); err != nil {
			return nil, err
		}
	}
	return b.finish(), nil
}

// FromEvents builds a log from events in memory, for tests and callers that
// hold their events already. Invalid events are counted as bad records.
func FromEvents(name string, evs []stream.Event) *Log {
	b := newBuilder()
	s := SourceSummary{Name: name}
	var prev int64
	for i := range evs {
		if evs[i].Validate() != nil {
			s.BadRecords++
			continue
		}
		if evs[i].TS < prev {
			s.OutOfOrder++
		}
		prev = max(prev, evs[i].TS)
		b.add(&evs[i])
		s.Events++
	}
	b.addSource(s)
	return b.finish()
}

type builder struct {
	l     *Log
	sessI map[string]uint32
	itemI map[string]uint32
}

func newBuilder() *builder {
	return &builder{l: &Log{}, sessI: map[string]uint32{}, itemI: map[string]uint32{}}
}

func intern(m map[string]uint32, names *[]string, s string) uint32 {
	if id, ok := m[s]; ok {
		return id
	}
	id := uint32(len(*names))
	m[s] = id
	*names = append(*names, s)
	return id
}

func (b *builder) add(ev *stream.Event) {
	b.l.ev = append(b.l.ev, rec{
		ts:   ev.TS,
		sess: intern(b.sessI, &b.l.sessions, ev.Session),
		item: intern(b.itemI, &b.l.items, ev.Item),
		kind: ev.Kind,
	})
}

func (b *builder) addSource(s SourceSummary) {
	b.l.sources = append(b.l.sources, s)
	b.l.bad += s.BadRecords
	b.l.reorder += s.OutOfOrder
}

type liner interface{ Line() int }

type itemTaker interface {
	TakeItems() []stream.ItemRecord
}

// read adds every event of src. The source is read on a goroutine of its
// own (prefetcher) while this one checks order and interns, in the order
// read, so the log is the one a single goroutine would build.
func (b *builder) read(ctx context.Context, src Source, opts LoadOptions) error {
	s := SourceSummary{Name: src.Name}
	var prev int64
	pf := startPrefetch(src.Reader)
	defer pf.stop()
	bad := func(err error) {
		s.BadRecords++
		if opts.OnBadRecord != nil {
			opts.OnBadRecord(src.Name, err)
		}
	}
	for {
		if err := ctx.Err(); err != nil {
			return err
		}
		f, ok := pf.next()
		if !ok {
			break // cannot happen: the last batch carries the source's end
		}
		notes := f.notes
		for i := range f.evs {
			for len(notes) > 0 && notes[0].at == i && !notes[0].itemsOf {
				bad(notes[0].bad)
				notes = notes[1:]
			}
			ev := &f.evs[i]
			if ev.TS < prev {
				if opts.StrictOrder {
					where := ""
					if len(f.lines) > 0 && f.lines[i] > 0 {
						where = fmt.Sprintf(" line %d", f.lines[i])
					}
					return fmt.Errorf("%w: %s%s: event time %s is before the previous event's %s (sort the input, or allow sorting in memory)",
						ErrOutOfOrder, src.Name, where, fmtTS(ev.TS), fmtTS(prev))
				}
				s.OutOfOrder++
			}
			prev = max(prev, ev.TS)
			if len(notes) > 0 && notes[0].at == i && notes[0].itemsOf {
				for _, r := range notes[0].items {
					if opts.Catalog {
						b.l.catalog = append(b.l.catalog, catEntry{ts: ev.TS, rec: r})
						s.Catalog++
					}
				}
				notes = notes[1:]
			}
			b.add(ev)
			s.Events++
		}
		for _, n := range notes { // bad records after the batch's last event
			bad(n.bad)
		}
		err := f.err
		pf.recycle(f)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return fmt.Errorf("read %s: %w", src.Name, err)
		}
	}
	b.addSource(s)
	return nil
}

func (b *builder) finish() *Log {
	l := b.l
	byTS := func(a, b rec) int { return cmp.Compare(a.ts, b.ts) }
	if !slices.IsSortedFunc(l.ev, byTS) {
		slices.SortStableFunc(l.ev, byTS)
	}
	slices.SortStableFunc(l.catalog, func(a, b catEntry) int { return cmp.Compare(a.ts, b.ts) })
	return l
}

// fmtTS writes unix milliseconds as RFC 3339 in UTC.
func fmtTS(ms int64) string {
	return time.UnixMilli(ms).UTC().Format("2006-01-02T15:04:05.000Z07:00")
}

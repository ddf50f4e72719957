package eval

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"io"
	"slices"
	"strings"
	"sync/atomic"
	"testing"

	"waymark/stream"
)

// scripted is a source that gives a fixed list of records, counts lines
// like a file reader (one per record) and hands out catalogue records with
// events like the dataset readers. After done is set, a call of Next is an
// error of the test: Load must not leave its reading goroutine running.
type scripted struct {
	t       *testing.T
	recs    []scriptRec
	end     error // returned after the last record
	i, line int
	pending []stream.ItemRecord
	done    atomic.Bool
}

type scriptRec struct {
	ev    stream.Event
	bad   error
	items []stream.ItemRecord
}

func (s *scripted) Next() (stream.Event, error) {
	if s.done.Load() {
		s.t.Error("the source was read after Load returned")
	}
	if s.i >= len(s.recs) {
		return stream.Event{}, s.end
	}
	r := s.recs[s.i]
	s.i++
	s.line = s.i
	if r.bad != nil {
		return stream.Event{}, r.bad
	}
	s.pending = r.items
	return r.ev, nil
}

func (s *scripted) Line() int { return s.line }

func (s *scripted) TakeItems() []stream.ItemRecord {
	out := s.pending
	s.pending = nil
	return out
}

// script makes n records spanning several prefetch batches: runs of bad
// records (one at each batch boundary), catalogue records on every 97th
// event, and every 1000th event a minute early (out of order).
func script(n int) []scriptRec {
	t0 := int64(1_767_225_600_000)
	var recs []scriptRec
	for i := range n {
		if i%prefetchBatch == 0 || i%613 == 0 || i%613 == 1 {
			recs = append(recs, scriptRec{bad: &stream.LineError{Line: len(recs) + 1, Err: fmt.Errorf("%w: record %d", stream.ErrInvalidEvent, len(recs))}})
			continue
		}
		ts := t0 + int64(i)*1000
		if i%1000 == 999 {
			ts -= 60_000
		}
		r := scriptRec{ev: stream.Event{Session: fmt.Sprintf("v%d", i%37), Item: fmt.Sprintf("p%d", i%211), TS: ts}}
		if i%97 == 0 {
			r.items = []stream.ItemRecord{{Item: fmt.Sprintf("p%d", i%211)}, {Item: fmt.Sprintf("extra%d", i)}}
		}
		recs = append(recs, r)
	}
	return recs
}

// TestLoadReadsLikeOneGoroutine checks Load, which reads on a goroutine of
// its own, against the plain sequential reading of the same records
// written out here: the same events in the same order after the stable
// sort, the same bad records reported in order, the same catalogue
// records, the same order error naming the same line, a failure of the
// source passed on, and a cancelled load that stops reading.
func TestLoadReadsLikeOneGoroutine(t *testing.T) {
	recs := script(3*prefetchBatch + 517)
	type ev struct {
		sess, item string
		ts         int64
	}
	var wantEv []ev
	var wantBad []string
	var wantCat []string
	firstLate := 0 // line of the first event earlier than one before it
	var prev int64
	for i, r := range recs {
		if r.bad != nil {
			wantBad = append(wantBad, r.bad.Error())
			continue
		}
		if r.ev.TS < prev && firstLate == 0 {
			firstLate = i + 1
		}
		prev = max(prev, r.ev.TS)
		wantEv = append(wantEv, ev{r.ev.Session, r.ev.Item, r.ev.TS})
		for _, it := range r.items {
			wantCat = append(wantCat, fmt.Sprintf("%s@%d", it.Item, r.ev.TS))
		}
	}
	slices.SortStableFunc(wantEv, func(a, b ev) int { return cmp.Compare(a.ts, b.ts) })

	tests := []struct {
		name string
		run  func(t *testing.T, src *scripted)
	}{
		{"events, bad records and catalogue", func(t *testing.T, src *scripted) {
			var bad []string
			l, err := Load(context.Background(), []Source{{Name: "s", Reader: src}}, LoadOptions{
				Catalog:     true,
				OnBadRecord: func(_ string, err error) { bad = append(bad, err.Error()) },
			})
			src.done.Store(true)
			if err != nil {
				t.Fatal(err)
			}
			var got []ev
			for _, r := range l.ev {
				got = append(got, ev{l.sessions[r.sess], l.items[r.item], r.ts})
			}
			if !slices.Equal(got, wantEv) {
				t.Errorf("%d events differ from the %d read in order", len(got), len(wantEv))
			}
			if !slices.Equal(bad, wantBad) {
				t.Errorf("bad records reported %d, want %d in order", len(bad), len(wantBad))
			}
			var cat []string
			for _, c := range l.catalog {
				cat = append(cat, fmt.Sprintf("%s@%d", c.rec.Item, c.ts))
			}
			slices.Sort(cat)
			want := slices.Sorted(slices.Values(wantCat))
			if !slices.Equal(cat, want) {
				t.Errorf("catalogue records %d, want %d", len(cat), len(want))
			}
			s := l.Sources()[0]
			if s.Events != int64(len(wantEv)) || s.BadRecords != int64(len(wantBad)) || s.Catalog != int64(len(wantCat)) || s.OutOfOrder == 0 {
				t.Errorf("summary %+v, want %d events, %d bad, %d catalogue, some out of order", s, len(wantEv), len(wantBad), len(wantCat))
			}
		}},
		{"strict order names the first late line", func(t *testing.T, src *scripted) {
			_, err := Load(context.Background(), []Source{{Name: "s", Reader: src}}, LoadOptions{StrictOrder: true})
			src.done.Store(true)
			if want := fmt.Sprintf("s line %d:", firstLate); !errors.Is(err, ErrOutOfOrder) || !strings.Contains(err.Error(), want) {
				t.Errorf("err %v, want ErrOutOfOrder with %q", err, want)
			}
		}},
		{"a failing source", func(t *testing.T, src *scripted) {
			src.end = errors.New("disk on fire")
			_, err := Load(context.Background(), []Source{{Name: "s", Reader: src}}, LoadOptions{})
			src.done.Store(true)
			if err == nil || !strings.Contains(err.Error(), "read s: disk on fire") {
				t.Errorf("err %v, want the source's failure", err)
			}
		}},
		{"cancelled", func(t *testing.T, src *scripted) {
			ctx, cancel := context.WithCancel(context.Background())
			cancel()
			_, err := Load(ctx, []Source{{Name: "s", Reader: src}}, LoadOptions{})
			src.done.Store(true)
			if !errors.Is(err, context.Canceled) {
				t.Errorf("err %v, want context.Canceled", err)
			}
		}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			tt.run(t, &scripted{t: t, recs: recs, end: io.EOF})
		})
	}
}

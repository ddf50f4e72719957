package dataset

import (
	"context"
	"errors"
	"fmt"
	"io"
	"testing"
	"time"

	"waymark/stream"
)

// newTestBus starts an embedded NATS server with JetStream on a random
// loopback port in a temp folder and connects a bus to it over TCP.
func newTestBus(t *testing.T) *stream.Bus {
	t.Helper()
	ctx := context.Background()
	srv, err := stream.StartServer(ctx, stream.ServerOptions{Dir: t.TempDir(), Listen: "127.0.0.1:-1"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		srv.Shutdown(ctx)
	})
	o := stream.DefaultBusOptions()
	o.URL = srv.ClientURL()
	bus, err := stream.Connect(ctx, o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(bus.Close)
	if err := bus.EnsureStreams(ctx); err != nil {
		t.Fatal(err)
	}
	return bus
}

func TestRangeReader(t *testing.T) {
	ctx := context.Background()
	bus := newTestBus(t)
	o := bus.Options()
	t0 := time.Date(2026, 3, 1, 9, 0, 0, 0, time.UTC).UnixMilli()
	var evs []stream.Event
	for i := range 10 {
		evs = append(evs, stream.Event{Session: fmt.Sprintf("v%d", i%3), Item: fmt.Sprintf("teapot-%d", i), TS: t0 + int64(i)*1000})
	}
	// Sequences 1-5: events; 6: a catalogue record; 7: a broken event;
	// 8-12: events.
	if err := bus.PublishEvents(ctx, evs[:5]); err != nil {
		t.Fatal(err)
	}
	if err := bus.PublishRaw(ctx, o.CatalogSubject, [][]byte{[]byte(`{"item":"teapot-5","attrs":{"shelf":"iron"}}`)}); err != nil {
		t.Fatal(err)
	}
	if err := bus.PublishRaw(ctx, o.Subject, [][]byte{[]byte(`{"session":"v1","item":`)}); err != nil {
		t.Fatal(err)
	}
	if err := bus.PublishEvents(ctx, evs[5:]); err != nil {
		t.Fatal(err)
	}
	afterFirst := time.Now()

	tests := []struct {
		name     string
		opts     RangeOptions
		items    []string // teapot numbers read, in order
		bad      int
		catalog  int
		firstSeq uint64
	}{
		{"everything", RangeOptions{}, seq(0, 10), 1, 1, 1},
		{"from sequence 3", RangeOptions{FromSeq: 3}, seq(2, 10), 1, 1, 3},
		{"sequences 2 to 5", RangeOptions{FromSeq: 2, ToSeq: 5}, seq(1, 5), 0, 0, 2},
		{"sequences 6 to 8", RangeOptions{FromSeq: 6, ToSeq: 8}, seq(5, 6), 1, 1, 8},
		{"beyond the end", RangeOptions{FromSeq: 100}, nil, 0, 0, 0},
		{"from a time before", RangeOptions{FromTime: afterFirst.Add(-time.Hour)}, seq(0, 10), 1, 1, 1},
		{"to a time before", RangeOptions{ToTime: afterFirst.Add(-time.Hour)}, nil, 0, 0, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			ro := tt.opts
			ro.Stream = o.Stream
			ro.FetchWait = 2 * time.Second
			r, err := OpenRange(ctx, bus.JetStream(), ro)
			if err != nil {
				t.Fatal(err)
			}
			var got []string
			bad, catalog := 0, 0
			var first uint64
			for {
				ev, err := r.Next()
				if errors.Is(err, io.EOF) {
					break
				}
				var le *stream.LineError
				if errors.As(err, &le) {
					bad++
					if le.Line != 7 {
						t.Errorf("bad message reported at %d, want sequence 7", le.Line)
					}
					continue
				}
				if err != nil {
					t.Fatal(err)
				}
				if first == 0 {
					first = ev.Seq
				}
				catalog += len(r.TakeItems())
				got = append(got, ev.Item[len("teapot-"):])
			}
			if fmt.Sprint(got) != fmt.Sprint(tt.items) || bad != tt.bad || catalog != tt.catalog || first != tt.firstSeq {
				t.Errorf("items %v bad %d catalogue %d first seq %d; want %v, %d, %d, %d", got, bad, catalog, first, tt.items, tt.bad, tt.catalog, tt.firstSeq)
			}
		})
	}
}

func seq(from, to int) []string {
	var out []string
	for i := from; i < to; i++ {
		out = append(out, fmt.Sprint(i))
	}
	return out
}

func TestRangeOptionsValidation(t *testing.T) {
	now := time.Now()
	for _, o := range []RangeOptions{
		{},
		{Stream: "S", FromSeq: 5, ToSeq: 2},
		{Stream: "S", FromSeq: 1, FromTime: now},
		{Stream: "S", ToSeq: 1, ToTime: now},
		{Stream: "S", FromTime: now, ToTime: now.Add(-time.Second)},
		{Stream: "S", Subject: "a", CatalogSubject: "a"},
	} {
		if err := o.validate(); !errors.Is(err, ErrBadOption) {
			t.Errorf("%+v: err %v, want ErrBadOption", o, err)
		}
	}
}

func TestRangeUnknownStream(t *testing.T) {
	bus := newTestBus(t)
	if _, err := OpenRange(context.Background(), bus.JetStream(), RangeOptions{Stream: "NOPE"}); err == nil {
		t.Error("opened a range of a stream that does not exist")
	}
}

package session

import (
	"context"
	"fmt"
	"slices"
	"testing"
	"time"

	"waymark/bench/synth"
	"waymark/store"
	"waymark/stream"
)

// TestQueuedFlushesCommitInOrder hands the engine flush after flush without
// waiting, so commits queue behind each other (the writer stops only when
// two are behind), then reopens the store: the reloaded state must be
// exactly what one clean in-process pipeline learns from the same events.
// Events: the benchmarks' invented shop (bench/synth), 5000 items with Zipf
// popularity, so most rows change in some flushes and not in others.
func TestQueuedFlushesCommitInOrder(t *testing.T) {
	ctx := context.Background()
	evs := synth.Generate(synth.Options{Events: 30_000, Items: 5000, Concurrent: 50})
	dir := t.TempDir()
	st, err := store.Open(ctx, dir, store.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	e, err := NewEngine(ctx, st, nil, DefaultEngineOptions())
	if err != nil {
		t.Fatal(err)
	}
	const per = 1000
	flushes := 0
	for i := 0; i < len(evs); i += per {
		var msgs []stream.Msg
		for j := i; j < min(i+per, len(evs)); j++ {
			msgs = append(msgs, stream.Msg{Seq: uint64(j + 1), Subject: "waymark.events", Data: evs[j].AppendJSON(nil)})
		}
		if err := e.Handle(ctx, msgs); err != nil {
			t.Fatal(err)
		}
		if err := e.Flush(ctx); err != nil {
			t.Fatal(err)
		}
		flushes++
	}
	if err := e.Sync(ctx); err != nil {
		t.Fatal(err)
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}

	st, err = store.Open(ctx, dir, store.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	cp, err := st.Checkpoint()
	if err != nil {
		t.Fatal(err)
	}
	if cp.Seq != uint64(len(evs)) || cp.Applied != uint64(len(evs)) {
		t.Fatalf("after %d flushes the checkpoint holds seq %d, applied %d; want %d", flushes, cp.Seq, cp.Applied, len(evs))
	}
	loaded, err := NewPipeline(e.opts.Pipeline)
	if err != nil {
		t.Fatal(err)
	}
	loaded.Tracker.Persist()
	if err := loaded.Load(ctx, st); err != nil {
		t.Fatal(err)
	}
	clean, err := NewPipeline(e.opts.Pipeline)
	if err != nil {
		t.Fatal(err)
	}
	for i := range evs {
		clean.Apply(&evs[i])
	}
	if loaded.Dict.Len() != clean.Dict.Len() {
		t.Fatalf("%d items loaded, clean run %d", loaded.Dict.Len(), clean.Dict.Len())
	}
	export := func(p *Pipeline) []stream.PriorRow {
		var rows []stream.PriorRow
		if err := p.ExportPriors(func(r stream.PriorRow) error { rows = append(rows, r); return nil }); err != nil {
			t.Fatal(err)
		}
		return rows
	}
	got, want := export(loaded), export(clean)
	if len(want) == 0 {
		t.Fatal("the clean run exports no neighbour rows")
	}
	if len(got) != len(want) {
		t.Fatalf("%d neighbour rows reloaded, clean run %d", len(got), len(want))
	}
	for i := range want {
		g, w := got[i], want[i]
		if g.Model != w.Model || g.Item != w.Item || !slices.Equal(g.Neighbors, w.Neighbors) {
			t.Fatalf("row %d: reloaded %s %s %v, clean run %s %s %v", i, g.Model, g.Item, g.Neighbors, w.Model, w.Item, w.Neighbors)
		}
	}
}

// TestIDFloodFlush: a flood of events that each bring a new item and
// every fourth a new session (a crawler, or an id-format change upstream:
// issue 12, finding 1) makes flushes of many small writes. With the
// store's memtable at 8 MiB, Badger's transaction holds 13,107 entries
// (15 % of the memtable over a skiplist node's size, badger/v4 db.go) and
// the size trigger serve derives from it (a tenth of the memtable,
// Service.Open) lets a flush of these events gather about 25,000 (the first one, at 5,000 events). Before the
// journal, the first such flush failed with "flush too large for one
// transaction" and serve exited on every restart; now every event is
// applied and the reloaded state is what a clean pipeline learns.
func TestIDFloodFlush(t *testing.T) {
	ctx := context.Background()
	const n = 12_000
	evs := make([]stream.Event, n)
	for i := range evs {
		evs[i] = stream.Event{Session: fmt.Sprintf("crawl-%d", i/4), Item: fmt.Sprintf("new-%d", i), TS: 1767225600000 + int64(i)}
	}
	so := store.DefaultOptions()
	so.MemTableSize = 8 << 20
	dir := t.TempDir()
	st, err := store.Open(ctx, dir, so)
	if err != nil {
		t.Fatal(err)
	}
	eo := DefaultEngineOptions()
	eo.FlushBytes = int(so.MemTableSize / 10)
	eo.FlushInterval = time.Hour
	e, err := NewEngine(ctx, st, nil, eo)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < n; i += 1000 {
		msgs := make([]stream.Msg, 0, 1000)
		for j := i; j < i+1000; j++ {
			msgs = append(msgs, stream.Msg{Seq: uint64(j + 1), Subject: "waymark.events", Data: evs[j].AppendJSON(nil)})
		}
		if err := e.Handle(ctx, msgs); err != nil {
			t.Fatalf("after %d events: %v", i+1000, err)
		}
	}
	if err := e.Sync(ctx); err != nil {
		t.Fatal(err)
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}
	st, err = store.Open(ctx, dir, so)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	cp, err := st.Checkpoint()
	if err != nil {
		t.Fatal(err)
	}
	if cp.Seq != n || cp.Applied != n {
		t.Fatalf("checkpoint seq %d, applied %d; want %d", cp.Seq, cp.Applied, n)
	}
	loaded, err := NewPipeline(e.opts.Pipeline)
	if err != nil {
		t.Fatal(err)
	}
	loaded.Tracker.Persist()
	if err := loaded.Load(ctx, st); err != nil {
		t.Fatal(err)
	}
	clean, err := NewPipeline(e.opts.Pipeline)
	if err != nil {
		t.Fatal(err)
	}
	for i := range evs {
		clean.Apply(&evs[i])
	}
	if loaded.Dict.Len() != n || clean.Dict.Len() != n {
		t.Fatalf("%d items reloaded, %d in the clean run; want %d", loaded.Dict.Len(), clean.Dict.Len(), n)
	}
	export := func(p *Pipeline) []stream.PriorRow {
		var rows []stream.PriorRow
		if err := p.ExportPriors(func(r stream.PriorRow) error { rows = append(rows, r); return nil }); err != nil {
			t.Fatal(err)
		}
		return rows
	}
	got, want := export(loaded), export(clean)
	if len(got) != len(want) || len(want) == 0 {
		t.Fatalf("%d neighbour rows reloaded, clean run %d", len(got), len(want))
	}
	for i := range want {
		if g, w := got[i], want[i]; g.Model != w.Model || g.Item != w.Item || !slices.Equal(g.Neighbors, w.Neighbors) {
			t.Fatalf("row %d: reloaded %s %s %v, clean run %s %s %v", i, g.Model, g.Item, g.Neighbors, w.Model, w.Item, w.Neighbors)
		}
	}
}

package session

import (
	"context"
	"slices"
	"testing"

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

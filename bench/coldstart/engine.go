package main

import (
	"context"
	"encoding/json"
	"fmt"

	"waymark/session"
	"waymark/store"
	"waymark/stream"
)

// engine is a serve engine fed by hand: the messages a consumer would hand
// it, numbered as a stream would number them, with no bus in between. Its
// store is in memory and it never flushes within a run, which changes
// nothing it answers (flushes only persist).
type engine struct {
	e    *session.Engine
	st   *store.Store
	opts session.EngineOptions
	seq  uint64
	msg  [1]stream.Msg
}

// engineConfig is what a run varies.
type engineConfig struct {
	blend        string
	exploreEvery int
	exploreSeed  uint64
}

func newEngine(ctx context.Context, c engineConfig) (*engine, error) {
	st, err := store.Open(ctx, "", store.Options{InMemory: true, MemTableSize: 64 << 20})
	if err != nil {
		return nil, err
	}
	o := session.DefaultEngineOptions()
	o.Blend = c.blend
	o.Pipeline.Models = []string{c.blend}
	o.ExploreShare = 0
	if c.exploreEvery > 0 { // the old flag's meaning, as serve's deprecated alias reads it
		o.ExploreShare = 1 / float64(c.exploreEvery)
	}
	o.RequestPrefix = "coldstart" // reproducible ids, so reproducible draws
	o.ExploreSeed = c.exploreSeed
	o.FlushEvents = 1 << 40
	o.FlushInterval = 1 << 62 // a run is over long before
	e, err := session.NewEngine(ctx, st, nil, o)
	if err != nil {
		st.Close()
		return nil, err
	}
	return &engine{e: e, st: st, opts: o}, nil
}

func (g *engine) close() { g.st.Close() }

// send applies one message on subject.
func (g *engine) send(ctx context.Context, subject string, data []byte) error {
	g.seq++
	g.msg[0] = stream.Msg{Seq: g.seq, Subject: subject, Data: data}
	if err := g.e.Handle(ctx, g.msg[:]); err != nil {
		return err
	}
	return nil
}

func (g *engine) sendItem(ctx context.Context, r *stream.ItemRecord) error {
	return g.send(ctx, g.opts.CatalogSubject, r.AppendJSON(nil))
}

func (g *engine) sendEvent(ctx context.Context, ev *stream.Event) error {
	return g.send(ctx, "waymark.events", ev.AppendJSON(nil))
}

func (g *engine) sendControl(ctx context.Context, c stream.Control) error {
	b, err := json.Marshal(c)
	if err != nil {
		return err
	}
	return g.send(ctx, g.opts.ControlSubject, b)
}

// rejected reports the messages the engine refused so far.
func (g *engine) rejected() error {
	if n := g.e.Stats().EventsRejected; n > 0 {
		return fmt.Errorf("the engine rejected %d messages", n)
	}
	return nil
}

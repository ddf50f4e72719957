package session

import (
	"context"
	"encoding/json"
	"reflect"
	"strings"
	"testing"

	"waymark/bench/synth"
	"waymark/models"
	"waymark/store"
	"waymark/stream"
)

// TestLearnedBlendRestartsExactly learns the first half of a stream in a
// pipeline with the default blend, flushes it into a Badger store, reloads
// it into a new pipeline and learns the second half there. The learned
// blend's state (pool scores, choice, weights) and its answers must equal
// those of a pipeline that never stopped, and the choice must be the one
// before the restart right after loading. Events: the benchmarks' invented
// shop (bench/synth).
func TestLearnedBlendRestartsExactly(t *testing.T) {
	ctx := context.Background()
	evs := synth.Generate(synth.Options{Events: 12_000, Items: 800, Concurrent: 40})
	half := len(evs) / 2
	o := DefaultPipelineOptions()
	build := func() *Pipeline {
		p, err := NewPipeline(o)
		if err != nil {
			t.Fatal(err)
		}
		p.Tracker.Persist()
		return p
	}
	learner := func(p *Pipeline) *models.BlendLearner {
		r, ok := p.Recommender(models.DefaultBlendSpec)
		if !ok {
			t.Fatal("no default blend")
		}
		l := r.(*models.Blend).Learner()
		if l == nil {
			t.Fatal("the default blend does not learn its weights")
		}
		return l
	}
	clean := build()
	for i := range evs {
		clean.Apply(&evs[i])
	}

	first := build()
	for i := range evs[:half] {
		first.Apply(&evs[i])
	}
	before := learner(first).Stats()
	if before.Evaluated == 0 {
		t.Fatal("no click evaluated in the first half")
	}
	st, err := store.Open(ctx, t.TempDir(), store.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	// A flush records the stream sequence it reached, as the engine's do;
	// state without one reads as a lost checkpoint.
	cp := first.Checkpoint()
	cp.Seq = uint64(half)
	if err := st.Commit(func(tx *store.Txn) error { return first.Flush(tx, cp) }); err != nil {
		t.Fatal(err)
	}
	restarted := build()
	if err := restarted.Load(ctx, st); err != nil {
		t.Fatal(err)
	}
	if got := learner(restarted).Stats(); !reflect.DeepEqual(got, before) {
		t.Fatalf("after a restart the learner holds\n%+v\nbefore it\n%+v", got, before)
	}
	for i := half; i < len(evs); i++ {
		restarted.Apply(&evs[i])
	}
	got, want := learner(restarted).Stats(), learner(clean).Stats()
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("restarted learner\n%+v\nuninterrupted\n%+v", got, want)
	}
	rb, _ := restarted.Recommender(models.DefaultBlendSpec)
	cb, _ := clean.Recommender(models.DefaultBlendSpec)
	for _, key := range []string{evs[len(evs)-1].Session, evs[len(evs)-2].Session, evs[half].Session} {
		q1, _ := restarted.SessionQuery(key)
		q2, _ := clean.SessionQuery(key)
		a1, a2 := rb.Recommend(&q1, 20, nil, nil), cb.Recommend(&q2, 20, nil, nil)
		if !reflect.DeepEqual(a1, a2) {
			t.Fatalf("session %s: restarted answers %v, uninterrupted %v", key, a1, a2)
		}
	}
}

// TestStatsShowLearnedBlend checks that /v1/stats' source, Engine.Stats,
// reports the default blend's choice and pool, and that a blend with
// fixed weights reports none. Events: bench/synth's invented shop.
func TestStatsShowLearnedBlend(t *testing.T) {
	ctx := context.Background()
	evs := synth.Generate(synth.Options{Events: 3000, Items: 300, Concurrent: 20})
	for _, c := range []struct {
		blend   string
		learned bool
	}{{models.DefaultBlendSpec, true}, {"blend(markov=1,sr=1)", false}} {
		t.Run(c.blend, func(t *testing.T) {
			st, err := store.Open(ctx, t.TempDir(), store.DefaultOptions())
			if err != nil {
				t.Fatal(err)
			}
			defer st.Close()
			o := DefaultEngineOptions()
			o.Blend = c.blend
			e, err := NewEngine(ctx, st, nil, o)
			if err != nil {
				t.Fatal(err)
			}
			var msgs []stream.Msg
			for i := range evs {
				msgs = append(msgs, stream.Msg{Seq: uint64(i + 1), Subject: "waymark.events", Data: evs[i].AppendJSON(nil)})
			}
			if err := e.Handle(ctx, msgs); err != nil {
				t.Fatal(err)
			}
			s := e.Stats()
			if !c.learned {
				if s.Blend != nil {
					t.Fatalf("fixed blend reports learned state %+v", s.Blend)
				}
				return
			}
			if s.Blend == nil || len(s.Blend.Rules) != 2 || s.Blend.Rules[0].Chosen == "" || len(s.Blend.Pool) == 0 || s.Blend.Evaluated == 0 {
				t.Fatalf("learned blend stats %+v", s.Blend)
			}
			if w := s.Blend.Rules[0].Weights; len(w) == 0 {
				t.Fatalf("no weights in %+v", s.Blend.Rules[0])
			}
			b, err := json.Marshal(s)
			if err != nil {
				t.Fatal(err)
			}
			if !strings.Contains(string(b), `"blend":{"every":8`) {
				t.Fatalf("stats JSON lacks the blend: %s", b)
			}
		})
	}
}

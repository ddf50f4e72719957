package session

import (
	"fmt"
	"maps"
	"math/rand/v2"
	"slices"
	"testing"

	"waymark/stream"
)

// TestApplyInternedLearnsLikeApply feeds the same clicks to two pipelines,
// one through Apply and one through ApplyInterned wherever the item's id is
// known (Apply for a first click, as a replay does), and checks that they
// flush the same store, byte for byte: dictionary, sessions, every model
// and the checkpoint.
func TestApplyInternedLearnsLikeApply(t *testing.T) {
	o := DefaultPipelineOptions()
	o.Models = []string{"sr", "markov", "iknn", "blend"}
	build := func() *Pipeline {
		p, err := NewPipeline(o)
		if err != nil {
			t.Fatal(err)
		}
		p.Tracker.Persist()
		return p
	}
	byName, byID := build(), build()
	rng := rand.New(rand.NewPCG(3, 4))
	ts := int64(1_767_225_600_000)
	interned := 0
	for i := range 20_000 {
		ts += int64(rng.IntN(5_000))
		ev := stream.Event{Session: fmt.Sprintf("v%d", rng.IntN(400)), Item: fmt.Sprintf("tent-%d", rng.IntN(900)), TS: ts}
		byName.Apply(&ev)
		if id, ok := byID.Dict.Lookup(ev.Item); ok {
			byID.ApplyInterned(&ev, id)
			interned++
		} else {
			byID.Apply(&ev)
		}
		if i%5_000 == 4_999 {
			a, b := mapKV{}, mapKV{}
			if err := byName.Flush(a, byName.Checkpoint()); err != nil {
				t.Fatal(err)
			}
			if err := byID.Flush(b, byID.Checkpoint()); err != nil {
				t.Fatal(err)
			}
			if !maps.EqualFunc(a, b, slices.Equal) {
				t.Fatalf("after %d clicks the stores differ: %d and %d keys", i+1, len(a), len(b))
			}
			if len(a) == 0 {
				t.Fatal("nothing flushed: the comparison would hold trivially")
			}
		}
	}
	if interned < 10_000 {
		t.Fatalf("only %d clicks went through ApplyInterned", interned)
	}
}

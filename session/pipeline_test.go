package session

import (
	"fmt"
	"maps"
	"math/rand/v2"
	"slices"
	"testing"

	"waymark/models"
	"waymark/stream"
)

// TestApplyVariantsLearnLikeApply feeds the same clicks to three
// pipelines: one through SessionQuery then Apply, one through
// ApplyInterned wherever the item's id is known (Apply for a first click,
// as a replay does), one through ApplyAsked. It checks that ApplyAsked
// hands its callback the query SessionQuery gave just before the click,
// and that all three flush the same store, byte for byte: dictionary,
// sessions, every model and the checkpoint. Gaps past the session timeout
// and a dictionary cap below the item count take the paths where a
// session restarts and where a click only counts as overflow.
func TestApplyVariantsLearnLikeApply(t *testing.T) {
	o := DefaultPipelineOptions()
	o.Models = []string{"sr", "markov", "iknn", "blend"}
	o.MaxItems = 700
	build := func() *Pipeline {
		p, err := NewPipeline(o)
		if err != nil {
			t.Fatal(err)
		}
		p.Tracker.Persist()
		return p
	}
	byName, byID, asked := build(), build(), build()
	rng := rand.New(rand.NewPCG(3, 4))
	ts := int64(1_767_225_600_000)
	interned, restarted, overflow := 0, 0, 0
	for i := range 20_000 {
		ts += int64(rng.IntN(5_000))
		if rng.IntN(500) == 0 {
			ts += 40 * 60 * 1000 // past the 30-minute timeout: sessions restart
		}
		ev := stream.Event{Session: fmt.Sprintf("v%d", rng.IntN(400)), Item: fmt.Sprintf("tent-%d", rng.IntN(900)), TS: ts}
		want, wantOK := byName.SessionQuery(ev.Session)
		if wantOK && len(want.Session) > 0 && ts-want.Session[len(want.Session)-1].TS > o.Tracker.Timeout.Milliseconds() {
			restarted++
		}
		want.Session = slices.Clone(want.Session)
		byName.Apply(&ev)
		if id, ok := byID.Dict.Lookup(ev.Item); ok {
			byID.ApplyInterned(&ev, id)
			interned++
		} else {
			byID.Apply(&ev)
		}
		id, known := asked.Dict.Lookup(ev.Item)
		if !known && asked.Dict.Len() >= o.MaxItems {
			overflow++
		}
		calls := 0
		asked.ApplyAsked(&ev, id, known, func(q *models.Query, ok bool) {
			calls++
			if ok != wantOK || !slices.Equal(q.Session, want.Session) || q.Now != want.Now || q.SessionNo != want.SessionNo {
				t.Fatalf("click %d: ApplyAsked asked %+v (tracked %v), SessionQuery gave %+v (%v)", i, *q, ok, want, wantOK)
			}
		})
		if calls != 1 {
			t.Fatalf("click %d: ask called %d times", i, calls)
		}
		if i%5_000 == 4_999 {
			stores := make([]mapKV, 3)
			for j, p := range []*Pipeline{byName, byID, asked} {
				stores[j] = mapKV{}
				if err := p.Flush(stores[j], p.Checkpoint()); err != nil {
					t.Fatal(err)
				}
			}
			if len(stores[0]) == 0 {
				t.Fatal("nothing flushed: the comparison would hold trivially")
			}
			for j, name := range []string{"ApplyInterned", "ApplyAsked"} {
				if !maps.EqualFunc(stores[0], stores[j+1], slices.Equal) {
					t.Fatalf("after %d clicks %s's store differs from Apply's: %d and %d keys", i+1, name, len(stores[j+1]), len(stores[0]))
				}
			}
		}
	}
	if interned < 10_000 || restarted == 0 || overflow == 0 {
		t.Fatalf("paths not taken: %d interned, %d restarted sessions, %d overflow clicks", interned, restarted, overflow)
	}
}

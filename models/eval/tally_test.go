package eval

import (
	"fmt"
	"math/rand/v2"
	"reflect"
	"testing"

	"waymark/models"
	"waymark/stream"
)

// TestTallierScoresLikeScore replays one log twice, scoring each query on
// the replay's goroutine (evaluator.score, as kfold does) and through the
// tallier's goroutine, for the next-click and rest-of-session targets, and
// checks that every result (metrics, coverage, popularity, cold and
// position breakdowns, per-query reciprocal ranks) is the same: the
// tallier only moves the work, so it must not change a bit of it. The log
// spans many batches, so batch hand-over and reuse are crossed.
func TestTallierScoresLikeScore(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	ts := int64(1_767_225_600_000)
	var evs []stream.Event
	for range 6_000 {
		ts += int64(rng.IntN(3_000))
		evs = append(evs, stream.Event{Session: fmt.Sprintf("v%d", rng.IntN(300)), Item: fmt.Sprintf("lamp-%d", rng.IntN(150)), TS: ts})
	}
	l := FromEvents("lamps", evs)
	for _, target := range []Target{TargetNext, TargetRest} {
		t.Run(string(target), func(t *testing.T) {
			o := DefaultOptions()
			o.Models = []string{"sr", "markov", "blend"}
			o.Target = target
			if err := o.Validate(); err != nil {
				t.Fatal(err)
			}
			pl := preprocess(l, &o)
			replay := func(viaTallier bool) (*evaluator, int) {
				p, err := newPipeline(&o)
				if err != nil {
					t.Fatal(err)
				}
				e := newEvaluator(l, &o, keptItems(l, pl))
				e.bind(p, p.Dict)
				var rest *restIndex
				if target == TargetRest {
					rest = newRestIndex(l, pl)
				}
				var tl *tallier
				if viaTallier {
					tl = startTallier(e, rest)
				}
				pos := map[int32]int{}
				queries := 0
				for i, r := range l.ev {
					in := pl.inst[i]
					ev := stream.Event{Session: l.sessions[r.sess], Item: l.items[r.item], TS: r.ts}
					if q, ok := p.SessionQuery(ev.Session); ok && pos[in] > 0 {
						skip := func(id models.ItemID) bool {
							for _, s := range q.Session {
								if s.Item == id {
									return true
								}
							}
							return false
						}
						queries++
						if viaTallier {
							tl.query(&q, skip, i, in, r.item, pos[in])
						} else {
							rel, nRel := func(li uint32) bool { return li == r.item }, 1
							if rest != nil {
								rel, nRel = rest.at(i, in)
							}
							e.score(&q, skip, rel, nRel, r.item, pos[in])
						}
					}
					p.Apply(&ev)
					if viaTallier {
						tl.learned(r.item)
					} else {
						e.learned(r.item)
					}
					pos[in]++
				}
				if viaTallier {
					tl.wait()
				}
				return e, queries
			}
			direct, n := replay(false)
			queued, _ := replay(true)
			if n < 4*tallyBatchOps {
				t.Fatalf("%d queries cross too few batches", n)
			}
			want, got := direct.finish(), queued.finish()
			for i := range want { // wall time: the one thing that may differ
				want[i].latency, got[i].latency = Latency{}, Latency{}
			}
			if !reflect.DeepEqual(got, want) {
				t.Errorf("results through the tallier differ from scoring in place:\n got %+v\nwant %+v", got, want)
			}
			for i := range direct.ms {
				if !reflect.DeepEqual(queued.ms[i].rr, direct.ms[i].rr) || !reflect.DeepEqual(queued.ms[i].best, direct.ms[i].best) {
					t.Errorf("%s: per-query ranks or best ranks differ", direct.ms[i].spec)
				}
				if direct.ms[i].n != int64(n) {
					t.Errorf("%s: %d queries scored, %d asked", direct.ms[i].spec, direct.ms[i].n, n)
				}
			}
		})
	}
}

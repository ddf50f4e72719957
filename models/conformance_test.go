package models

import (
	"errors"
	"fmt"
	"slices"
	"sync"
	"testing"
)

// The conformance suite: every model a Set can build, with its default
// spec, against the invariants every Recommender must keep (STYLE habit
// 14). The stream is the generated shop of csWorld: catalogue records,
// unavailable items, items launched mid-stream.
func TestConformance(t *testing.T) {
	w := newCSWorld(1, 400)
	half := len(w.events) / 2
	ref := firstClickTS(w.events)
	skipSet := map[ItemID]bool{1: true, 13: true, 40: true}
	skip := func(id ItemID) bool { return skipSet[id] }
	queries := []*Query{
		csQuery(w.end, 0),                   // empty session
		csQuery(w.end, 0, 2),                // one warm item
		csQuery(w.end, 0, 14, 15, 16),       // a seeds session
		csQuery(w.end, 0, 30, 5, 31),        // holds an unavailable item
		csQuery(w.end, 0, 52),               // a new item
		csQuery(w.end, 0, 55),               // a new item nobody clicked
		csQuery(w.end, 3, 24, 25),           // tracked: skips session 3 itself
		csQuery(w.end+3_600_000, 0, 40, 41), // an hour after the stream
		csQuery(w.end, 0, 999),              // an id no model knows
	}
	names := NewSet(DefaultSetOptions()).Names()
	if len(names) < 10 {
		t.Fatalf("the set builds only %v", names)
	}
	// Tight bounds, so eviction, posting cuts, pool compaction and the
	// context cap all happen within the stream.
	names = append(names,
		"vsknn(sessions=60,postings=8,m=20,k=10,len=3)",
		"vstan(retention=0.05,idf=0,lambda_snh=0.01)",
		"sknn(idf=1,m=5,k=5)",
		"content(qtokens=2,postings=3,span=1,vector=0.3)",
		"content(exact=4,vector=1)",
		"fresh(pool=5,window=3,min_impressions=0,content=0)",
		"trending(top=3,contexts=3,short=0.5,long=2)",
		"blend(content=1,vstan=1,sr=1,backoff=0)",
		"blend(backoff=3)",
	)
	for _, name := range names {
		t.Run(name, func(t *testing.T) {
			build := func() (*csDriver, Recommender, Model) {
				s := NewSet(DefaultSetOptions())
				m, err := s.Get(name)
				if err != nil {
					t.Fatalf("build %s: %v", name, err)
				}
				return newCSDriver(s), s.Recommender(m), m
			}
			// d1 learns in two halves with a flush between; d2 in one go;
			// d3 loads what d1 flushed.
			d1, r1, m1 := build()
			kv := newMemKV()
			d1.play(w.events[:half])
			d1.flush(t, kv)
			d1.play(w.events[half:])
			d1.flush(t, kv)
			d2, r2, _ := build()
			d2.play(w.events)
			d3, r3, _ := build()
			d3.load(t, kv, ref)

			// A flush with nothing changed writes nothing.
			idle := newMemKV()
			d1.flush(t, idle)
			if idle.sets+idle.dels != 0 {
				t.Errorf("a flush with no change wrote %d entries and deleted %d", idle.sets, idle.dels)
			}

			answered := 0
			for qi, q := range queries {
				for _, k := range []int{1, 5, 20} {
					for _, sk := range []func(ItemID) bool{nil, skip} {
						got := r1.Recommend(q, k, sk, nil)
						checkRanked(t, qi, k, got, sk, w.unavailable)
						if len(got) > 0 {
							answered++
						}
						if again := r2.Recommend(q, k, sk, nil); !slices.Equal(got, again) {
							t.Errorf("query %d k=%d: same clicks, different answers:\n%v\n%v", qi, k, got, again)
						}
						if loaded := r3.Recommend(q, k, sk, nil); !slices.Equal(got, loaded) {
							t.Errorf("query %d k=%d: after Flush+Load:\n%v\nwant\n%v", qi, k, loaded, got)
						}
					}
				}
				// ScoreItems agrees across the three instances too.
				items := []ItemID{0, 2, 3, 14, 26, 50, 55, 999}
				a, b := make([]float64, len(items)), make([]float64, len(items))
				m1.ScoreItems(q, items, a)
				mustModel(t, r3).ScoreItems(q, items, b)
				if !slices.Equal(a, b) {
					t.Errorf("query %d: ScoreItems after Flush+Load %v, want %v", qi, b, a)
				}
			}
			// Queries run concurrently with each other (the pipeline
			// serialises them only with learning): the same answers from
			// four goroutines at once. Run with -race to check the scratch
			// memory the models reuse.
			var wg sync.WaitGroup
			errs := make(chan string, 4*len(queries))
			for g := range 4 {
				wg.Add(1)
				go func() {
					defer wg.Done()
					for i := range queries {
						q := queries[(i+g)%len(queries)]
						want := r2.Recommend(q, 20, skip, nil)
						for range 3 {
							if got := r1.Recommend(q, 20, skip, nil); !slices.Equal(got, want) {
								errs <- fmt.Sprintf("concurrent query %d: %v, want %v", (i+g)%len(queries), got, want)
								return
							}
						}
					}
				}()
			}
			wg.Wait()
			close(errs)
			for e := range errs {
				t.Error(e)
			}
			if answered == 0 {
				t.Errorf("%s answered no query", name)
			}
		})
	}
}

// mustModel digs the model out of a Set recommender.
func mustModel(t *testing.T, r Recommender) Model {
	t.Helper()
	switch x := r.(type) {
	case *Blend:
		return x
	case *availRecommender:
		return x.m
	}
	t.Fatalf("unexpected recommender %T", r)
	return nil
}

func checkRanked(t *testing.T, qi, k int, got []Scored, skip func(ItemID) bool, unavailable []ItemID) {
	t.Helper()
	if len(got) > k {
		t.Errorf("query %d: %d items for k=%d", qi, len(got), k)
	}
	seen := map[ItemID]bool{}
	for i, s := range got {
		if seen[s.Item] {
			t.Errorf("query %d: item %d twice", qi, s.Item)
		}
		seen[s.Item] = true
		if !(s.Score > 0) {
			t.Errorf("query %d: item %d has score %g", qi, s.Item, s.Score)
		}
		if i > 0 && cmpScore(got[i-1].Score, s.Score, got[i-1].Item, s.Item) >= 0 {
			t.Errorf("query %d: not sorted at %d: %v", qi, i, got)
		}
		if skip != nil && skip(s.Item) {
			t.Errorf("query %d: excluded item %d returned", qi, s.Item)
		}
		if slices.Contains(unavailable, s.Item) {
			t.Errorf("query %d: unavailable item %d returned", qi, s.Item)
		}
	}
}

func firstClickTS(evs []csEvent) int64 {
	for _, e := range evs {
		if e.Info == nil && e.Prior == nil {
			return e.TS
		}
	}
	return 0
}

// Stored entries that do not decode are refused with ErrCorrupt, never a
// panic.
func TestLoadRefusesCorruptEntries(t *testing.T) {
	s := NewSet(DefaultSetOptions())
	for _, n := range s.Names() {
		if _, err := s.Get(n); err != nil {
			t.Fatal(err)
		}
	}
	d := newCSDriver(s)
	bad := []struct{ key, val string }{
		{"", ""},
		{"x", "1"},
		{"s/\x00\x00\x00\x00\x00\x00\x00\x01", "short"},
		{"i/\x00\x00\x00\x01", "\xff\xff\xff"},
		{"c/\x00\x00\x00\x00\x00\x00\x00\x01", "1234567"},
		{"\x00\x00\x00\x01", "\x09"},
	}
	for _, m := range d.learners {
		p, ok := m.(Persistent)
		if !ok {
			continue
		}
		switch m.(type) {
		case *Catalog, *SessionIndex, *Content, *Fresh, *Trending:
		default:
			continue // the core models have their own tests
		}
		for _, b := range bad {
			key := []byte(p.Prefix() + b.key)
			func() {
				defer func() {
					if r := recover(); r != nil {
						t.Errorf("%s: Load(%q) panicked: %v", p.Prefix(), key, r)
					}
				}()
				if err := p.Load(key, []byte(b.val)); err != nil && !errors.Is(err, ErrCorrupt) {
					t.Errorf("%s: Load(%q): %v, want ErrCorrupt", p.Prefix(), key, err)
				} else if err == nil {
					t.Errorf("%s: Load(%q, %q) accepted", p.Prefix(), key, b.val)
				}
			}()
		}
	}
}

// The interfaces the pipeline looks for, checked at compile time.
var (
	_ Persistent     = (*Catalog)(nil)
	_ CatalogLearner = (*Catalog)(nil)
	_ DecayAware     = (*Catalog)(nil)
	_ Persistent     = (*SessionIndex)(nil)
	_ Forgetter      = (*SessionIndex)(nil)
	_ Persistent     = (*Content)(nil)
	_ CatalogLearner = (*Content)(nil)
	_ Persistent     = (*Fresh)(nil)
	_ CatalogLearner = (*Fresh)(nil)
	_ Persistent     = (*Trending)(nil)
	_ CatalogLearner = (*Trending)(nil)
	_ Recommender    = (*Blend)(nil)
)

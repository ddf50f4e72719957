package models

import (
	"math/rand/v2"
	"slices"
	"testing"
)

// TestRowTopsAgainstWalk checks that a single-model query answered from the
// kept lists (rowTops) equals the answer of walking and ranking the whole
// row (Candidates then TopK, the reference), for sr and markov, through
// growth, pruning (small caps), rescales, and a Flush and Load into a fresh
// model, over queries that skip random items as sessions and filters do.
func TestRowTopsAgainstWalk(t *testing.T) {
	type model interface {
		Model
		topRanker
		Persistent
		Rescale(float64)
	}
	tests := []struct {
		name  string
		build func() model
		items int
	}{
		{"sr, cap 200", func() model { return NewSR(5, 200) }, 300},
		{"sr, cap 30 (lists shorter than 64)", func() model { return NewSR(5, 30) }, 200},
		{"sr, no cap", func() model { return NewSR(3, 0) }, 150},
		{"markov, cap 200", func() model { return NewMarkov(200) }, 120},
		{"markov, cap 8", func() model { return NewMarkov(8) }, 60},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(21, uint64(tt.items)))
			m := tt.build()
			m.keepTops()
			tops := func(m model) *rowTops {
				switch x := m.(type) {
				case *SR:
					return x.tops
				case *Markov:
					return x.tops
				}
				t.Fatalf("no lists in %T", m)
				return nil
			}
			check := func(m model, label string) {
				t.Helper()
				invariant(t, tops(m), label)
				for range 300 {
					last := ItemID(rng.IntN(tt.items + 5)) // some never clicked
					q := &Query{Session: []Step{{Item: last}}}
					banned := map[ItemID]bool{}
					for range rng.IntN(40) {
						banned[ItemID(rng.IntN(tt.items))] = true
					}
					skip := func(id ItemID) bool { return banned[id] }
					k := 1 + rng.IntN(30)
					ref := new(Scores)
					m.Candidates(q, ref)
					want := TopK(nil, ref, k, skip)
					got, ok := m.rankTop(q, k, skip, nil)
					if !ok {
						continue // the caller walks the row: the reference itself
					}
					if !slices.Equal(got, want) {
						t.Fatalf("%s: item %d, k %d: lists give %v, the walk %v", label, last, k, got, want)
					}
				}
			}
			// Zipf-like clicks so rows grow past their caps and weights tie.
			z := rand.NewZipf(rng, 1.2, 2, uint64(tt.items-1))
			var win []Step
			for i := range 30_000 {
				it := ItemID(z.Uint64())
				if len(win) > 0 && win[len(win)-1].Item == it {
					continue
				}
				w := 1.0
				if i%3 == 0 {
					w = 0.5
				}
				m.Observe(&Observation{Window: win, Item: it, TS: int64(i), Weight: w})
				win = append(win, Step{Item: it})
				if len(win) > 8 || rng.IntN(6) == 0 {
					win = win[:0]
				}
				if i%7_000 == 6_999 {
					check(m, "while learning")
					m.Rescale(0.37)
					check(m, "after a rescale")
				}
			}
			check(m, "after learning")
			kv := newMemKV()
			if err := m.Flush(kv); err != nil {
				t.Fatal(err)
			}
			n := tt.build()
			n.SetPrefix(m.Prefix())
			n.keepTops()
			if err := kv.scan(m.Prefix(), n.Load); err != nil {
				t.Fatal(err)
			}
			check(n, "after Flush and Load")
			// Lists answer every query of k = 5 on a long row; a test where
			// they never did would compare nothing.
			rt := tops(n)
			long, answered := 0, 0
			for a := range ItemID(tt.items) {
				if int(a) >= len(rt.t.rows) || int(rt.t.rows[a].n) <= rt.size {
					continue
				}
				long++
				if _, ok := n.rankTop(&Query{Session: []Step{{Item: a}}}, 5, nil, nil); ok {
					answered++
				}
			}
			if long == 0 || answered != long {
				t.Errorf("lists answered %d of %d queries on long rows", answered, long)
			}
		})
	}
}

// invariant checks what rowTops promises beyond the answers: every long
// row keeps a list of exactly its size heaviest entries in rank order, each
// listed weight equal to the row's own, and no short row keeps one. A
// stale weight could hide from the answers (a listed entry's rank moving
// without its weight crossing a neighbour's), so it is checked directly.
func invariant(t *testing.T, rt *rowTops, label string) {
	t.Helper()
	for a := range rt.t.rows {
		r := &rt.t.rows[a]
		var listed []Scored
		if a < len(rt.lists) {
			listed = rt.lists[a]
		}
		if int(r.n) <= rt.size {
			if len(listed) != 0 {
				t.Fatalf("%s: row %d of %d entries keeps a list of %d", label, a, r.n, len(listed))
			}
			continue
		}
		var all []Scored
		r.each(func(b ItemID, w float64) { all = append(all, Scored{b, w}) })
		slices.SortFunc(all, func(x, y Scored) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
		if want := all[:rt.size]; !slices.Equal(listed, want) {
			t.Fatalf("%s: row %d: list %v, the row's heaviest %v", label, a, listed, want)
		}
	}
}

package models

import (
	"fmt"
	"testing"
)

// Explain reports, for every answered item, each signal's score divided by
// that signal's best score over its candidates (the definition on Blend).
// The reference here recomputes it with a plain Go map per signal, from
// the signals' own Candidates, so it does not share the blend's tables:
// neither the appended-only tables nor the walk that reads them.
func TestBlendFeaturesAreNormalisedSignals(t *testing.T) {
	w := newCSWorld(3, 400)
	specs := []string{
		"blend",                               // learned: the chosen mixture's signals
		"blend(markov=1,sr=1,iknn=1)",         // markov, sr, iknn: appended tables
		"iknn(span=3)",                        // voters after the first add onto appended entries
		"blend(content=1,markov=1,backoff=0)", // content adds through the index
	}
	queries := []*Query{
		csQuery(w.end, 0, 2),
		csQuery(w.end, 0, 14, 15, 16),
		csQuery(w.end, 0, 30, 5, 31),
		csQuery(w.end, 3, 24, 25, 26, 27),
		csQuery(w.end, 0, 52),
	}
	for _, spec := range specs {
		t.Run(spec, func(t *testing.T) {
			s := NewSet(DefaultSetOptions())
			m, err := s.Get(spec)
			if err != nil {
				t.Fatal(err)
			}
			b, ok := m.(*Blend)
			if !ok { // a lone signal: blend it with sr by hand
				sr, err := s.Get("sr")
				if err != nil {
					t.Fatal(err)
				}
				b = NewBlend(s.Pop(), DefaultPopWeight, Signal{Name: spec, Model: m, Weight: 1}, Signal{Name: "sr", Model: sr, Weight: 0.5})
			}
			newCSDriver(s).play(w.events)
			checked := 0
			for qi, q := range queries {
				for _, k := range []int{1, 5, 20} {
					res := b.Explain(q, k, nil, Budget{})
					if len(res.Features) != len(res.Items) {
						t.Fatalf("query %d: %d feature rows for %d items", qi, len(res.Features), len(res.Items))
					}
					for si, sig := range b.signals {
						ref := map[ItemID]float64{}
						var sc Scores
						sig.Model.Candidates(q, &sc)
						mx := 0.0
						for _, e := range sc.Entries() {
							ref[e.Item] += e.Score
						}
						for _, v := range ref {
							mx = max(mx, v)
						}
						mx = normaliser(sig.Model, mx)
						// A learned blend asks only the signals its
						// chosen mixture weighs; the others report 0.
						if w, _ := b.weightsFor(nil); w != nil && w[si] == 0 {
							mx = 0
						}
						for i, it := range res.Items {
							want := 0.0
							if mx > 0 {
								want = ref[it.Item] / mx
							}
							if got := res.Features[i][si]; got != want {
								t.Errorf("query %d k=%d item %d: feature %s = %v, want %v", qi, k, it.Item, sig.Name, got, want)
							}
							checked++
						}
					}
				}
			}
			if checked < 50 {
				t.Fatalf("only %d features checked: the world answers too little", checked)
			}
		})
	}
}

// A table filled by Append and then by Add holds the sums a map holds, in
// first-insertion order, and Reset leaves it reusable either way.
func TestScoresAppendThenAdd(t *testing.T) {
	for _, n := range []int{0, 1, 7, 600, 3000} { // 3000 grows past the first table
		t.Run(fmt.Sprint(n), func(t *testing.T) {
			var s Scores
			for round := range 2 {
				ref := map[ItemID]float64{}
				var order []ItemID
				for i := range n {
					id := ItemID(i*7 + round)
					s.Append(id, float64(i))
					ref[id] = float64(i)
					order = append(order, id)
				}
				if n > 0 && s.Indexed() {
					t.Fatal("appended entries reported as indexed")
				}
				for i := range n + 50 {
					id := ItemID(i * 3)
					if _, ok := ref[id]; !ok {
						order = append(order, id)
					}
					s.Add(id, 0.5)
					ref[id] += 0.5
				}
				if !s.Indexed() {
					t.Fatal("entries not indexed after Add")
				}
				ents := s.Entries()
				if len(ents) != len(ref) {
					t.Fatalf("round %d: %d entries, want %d", round, len(ents), len(ref))
				}
				for i, e := range ents {
					if e.Item != order[i] || e.Score != ref[e.Item] {
						t.Fatalf("round %d entry %d = %v, want %d:%v", round, i, e, order[i], ref[order[i]])
					}
					if got := s.Get(e.Item); got != ref[e.Item] {
						t.Fatalf("Get(%d) = %v, want %v", e.Item, got, ref[e.Item])
					}
				}
				if _, ok := s.Lookup(ItemID(1 << 30)); ok {
					t.Fatal("found an id never added")
				}
				s.Reset()
				if s.Len() != 0 {
					t.Fatalf("Reset left %d entries", s.Len())
				}
			}
		})
	}
}

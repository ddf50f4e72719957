package models

import (
	"math/rand/v2"
	"testing"
)

// TestScoresAgainstMap drives a Scores and Go's built-in map (the
// reference) with the same random Add/Set/Reset sequence, over id ranges
// that make the table grow, collide and reuse slots after resets, and
// checks every lookup, the length, the maximum and the insertion order.
func TestScoresAgainstMap(t *testing.T) {
	tests := []struct {
		name  string
		ids   int // ids drawn from [0, ids)
		ops   int
		reset int // one Reset in about this many operations
	}{
		{"few ids, many resets", 50, 20_000, 40},
		{"grows past the initial table", 100_000, 50_000, 20_000},
		{"small queries after one huge one", 1_000_000, 60_000, 300},
		{"ids with equal low bits", 1 << 30, 20_000, 5_000},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(7, uint64(tt.ids)))
			s := new(Scores) // the zero value must work
			ref := map[ItemID]float64{}
			var order []ItemID
			draw := func() ItemID {
				if tt.ids == 1<<30 {
					return ItemID(rng.IntN(1<<10) << 20) // only high bits differ
				}
				return ItemID(rng.IntN(tt.ids))
			}
			for op := range tt.ops {
				switch r := rng.IntN(tt.reset); {
				case r == 0 || (op == 10 && tt.name == "small queries after one huge one"):
					s.Reset()
					clear(ref)
					order = order[:0]
				case r%5 == 1:
					id, v := draw(), rng.Float64()
					if _, ok := ref[id]; !ok {
						order = append(order, id)
					}
					s.Set(id, v)
					ref[id] = v
				default:
					id, v := draw(), rng.Float64()
					if _, ok := ref[id]; !ok {
						order = append(order, id)
					}
					s.Add(id, v)
					ref[id] += v
				}
				probe := draw()
				got, ok := s.Lookup(probe)
				want, wok := ref[probe]
				if got != want || ok != wok {
					t.Fatalf("op %d: Lookup(%d) = %g, %v; want %g, %v", op, probe, got, ok, want, wok)
				}
			}
			if s.Len() != len(ref) {
				t.Fatalf("Len = %d, want %d", s.Len(), len(ref))
			}
			mx := 0.0
			for i, e := range s.Entries() {
				if e.Item != order[i] || e.Score != ref[e.Item] {
					t.Fatalf("entry %d = %+v, want item %d score %g", i, e, order[i], ref[order[i]])
				}
				mx = max(mx, e.Score)
			}
			if s.Max() != mx {
				t.Errorf("Max = %g, want %g", s.Max(), mx)
			}
		})
	}
}

// TestTopKOfScores checks the ranking over a Scores: best first, ties by
// lower id, scores <= 0 and skipped items left out (common practice for a
// top-k list; the order is the project's documented tie rule).
func TestTopKOfScores(t *testing.T) {
	s := new(Scores)
	for _, e := range []Scored{{5, 1}, {3, 2}, {9, 2}, {1, 0}, {7, -1}, {4, 0.5}, {2, 2}} {
		s.Add(e.Item, e.Score)
	}
	got := TopK(nil, s, 4, func(id ItemID) bool { return id == 9 })
	want := []Scored{{2, 2}, {3, 2}, {5, 1}, {4, 0.5}}
	if len(got) != len(want) {
		t.Fatalf("TopK = %v, want %v", got, want)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("TopK = %v, want %v", got, want)
		}
	}
}

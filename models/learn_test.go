package models

import (
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"
)

// TestPruneMatchesFullSort checks the quickselect prune against the plain
// computation it replaced: sort every entry by weight descending, ties by
// lower id, keep the first n (common practice: check a fast selection
// against a full sort). Weights are drawn from a few values so ties are
// frequent.
func TestPruneMatchesFullSort(t *testing.T) {
	tests := []struct {
		name          string
		entries, keep int
		levels        int // distinct weights
	}{
		{"many ties", 401, 200, 3},
		{"some ties", 401, 200, 50},
		{"distinct", 401, 200, 1 << 30},
		{"short", 9, 4, 2},
		{"keep one", 40, 1, 5},
		{"keep all but one", 40, 39, 5},
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			for round := 0; round < 50; round++ {
				var r row
				var all []pairEntry
				for len(all) < tt.entries {
					k := ItemID(rng.IntN(10 * tt.entries))
					if r.get(k) != 0 {
						continue
					}
					v := float64(1 + rng.IntN(tt.levels))
					r.add(k, v)
					all = append(all, pairEntry{k, v})
				}
				var pool slotPool
				prune(&r, tt.keep, nil, &pool)
				slices.SortFunc(all, func(a, b pairEntry) int { return cmpScore(a.v, b.v, a.k, b.k) })
				if int(r.n) != tt.keep {
					t.Fatalf("round %d: %d entries after prune, want %d", round, r.n, tt.keep)
				}
				for _, e := range all[:tt.keep] {
					if got := r.get(e.k); got != e.v {
						t.Fatalf("round %d: kept weight of %d = %g, want %g", round, e.k, got, e.v)
					}
				}
				for _, e := range all[tt.keep:] {
					if got := r.get(e.k); got != 0 {
						t.Fatalf("round %d: %d (weight %g) kept, want it pruned", round, e.k, e.v)
					}
				}
			}
		})
	}
}

// refTopList is the delete-and-insert list topList.touch replaced; touch
// must leave exactly the same order, including after a rescale leaves the
// stored values above the live ones.
type refTopList struct {
	n     int
	items []ItemID
	vals  []float64
	val   func(ItemID) float64
}

func (t *refTopList) search(v float64, id ItemID) int {
	for j := range t.items {
		if !before(t.vals[j], t.items[j], v, id) {
			return j
		}
	}
	return len(t.items)
}

func (t *refTopList) touch(id ItemID) {
	v := t.val(id)
	if i := slices.Index(t.items, id); i >= 0 {
		t.items = slices.Delete(t.items, i, i+1)
		t.vals = slices.Delete(t.vals, i, i+1)
	} else if len(t.items) >= t.n {
		last := len(t.items) - 1
		if !before(v, id, t.vals[last], t.items[last]) {
			return
		}
		t.items, t.vals = t.items[:last], t.vals[:last]
	}
	j := t.search(v, id)
	t.items = slices.Insert(t.items, j, id)
	t.vals = slices.Insert(t.vals, j, v)
}

func TestTopListShiftMatchesDeleteInsert(t *testing.T) {
	var v vector
	tl := newTopList(30, v.get)
	ref := &refTopList{n: 30, val: v.get}
	rng := rand.New(rand.NewPCG(5, 6))
	for step := 0; step < 20000; step++ {
		if step%3000 == 2999 {
			v.rescale(0.25) // stored copies now exceed the live counts
		}
		id := ItemID(rng.IntN(200))
		v.add(id, float64(1+rng.IntN(4)))
		tl.touch(id)
		ref.touch(id)
		if !slices.Equal(tl.items, ref.items) || !slices.Equal(tl.vals, ref.vals) {
			t.Fatalf("step %d: shifted list %v\ndelete-insert %v", step, tl.items, ref.items)
		}
	}
	for _, id := range tl.items {
		if !tl.onList(id) {
			t.Fatalf("%d on the list but not flagged", id)
		}
	}
	flagged := 0
	for id := range tl.in {
		if tl.in[id] {
			flagged++
		}
	}
	if flagged != len(tl.items) {
		t.Fatalf("%d items flagged, %d on the list", flagged, len(tl.items))
	}
}

// TestIKNNCoVisitBound: with CoVisit S a click co-visits only the last S
// items of its window; 0 co-visits the whole window. One session clicks
// 1 2 3 4 (weight 1 each); the expected counts are worked out by hand from
// the definition in IKNNOptions.
func TestIKNNCoVisitBound(t *testing.T) {
	all := [][2]ItemID{{1, 2}, {1, 3}, {1, 4}, {2, 3}, {2, 4}, {3, 4}}
	tests := []struct {
		coVisit int
		want    map[[2]ItemID]float64 // absent pairs must be 0
	}{
		{0, map[[2]ItemID]float64{{1, 2}: 1, {1, 3}: 1, {1, 4}: 1, {2, 3}: 1, {2, 4}: 1, {3, 4}: 1}},
		{2, map[[2]ItemID]float64{{1, 2}: 1, {1, 3}: 1, {2, 3}: 1, {2, 4}: 1, {3, 4}: 1}},
		{1, map[[2]ItemID]float64{{1, 2}: 1, {2, 3}: 1, {3, 4}: 1}},
	}
	for _, tt := range tests {
		t.Run("covis="+strconv.Itoa(tt.coVisit), func(t *testing.T) {
			m := NewIKNN(IKNNOptions{CoVisit: tt.coVisit})
			var w []Step
			for _, id := range []ItemID{1, 2, 3, 4} {
				o := Observation{Window: w, Item: id, Weight: 1}
				var b WarmBatch
				m.Warm(&o, &b)
				b.Run()
				m.Observe(&o)
				w = append(w, Step{Item: id})
			}
			for _, p := range all {
				for _, d := range [][2]ItemID{p, {p[1], p[0]}} {
					if got := m.covis.get(d[0], d[1]); got != tt.want[p] {
						t.Errorf("n(%d,%d) = %g, want %g", d[0], d[1], got, tt.want[p])
					}
				}
			}
		})
	}
}

package models

import (
	"encoding/binary"
	"slices"
)

// rowTops keeps, for every row of a pairTable whose raw weights are the
// model's scores (sr, markov), the row's heaviest entries in rank order
// (weight descending, ties by lower id, the order of TopK), each with its
// weight. A single-model query then reads the first k entries the caller
// does not skip instead of walking and ranking a row of hundreds: that walk
// was most of a replay's time. The answer is the same as the walk's: when
// the kept entries run out before k answers and the row has more, the
// query falls back to the walk.
//
// Only rows longer than the list size keep a list (a short row is ranked
// where it lies: it is cheap, and its list would cost up to 16 bytes a
// pair). The
// invariant is that a long row's list holds its size heaviest entries, and
// that each listed weight equals the row's weight for that entry. Keeping
// the weights beside the ids is what lets top read the list front to back
// and bump compare against it without a hash probe into the row (a cache
// miss each: 0.5 s of a 4.3 s replay of 1M clicks); the price is that
// every change of a listed pair's weight must reach the list.
// The paths that change a row's weights are:
//   - add (Observe): weights only grow between rescales, so a grown entry
//     can only move up, and an entry outside the list enters only by
//     passing the last one. Every add is followed by bump with the new
//     weight, which updates a listed entry's weight and moves it up.
//   - prune (inside add): it keeps a row's cap heaviest entries with their
//     weights, and size stays below the cap, so a pruned row is still long
//     and keeps every listed entry unchanged.
//   - rescale: it multiplies every weight by one factor, which rounding
//     could turn into ties, so it rebuilds every list from the rows.
//   - load: it rebuilds the loaded row's list.
//
// No other path writes the rows of sr or markov.
type rowTops struct {
	t     *pairTable
	size  int
	lists [][]Scored // by source item
}

// rowTopsSize is how many entries a list keeps: k = 20 answers past up to
// 20 skipped session items, with room to spare.
const rowTopsSize = 64

// newRowTops returns the lists of t's rows, or nil when t's cap is too
// small for any.
func newRowTops(t *pairTable) *rowTops {
	rt := &rowTops{t: t, size: rowTopsSize}
	if t.cap > 0 {
		rt.size = min(rt.size, t.cap-1)
	}
	if rt.size < 1 {
		return nil
	}
	rt.rebuild()
	return rt
}

// rebuild builds every list from its row.
func (rt *rowTops) rebuild() {
	for a := range rt.t.rows {
		rt.build(ItemID(a))
	}
}

func (rt *rowTops) list(a ItemID) *[]Scored {
	if int(a) >= len(rt.lists) {
		rt.lists = slices.Grow(rt.lists, int(a)+1-len(rt.lists))
		rt.lists = rt.lists[:int(a)+1]
	}
	return &rt.lists[a]
}

// build builds a's list from its row, or drops it for a short row.
func (rt *rowTops) build(a ItemID) {
	if int(a) >= len(rt.t.rows) || int(rt.t.rows[a].n) <= rt.size {
		if int(a) < len(rt.lists) {
			rt.lists[a] = nil
		}
		return
	}
	l := rt.list(a)
	all := make([]Scored, 0, rt.t.rows[a].n)
	rt.t.rows[a].each(func(b ItemID, w float64) { all = append(all, Scored{b, w}) })
	slices.SortFunc(all, func(x, y Scored) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
	*l = append((*l)[:0], all[:min(len(all), rt.size)]...)
}

// bump notes that the weight of a→b grew to w (or a→b appeared with w).
func (rt *rowTops) bump(a, b ItemID, w float64) {
	if int(rt.t.rows[a].n) <= rt.size {
		return // short rows keep no list
	}
	l := rt.list(a)
	L := *l
	if len(L) == 0 { // the row just grew long
		rt.build(a)
		return
	}
	last := &L[len(L)-1]
	if cmpScore(w, last.Score, b, last.Item) >= 0 {
		// Not above the last listed entry. A listed b ranked at or
		// above the last before it grew, so it is the last itself, with
		// a weight the add left unchanged; any other b is unlisted.
		return
	}
	pos := slices.IndexFunc(L, func(e Scored) bool { return e.Item == b })
	if pos < 0 {
		pos = len(L) - 1 // b enters and the last leaves
	}
	L[pos] = Scored{b, w}
	for pos > 0 && cmpScore(w, L[pos-1].Score, b, L[pos-1].Item) < 0 {
		L[pos-1], L[pos] = L[pos], L[pos-1]
		pos--
	}
}

// top appends the k best entries of row a for which skip is false, best
// first, and reports whether that is the exact answer; when it is not (the
// list ran out) dst comes back unchanged and the caller walks the row. A
// short row, which keeps no list, is ranked in place.
func (rt *rowTops) top(a ItemID, k int, skip func(ItemID) bool, dst []Scored) ([]Scored, bool) {
	if k <= 0 || int(a) >= len(rt.t.rows) || rt.t.rows[a].n == 0 {
		return dst, true
	}
	if int(a) >= len(rt.lists) || len(rt.lists[a]) == 0 {
		// A short row: ranked where it lies, which gives the walk's
		// answer without filling a candidate table.
		return topOfRow(dst, &rt.t.rows[a], k, skip), true
	}
	start := len(dst)
	for _, e := range rt.lists[a] {
		if skip != nil && skip(e.Item) {
			continue
		}
		if e.Score > 0 {
			dst = append(dst, e)
			if len(dst)-start == k {
				return dst, true
			}
		}
	}
	return dst[:start], false
}

// topRanker is a model that can answer a single-model query from kept
// lists (see rowTops) once asked to keep them.
type topRanker interface {
	keepTops()
	rankTop(q *Query, k int, skip func(ItemID) bool, dst []Scored) ([]Scored, bool)
}

// ranked gives a model whose scores are one pair row's raw weights (sr,
// markov) ranked lists of that table: embedded, it supplies topRanker.
type ranked struct {
	rows *pairTable
	tops *rowTops // nil until keepTops
}

func (r *ranked) keepTops() {
	if r.tops == nil {
		r.tops = newRowTops(r.rows)
	}
}

func (r *ranked) rankTop(q *Query, k int, skip func(ItemID) bool, dst []Scored) ([]Scored, bool) {
	if r.tops == nil {
		return dst, false
	}
	last, ok := q.Last()
	if !ok {
		return dst, true // no candidates at all
	}
	return r.tops.top(last, k, skip, dst)
}

// bump keeps the lists current after the weight of a→b grew to w.
func (r *ranked) bump(a, b ItemID, w float64) {
	if r.tops != nil {
		r.tops.bump(a, b, w)
	}
}

// rebuild rebuilds every list, after a rescale.
func (r *ranked) rebuild() {
	if r.tops != nil {
		r.tops.rebuild()
	}
}

// load loads one stored row and, when lists are kept, rebuilds its list.
func (r *ranked) load(key, val []byte) error {
	if err := r.rows.load(key, val); err != nil {
		return err
	}
	if r.tops != nil && len(key) >= 4 {
		r.tops.build(binary.BigEndian.Uint32(key))
	}
	return nil
}

package models

import (
	"slices"
	"sort"
)

// topList keeps the n items of highest value, exactly, under the condition
// that values never decrease (true of landmark-decayed counts). An item
// outside the list can only enter by growing past the list's minimum.
//
// The list is a sorted slice with the value each item had when placed
// beside it, so finding an item is a binary search and moving it one
// memmove: a flood of new items, each outranking the old ones (a newer click
// weighs more), costs log n per click rather than a walk through the list.
type topList struct {
	n     int
	items []ItemID  // value desc, id asc
	vals  []float64 // vals[i] is items[i]'s value when placed
	in    []bool    // indexed by item: on the list
	val   func(ItemID) float64
}

func newTopList(n int, val func(ItemID) float64) *topList {
	return &topList{n: n, val: val}
}

// before reports whether (va, a) ranks before (vb, b).
func before(va float64, a ItemID, vb float64, b ItemID) bool {
	if va != vb {
		return va > vb
	}
	return a < b
}

// search returns the first index whose entry does not rank before (v, id).
func (t *topList) search(v float64, id ItemID) int {
	return sort.Search(len(t.items), func(i int) bool { return !before(t.vals[i], t.items[i], v, id) })
}

func (t *topList) onList(id ItemID) bool { return int(id) < len(t.in) && t.in[id] }

func (t *topList) setIn(id ItemID, on bool) {
	if int(id) >= len(t.in) {
		t.in = slices.Grow(t.in, int(id)+1-len(t.in))[:int(id)+1]
	}
	t.in[id] = on
}

// touch updates the list after id's value grew. The entries between id's
// new place and its old one (or the end, for an item that pushes out the
// last) shift by one: a popular item usually moves a few places, so this
// costs a few words, not a pass over the whole list.
func (t *topList) touch(id ItemID) {
	v := t.val(id)
	on := t.onList(id)
	if last := len(t.items) - 1; !on && last+1 >= t.n && !before(v, id, t.vals[last], t.items[last]) {
		return // ranks after the last: most clicks, on the long tail
	}
	j := t.search(v, id)
	var i int // the slot freed: id's old place, or the last place
	switch {
	case on:
		i = t.find(j, id)
		if i < j {
			// The stored value is above the new one (a rescale shrank
			// every count but not the stored copies): id moves down, to
			// just before the first entry not before it.
			copy(t.items[i:j-1], t.items[i+1:j])
			copy(t.vals[i:j-1], t.vals[i+1:j])
			t.items[j-1], t.vals[j-1] = id, v
			return
		}
	case len(t.items) >= t.n:
		i = len(t.items) - 1 // j <= i: it ranks before the last
		t.setIn(t.items[i], false)
	default:
		i = len(t.items)
		t.items = append(t.items, 0)
		t.vals = append(t.vals, 0)
	}
	copy(t.items[j+1:i+1], t.items[j:i])
	copy(t.vals[j+1:i+1], t.vals[j:i])
	t.items[j], t.vals[j] = id, v
	t.setIn(id, true)
}

// find returns the index of id, known to be on the list with a stored
// value at most its new one (values only grow), given j = search(new, id).
func (t *topList) find(j int, id ItemID) int {
	// Entries ranking before (new, id) cannot be id's old place unless they
	// tie on id, which they cannot: start at j and walk to id. Old and new
	// values are usually close, so the walk is short.
	for i := j; i < len(t.items); i++ {
		if t.items[i] == id {
			return i
		}
	}
	// Only after a rescale (stored values above the new one): the old
	// place lies before j.
	return slices.Index(t.items[:j], id)
}

// rebuild recomputes the list from scratch over ids 0..count-1.
func (t *topList) rebuild(count int) {
	for _, id := range t.items {
		t.setIn(id, false)
	}
	all := make([]ItemID, 0, count)
	for id := 0; id < count; id++ {
		if t.val(ItemID(id)) > 0 {
			all = append(all, ItemID(id))
		}
	}
	sort.Slice(all, func(i, j int) bool { return before(t.val(all[i]), all[i], t.val(all[j]), all[j]) })
	if len(all) > t.n {
		all = all[:t.n]
	}
	t.items = append(t.items[:0], all...)
	t.vals = t.vals[:0]
	for _, id := range t.items {
		t.vals = append(t.vals, t.val(id))
		t.setIn(id, true)
	}
}

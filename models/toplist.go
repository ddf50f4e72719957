package models

import "sort"

// topList keeps the n items of highest value, exactly, under the condition
// that values never decrease (true of landmark-decayed counts). An item
// outside the list can only enter by growing past the list's minimum.
type topList struct {
	n     int
	items []ItemID // sorted by value desc, id asc
	pos   map[ItemID]int
	val   func(ItemID) float64
}

func newTopList(n int, val func(ItemID) float64) *topList {
	return &topList{n: n, pos: make(map[ItemID]int, n), val: val}
}

func (t *topList) less(a, b ItemID) bool { // a ranks before b
	va, vb := t.val(a), t.val(b)
	if va != vb {
		return va > vb
	}
	return a < b
}

// touch updates the list after id's value grew.
func (t *topList) touch(id ItemID) {
	i, ok := t.pos[id]
	if !ok {
		if len(t.items) >= t.n {
			last := t.items[len(t.items)-1]
			if !t.less(id, last) {
				return
			}
			delete(t.pos, last)
			t.items = t.items[:len(t.items)-1]
		}
		t.items = append(t.items, id)
		i = len(t.items) - 1
		t.pos[id] = i
	}
	// bubble up
	for i > 0 && t.less(id, t.items[i-1]) {
		prev := t.items[i-1]
		t.items[i] = prev
		t.pos[prev] = i
		i--
	}
	t.items[i] = id
	t.pos[id] = i
}

// rebuild recomputes the list from scratch over ids 0..count-1.
func (t *topList) rebuild(count int) {
	t.items = t.items[:0]
	clear(t.pos)
	all := make([]ItemID, 0, count)
	for id := 0; id < count; id++ {
		if t.val(ItemID(id)) > 0 {
			all = append(all, ItemID(id))
		}
	}
	sort.Slice(all, func(i, j int) bool { return t.less(all[i], all[j]) })
	if len(all) > t.n {
		all = all[:t.n]
	}
	t.items = append(t.items, all...)
	for i, id := range t.items {
		t.pos[id] = i
	}
}

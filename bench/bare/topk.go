package bare

import "slices"

// Neighbors is a plain co-visitation list per item, built from a
// PairCounter: what a hand-rolled in-memory recommender would keep.
type Neighbors struct {
	rows map[uint32][]Entry
	ids  map[string]uint32
}

// Entry is one neighbour and its count.
type Entry struct {
	Item  uint32
	Count float64
}

// Neighbors turns the counter's pairs into per-item lists.
func (c *PairCounter) Neighbors() *Neighbors {
	n := &Neighbors{rows: map[uint32][]Entry{}, ids: c.ids}
	for k, v := range c.pairs {
		a, b := uint32(k>>32), uint32(k)
		n.rows[a] = append(n.rows[a], Entry{b, v})
	}
	return n
}

// Top appends the k most counted successors of the session's last known
// item to dst, skipping items of the session: a map lookup and a bounded
// selection, the bare query.
func (n *Neighbors) Top(session []string, k int, dst []Entry) []Entry {
	dst = dst[:0]
	var ids [64]uint32
	known := ids[:0]
	for _, s := range session {
		if id, ok := n.ids[s]; ok && len(known) < len(ids) {
			known = append(known, id)
		}
	}
	if len(known) == 0 {
		return dst
	}
	last := known[len(known)-1]
	for _, e := range n.rows[last] {
		if len(dst) == k && e.Count <= dst[k-1].Count {
			continue
		}
		if slices.Contains(known, e.Item) {
			continue
		}
		// Insert in order; k is small, so a linear insert beats a heap.
		i, _ := slices.BinarySearchFunc(dst, e.Count, func(x Entry, c float64) int {
			switch {
			case x.Count > c:
				return -1
			case x.Count < c:
				return 1
			}
			return 0
		})
		if len(dst) < k {
			dst = append(dst, Entry{})
		}
		copy(dst[i+1:], dst[i:len(dst)-1])
		dst[i] = e
	}
	return dst
}

package models

// row is one item's weighted neighbours: an open-addressing hash table of
// item → weight with linear probing. A Go map of this size spends most of
// its time probing past the tombstones pruning leaves; this table has no
// deletes (pruning rebuilds it), a fixed hash, and key and weight side by
// side in one slot so an update touches one cache line, which matters when
// every click updates dozens of rows.
type row struct {
	slots []slot
	n     int
	dirty bool
}

type slot struct {
	key uint32 // item id + 1; 0 marks an empty slot
	val float64
}

// rowHash spreads ids over the table (Fibonacci hashing).
func rowHash(k uint32, mask uint32) uint32 { return (k * 0x9E3779B1) & mask }

// add adds w to k's weight.
func (r *row) add(k uint32, w float64) {
	if len(r.slots) == 0 {
		r.slots = make([]slot, 4)
	} else if (r.n+1)*4 > len(r.slots)*3 {
		r.resize(len(r.slots) * 2)
	}
	mask := uint32(len(r.slots) - 1)
	for i := rowHash(k, mask); ; i = (i + 1) & mask {
		s := &r.slots[i]
		switch s.key {
		case k + 1:
			s.val += w
			return
		case 0:
			s.key, s.val = k+1, w
			r.n++
			return
		}
	}
}

// get returns k's weight, 0 when absent.
func (r *row) get(k uint32) float64 {
	if r.n == 0 {
		return 0
	}
	mask := uint32(len(r.slots) - 1)
	for i := rowHash(k, mask); ; i = (i + 1) & mask {
		switch s := &r.slots[i]; s.key {
		case k + 1:
			return s.val
		case 0:
			return 0
		}
	}
}

func (r *row) resize(size int) {
	old := r.slots
	r.slots = make([]slot, size)
	mask := uint32(size - 1)
	for _, s := range old {
		if s.key == 0 {
			continue
		}
		i := rowHash(s.key-1, mask)
		for r.slots[i].key != 0 {
			i = (i + 1) & mask
		}
		r.slots[i] = s
	}
}

// each calls f for every entry.
func (r *row) each(f func(k uint32, w float64)) {
	for _, s := range r.slots {
		if s.key != 0 {
			f(s.key-1, s.val)
		}
	}
}

// scale multiplies every weight by f.
func (r *row) scale(f float64) {
	for i := range r.slots {
		r.slots[i].val *= f
	}
}

// reset empties the row and sizes it for n entries.
func (r *row) reset(n int) {
	size := 4
	for size*3 < n*4+4 {
		size *= 2
	}
	r.slots = make([]slot, size)
	r.n = 0
}

package models

import "math/bits"

// row is one item's weighted neighbours: an open-addressing hash table of
// item → weight with linear probing. A Go map of this size spends most of
// its time probing past the tombstones pruning leaves; this table has no
// deletes (pruning rebuilds it), a fixed hash, and key and weight side by
// side in one slot so an update touches one cache line, which matters when
// every click updates dozens of rows.
type row struct {
	slots []slot
	// n is int32 so that a row header takes 32 bytes, two to a cache
	// line: every update reads one, and tables have a row per item.
	n     int32
	dirty bool
}

type slot struct {
	key uint32 // item id + 1; 0 marks an empty slot
	val float64
}

// rowHash spreads ids over the table (Fibonacci hashing).
func rowHash(k uint32, mask uint32) uint32 { return (k * 0x9E3779B1) & mask }

// add adds w to k's weight.
func (r *row) add(k uint32, w float64) { r.addPooled(k, w, nil) }

// addPooled adds w to k's weight and returns the new weight, taking a
// larger slot array from pool when the row must grow (pool may be nil).
func (r *row) addPooled(k uint32, w float64, pool *slotPool) float64 {
	if len(r.slots) == 0 {
		r.slots = pool.get(4)
	} else if !fits(int(r.n)+1, len(r.slots)) {
		r.resize(len(r.slots)*2, pool)
	}
	mask := uint32(len(r.slots) - 1)
	for i := rowHash(k, mask); ; i = (i + 1) & mask {
		s := &r.slots[i]
		switch s.key {
		case k + 1:
			s.val += w
			return s.val
		case 0:
			s.key, s.val = k+1, w
			r.n++
			return w
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

func (r *row) resize(size int, pool *slotPool) {
	old := r.slots
	r.slots = pool.get(size)
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
	pool.put(old)
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
	r.slots = make([]slot, rowSize(n))
	r.n = 0
}

// rowSize is the slot count a row of n entries starts with: a power of
// two that leaves room for one more entry below the load limit of 4/5.
// The limit lets a capped row's 2·cap+1 entries (401 for the default cap
// of 200) fit in the 512 slots its cap needs, so a row that is cut back
// over and over never grows to 1024: no rehash between prunes, and half
// the memory at the peak. Probes stay short at that load: linear probing
// expects about 3 probes for a hit and 13 for a miss at 4/5 (Knuth, The
// Art of Computer Programming, vol. 3, section 6.4), and four slots share
// a cache line.
//
// Tables of up to 16 slots fill to all but one slot instead: most rows are
// short (markov's hold 14 pairs on average at 10M events), a whole table
// of 16 lies in four cache lines so a long probe costs no extra miss, and
// the power of two above a row of 13 to 15 entries would double its
// memory.
func rowSize(n int) int {
	size := 4
	for !fits(n+1, size) {
		size *= 2
	}
	return size
}

// fits reports whether a table of size slots may hold n entries.
func fits(n, size int) bool {
	if size <= 16 {
		return n < size
	}
	return n*5 <= size*4
}

// slotPool keeps slot arrays a row gave up, by size (powers of two), for
// the next row that needs one of that size.
type slotPool struct {
	free [32][][]slot
}

// poolDepth bounds the arrays kept per size: pruning and growth release
// about as many as they take, so a few cover the imbalance of the moment.
const poolDepth = 8

// get returns a zeroed array of size slots; a nil pool allocates.
func (p *slotPool) get(size int) []slot {
	if p != nil {
		c := bits.TrailingZeros(uint(size))
		if n := len(p.free[c]); n > 0 {
			s := p.free[c][n-1]
			p.free[c][n-1] = nil
			p.free[c] = p.free[c][:n-1]
			clear(s)
			return s
		}
	}
	return make([]slot, size)
}

// put offers s for reuse; the caller no longer holds it.
func (p *slotPool) put(s []slot) {
	if p == nil || len(s) == 0 {
		return
	}
	c := bits.TrailingZeros(uint(len(s)))
	if len(p.free[c]) < poolDepth {
		p.free[c] = append(p.free[c], s)
	}
}

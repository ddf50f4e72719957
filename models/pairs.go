package models

import (
	"encoding/binary"
	"fmt"
	"math"
	"slices"
)

// pairTable holds weighted item→item pairs, one row per source item. A row
// is capped: when it grows past twice its cap it is cut back to the cap
// heaviest entries. Cutting at a size that depends only on the clicks seen
// keeps the table a deterministic function of the stream, whenever flushes
// happen.
type pairTable struct {
	rows  []pairRow
	cap   int
	dirty []ItemID // rows changed since the last flush
	// dirtyBytes estimates what the next flush writes: 12 bytes a pair of
	// the dirty rows. It may overcount pairs a prune removed.
	dirtyBytes int
	// pool and scratch keep learning free of allocation once rows are
	// full: a capped row swings between cap and 2·cap entries, so the
	// slot arrays one row outgrows or prunes away are the ones the next
	// row needs.
	pool    slotPool
	scratch []pairEntry
	// bound, when above 0, is the item ids load accepts (below it); seen
	// is one more than the largest id load has met (see ItemBounded).
	bound, seen int
}

type pairRow = row

func newPairTable(capPerRow int) *pairTable {
	return &pairTable{cap: capPerRow}
}

func (t *pairTable) row(a ItemID) *pairRow {
	if int(a) >= len(t.rows) {
		t.rows = slices.Grow(t.rows, int(a)+1-len(t.rows))
		t.rows = t.rows[:int(a)+1]
	}
	return &t.rows[a]
}

// add adds w to the pair a→b and returns the pair's new weight (which a
// prune that drops the pair leaves as it was: see addTo).
func (t *pairTable) add(a, b ItemID, w float64) float64 {
	return t.addTo(t.row(a), a, b, w)
}

// addTo adds w to the pair a→b and returns the pair's new weight; r is row
// a. Callers that update one row many times look it up once. When the add
// makes the row prune, the pair may be among those cut: the weight
// returned is then the one it had before the cut.
func (t *pairTable) addTo(r *pairRow, a, b ItemID, w float64) float64 {
	n := r.n
	nw := r.addPooled(b, w, &t.pool)
	if !r.dirty {
		r.dirty = true
		t.dirty = append(t.dirty, a)
		t.dirtyBytes += 12*int(r.n) + 16
	} else if r.n > n {
		t.dirtyBytes += 12
	}
	if t.cap > 0 && int(r.n) > 2*t.cap {
		t.scratch = prune(r, t.cap, t.scratch, &t.pool)
	}
	return nw
}

// grow makes rows for every id up to max, so row pointers taken after it
// stay valid while other rows are updated.
func (t *pairTable) grow(max ItemID) { t.row(max) }

// get returns the weight of a→b.
func (t *pairTable) get(a, b ItemID) float64 {
	if int(a) >= len(t.rows) {
		return 0
	}
	return t.rows[a].get(b)
}

// each calls f for every pair of row a, in no particular order.
func (t *pairTable) each(a ItemID, f func(b ItemID, w float64)) {
	if int(a) >= len(t.rows) {
		return
	}
	t.rows[a].each(f)
}

// addRow adds row a's pairs to out as candidates scored by their weights.
// A row's items are distinct, so into an empty out they are appended
// without lookups.
func (t *pairTable) addRow(a ItemID, out *Scores) {
	if out.Len() == 0 {
		t.each(a, out.Append)
		return
	}
	t.each(a, out.Add)
}

// size returns the number of pairs held.
func (t *pairTable) size() int {
	n := 0
	for i := range t.rows {
		n += int(t.rows[i].n)
	}
	return n
}

type pairEntry struct {
	k ItemID
	v float64
}

// heavier is the order prune keeps by: weight descending, then lower id.
// Ids in a row are distinct, so it is a total order and the kept set does
// not depend on the order entries are visited in.
func heavier(a, b pairEntry) bool {
	if a.v != b.v {
		return a.v > b.v
	}
	return a.k < b.k
}

// prune keeps the n heaviest entries of r, breaking ties by lower id. It
// selects them in linear expected time (nothing needs them sorted) in buf,
// which it returns for reuse, and takes the new slot array from pool.
func prune(r *row, n int, buf []pairEntry, pool *slotPool) []pairEntry {
	all := buf[:0]
	for _, s := range r.slots {
		if s.key != 0 {
			all = append(all, pairEntry{s.key - 1, s.val})
		}
	}
	if n < len(all) {
		selectHeaviest(all, n)
	} else {
		n = len(all)
	}
	// Sized for 2n entries, the most the row holds before the next cut.
	pool.put(r.slots)
	r.slots = pool.get(rowSize(2 * n))
	r.n = 0
	for _, e := range all[:n] {
		r.addPooled(e.k, e.v, pool)
	}
	return all
}

// selectHeaviest reorders e so that e[:n] holds its n heaviest entries, in
// no particular order (quickselect, Hoare partition around a median of
// three). The pivots depend only on e's contents and order, so the result
// is deterministic.
func selectHeaviest(e []pairEntry, n int) {
	lo, hi := 0, len(e)-1
	for hi > lo {
		if hi-lo < 12 {
			// Insertion sort finishes a short range.
			for i := lo + 1; i <= hi; i++ {
				for j := i; j > lo && heavier(e[j], e[j-1]); j-- {
					e[j], e[j-1] = e[j-1], e[j]
				}
			}
			return
		}
		mid := lo + (hi-lo)/2
		if heavier(e[mid], e[lo]) {
			e[mid], e[lo] = e[lo], e[mid]
		}
		if heavier(e[hi], e[lo]) {
			e[hi], e[lo] = e[lo], e[hi]
		}
		if heavier(e[hi], e[mid]) {
			e[hi], e[mid] = e[mid], e[hi]
		}
		p := e[mid] // median of lo, mid, hi
		i, j := lo, hi
		for i <= j {
			for heavier(e[i], p) {
				i++
			}
			for heavier(p, e[j]) {
				j--
			}
			if i <= j {
				e[i], e[j] = e[j], e[i]
				i++
				j--
			}
		}
		// e[lo..j] are at least as heavy as p, e[i..hi] at most; any
		// entry between them equals p.
		switch {
		case n <= j:
			hi = j
		case n >= i:
			lo = i
		default:
			return
		}
	}
}

// flush writes each dirty row under prefix+bigEndian(src) as a list of
// (dst uint32, weight float64) pairs.
func (t *pairTable) flush(kv KV, prefix string) error {
	var buf []byte
	for _, a := range t.dirty {
		r := &t.rows[a]
		r.dirty = false
		// Slot order is a deterministic function of the clicks, and
		// nothing reads a row in order, so rows are written as they lie.
		buf = make([]byte, 0, 12*r.n)
		r.each(func(k ItemID, v float64) {
			buf = binary.BigEndian.AppendUint32(buf, k)
			buf = binary.BigEndian.AppendUint64(buf, math.Float64bits(v))
		})
		if err := kv.Set(itemKey(prefix, a), buf); err != nil {
			return fmt.Errorf("flush row %d: %w", a, err)
		}
	}
	t.dirty = t.dirty[:0]
	t.dirtyBytes = 0
	return nil
}

// load restores one row written by flush; key has the prefix removed.
func (t *pairTable) load(key, val []byte) error {
	if len(key) != 4 || len(val)%12 != 0 {
		return fmt.Errorf("%w: pair row key %x, %d value bytes", ErrCorrupt, key, len(val))
	}
	a := binary.BigEndian.Uint32(key)
	if err := t.check(a); err != nil {
		return err
	}
	for i := 0; i < len(val); i += 12 {
		if err := t.check(binary.BigEndian.Uint32(val[i:])); err != nil {
			return err
		}
	}
	r := t.row(a)
	r.reset(len(val) / 12)
	for i := 0; i < len(val); i += 12 {
		r.add(binary.BigEndian.Uint32(val[i:]), math.Float64frombits(binary.BigEndian.Uint64(val[i+4:])))
	}
	return nil
}

// check refuses an id at or above the bound, before it can grow the rows
// (a key of ff ff ff ff would ask for four billion), and notes the largest.
func (t *pairTable) check(id ItemID) error {
	if t.bound > 0 && int64(id) >= int64(t.bound) {
		return fmt.Errorf("%w: item id %d, at or above the bound %d", ErrCorrupt, id, t.bound)
	}
	t.seen = max(t.seen, int(id)+1)
	return nil
}

// rescale multiplies every weight by f.
func (t *pairTable) rescale(f float64) {
	for a := range t.rows {
		r := &t.rows[a]
		if r.n == 0 {
			continue
		}
		r.scale(f)
		if !r.dirty {
			r.dirty = true
			t.dirty = append(t.dirty, ItemID(a))
		}
	}
}

// itemKey returns prefix followed by the big-endian id.
func itemKey(prefix string, id ItemID) []byte {
	k := make([]byte, 0, len(prefix)+4)
	k = append(k, prefix...)
	return binary.BigEndian.AppendUint32(k, id)
}

// vector is a dense per-item float64 column with dirty tracking.
type vector struct {
	v     []float64
	flag  []bool
	dirty []ItemID
	// bound and seen are pairTable's.
	bound, seen int
}

func (c *vector) add(id ItemID, w float64) {
	if int(id) >= len(c.v) {
		n := int(id) + 1
		c.v = append(c.v, make([]float64, n-len(c.v))...)
		c.flag = append(c.flag, make([]bool, n-len(c.flag))...)
	}
	c.v[id] += w
	if !c.flag[id] {
		c.flag[id] = true
		c.dirty = append(c.dirty, id)
	}
}

func (c *vector) get(id ItemID) float64 {
	if int(id) >= len(c.v) {
		return 0
	}
	return c.v[id]
}

func (c *vector) flush(kv KV, prefix string) error {
	for _, id := range c.dirty {
		c.flag[id] = false
		var b [8]byte
		binary.BigEndian.PutUint64(b[:], math.Float64bits(c.v[id]))
		if err := kv.Set(itemKey(prefix, id), b[:]); err != nil {
			return fmt.Errorf("flush value %d: %w", id, err)
		}
	}
	c.dirty = c.dirty[:0]
	return nil
}

func (c *vector) load(key, val []byte) error {
	if len(key) != 4 || len(val) != 8 {
		return fmt.Errorf("%w: value key %x, %d value bytes", ErrCorrupt, key, len(val))
	}
	id := binary.BigEndian.Uint32(key)
	if c.bound > 0 && int64(id) >= int64(c.bound) {
		return fmt.Errorf("%w: item id %d, at or above the bound %d", ErrCorrupt, id, c.bound)
	}
	c.seen = max(c.seen, int(id)+1)
	c.add(id, math.Float64frombits(binary.BigEndian.Uint64(val)))
	c.flag[id] = false
	c.dirty = c.dirty[:0]
	return nil
}

func (c *vector) rescale(f float64) {
	for id := range c.v {
		if c.v[id] == 0 {
			continue
		}
		c.v[id] *= f
		if !c.flag[id] {
			c.flag[id] = true
			c.dirty = append(c.dirty, ItemID(id))
		}
	}
}

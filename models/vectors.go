package models

import (
	"math/rand/v2"
	"slices"
)

// Random-hyperplane hashing: two vectors at angle θ agree on one
// hyperplane's side with probability 1-θ/π (common practice in
// approximate cosine search), so a table keyed by lshBits such signs
// groups similar vectors, and lshTables independent tables find a
// neighbour with cosine 0.9 about 98 % of the time.
const (
	lshTables = 16
	lshBits   = 10
)

// vecIndex holds the items whose vectors have one dimension.
type vecIndex struct {
	dim     int
	items   []ItemID // ascending
	vecs    map[ItemID][]float32
	planes  []float32 // lshTables*lshBits hyperplanes of dim, once hashed
	buckets [][]ItemID
}

func newVecIndex(dim int) *vecIndex {
	return &vecIndex{dim: dim, vecs: map[ItemID][]float32{}}
}

func (v *vecIndex) add(id ItemID, vec []float32, exact int) {
	i, found := slices.BinarySearch(v.items, id)
	if !found {
		v.items = slices.Insert(v.items, i, id)
	}
	v.vecs[id] = vec
	if v.planes == nil && len(v.items) > exact {
		v.hashAll()
		return
	}
	if v.planes != nil {
		for t := range lshTables {
			b := &v.buckets[t*(1<<lshBits)+v.hash(t, vec)]
			if j, ok := slices.BinarySearch(*b, id); !ok {
				*b = slices.Insert(*b, j, id)
			}
		}
	}
}

func (v *vecIndex) remove(id ItemID) {
	vec, ok := v.vecs[id]
	if !ok {
		return
	}
	if i, found := slices.BinarySearch(v.items, id); found {
		v.items = slices.Delete(v.items, i, i+1)
	}
	if v.planes != nil {
		for t := range lshTables {
			b := &v.buckets[t*(1<<lshBits)+v.hash(t, vec)]
			if j, ok := slices.BinarySearch(*b, id); ok {
				*b = slices.Delete(*b, j, j+1)
			}
		}
	}
	delete(v.vecs, id)
}

// hashAll draws the hyperplanes, from a generator seeded by the dimension
// alone so every replica and every restart draws the same ones, and hashes
// every item.
func (v *vecIndex) hashAll() {
	rng := rand.New(rand.NewPCG(uint64(v.dim), 0x5eed_c0de))
	v.planes = make([]float32, lshTables*lshBits*v.dim)
	for i := range v.planes {
		v.planes[i] = float32(rng.NormFloat64())
	}
	v.buckets = make([][]ItemID, lshTables<<lshBits)
	for _, id := range v.items { // ascending: buckets stay sorted
		vec := v.vecs[id]
		for t := range lshTables {
			b := &v.buckets[t*(1<<lshBits)+v.hash(t, vec)]
			*b = append(*b, id)
		}
	}
}

func (v *vecIndex) hash(table int, vec []float32) int {
	h := 0
	for bit := range lshBits {
		p := v.planes[(table*lshBits+bit)*v.dim:][:v.dim]
		s := float32(0)
		for i, x := range vec {
			s += x * p[i]
		}
		if s >= 0 {
			h |= 1 << bit
		}
	}
	return h
}

// candidates appends the items that may be close to vec, ascending, no
// repeats: every item while there are at most exact of them, else the
// union of vec's buckets.
func (v *vecIndex) candidates(vec []float32, exact int, dst []ItemID) []ItemID {
	if len(v.items) <= exact || v.planes == nil {
		return append(dst, v.items...)
	}
	start := len(dst)
	for t := range lshTables {
		dst = append(dst, v.buckets[t*(1<<lshBits)+v.hash(t, vec)]...)
	}
	part := dst[start:]
	slices.Sort(part)
	return dst[:start+len(slices.Compact(part))]
}
